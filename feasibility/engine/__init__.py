"""The feasibility engine: sky, Moon, schedule and exposure checks of a proposal over a semester.

    from feasibility.engine import check_proposal
    result = check_proposal(proposal, observatory, schedule)

astropy is configured for offline use (no downloads) when this package is imported.
"""

from feasibility.offline import configure_offline

configure_offline()

from feasibility.engine.evaluate import check_proposal  # noqa: E402  (after the offline configuration)

__all__ = ["check_proposal"]
