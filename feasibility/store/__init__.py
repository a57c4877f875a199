"""The store: database tables, engine and sessions, and the queries the service needs."""
