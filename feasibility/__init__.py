"""Technical feasibility checks of telescope proposals over a whole semester.

The engine (:mod:`feasibility.engine`) decides, with figures, whether each
observation request of a proposal can be done at an observatory in a semester;
the store, web application and workers around it make that a service.
"""

__all__ = ["__version__"]

__version__ = "0.1.0"
