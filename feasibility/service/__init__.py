"""The service around the engine: submissions, the queue, runs and re-checks."""
