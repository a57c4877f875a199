"""The hours a semester offers, as the committee's overview asks for them: a thin caller of the engine.

The reduction of the sky grid to night and dark hours per night and per hour of
right ascension is :mod:`feasibility.engine.semester_offer`; the pages only ask
for it (by observatory version and semester) and show it.
"""

from __future__ import annotations

from feasibility.engine.semester_offer import LUNAR_TIMES, TWILIGHT_ALTITUDE, SemesterOffer, instrument_hours_offered, lunar_offer, semester_offer

__all__ = ["LUNAR_TIMES", "TWILIGHT_ALTITUDE", "SemesterOffer", "instrument_hours_offered", "lunar_offer", "semester_offer"]
