"""Handing out a semester's slots to requests, for many weather realisations at once.

The rule, slot by slot in time order, the same in every realisation:

1. A request *can take* a slot when the plan lists it for the slot (instrument
   mounted, target usable, Moon constraints met), the night is usable in this
   realisation, the night's seeing meets the request's image-quality limit, and
   the request still lacks hours.
2. Of those, the slot goes to the request whose proposal has the best (smallest)
   rank; then to the one with the fewest opportunities left (slots the plan lists
   for it from this one to the end of the semester, whatever the weather: the
   request hardest to place goes first); then by a lottery drawn once per
   realisation (a random order of all requests), so that identical requests share
   their chances instead of the first listed always winning.
3. The slot's hours count towards that request; a request stops taking slots once
   it has its hours (its last slot may be only partly needed; the rest is unused).

:func:`dispatch` applies the rule to every realisation at once with NumPy (the
order of steps 2's first two keys does not depend on the weather, so it is computed
once per slot); :func:`dispatch_one` is the same rule as a plain Python loop for one
realisation, kept as the reference the tests compare with and the benchmark times.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from feasibility.engine.simulate_plan import Plan
from feasibility.engine.weather import Weather

__all__ = ["Dispatch", "dispatch", "dispatch_one", "draw_lottery", "slot_order"]


@dataclass(frozen=True)
class Dispatch:
    """The outcome of dispatching: per realisation and request the hours obtained; per realisation and slot the taker."""

    hours_obtained: NDArray[np.float64]
    """(realisations, requests), at most each request's hours needed."""
    taker: NDArray[np.int32]
    """(realisations, slots): the request that took the slot, −1 for none."""


def draw_lottery(n_requests: int, realisations: int, rng: np.random.Generator) -> NDArray[np.int32]:
    """Per realisation, a random order of the requests (each row a permutation of 0 … n−1): the last tie-break."""
    return np.argsort(rng.random((realisations, n_requests)), axis=1).argsort(axis=1).astype(np.int32)


def slot_order(plan: Plan) -> list[NDArray[np.int64]]:
    """Per slot, each candidate's place in the weather-free order (rank, then opportunities left); ties share a place."""
    total = np.zeros(plan.n_requests, dtype=np.int64)
    for candidates in plan.candidates:
        total[candidates] += 1
    seen = np.zeros(plan.n_requests, dtype=np.int64)
    places: list[NDArray[np.int64]] = []
    for candidates in plan.candidates:
        left = total[candidates] - seen[candidates]
        keys = np.stack([plan.rank[candidates], left.astype(float)], axis=1)
        _, place = np.unique(keys, axis=0, return_inverse=True)
        places.append(place.reshape(-1).astype(np.int64))
        seen[candidates] += 1
    return places


def dispatch(plan: Plan, weather: Weather, lottery: NDArray[np.int32], order: list[NDArray[np.int64]] | None = None) -> Dispatch:
    """Apply the rule (module docstring) to every realisation of ``weather`` at once."""
    realisations, n_requests = weather.realisations, plan.n_requests
    order = slot_order(plan) if order is None else order
    remaining = np.tile(plan.hours_needed, (realisations, 1))
    taker = np.full((realisations, plan.n_slots), -1, dtype=np.int32)
    slot_hours, slot_night, limits = plan.slot_hours, plan.slot_night, plan.ln_seeing_limit
    for s, candidates in enumerate(plan.candidates):
        if not candidates.size:
            continue
        night = slot_night[s]
        rows = np.flatnonzero(weather.clear[:, night])
        if not rows.size:
            continue
        wanting = remaining[np.ix_(rows, candidates)] > 0.0
        wanting &= weather.ln_seeing[rows, night][:, None] <= limits[candidates][None, :]
        score = np.where(wanting, order[s][None, :] * n_requests + lottery[np.ix_(rows, candidates)], np.iinfo(np.int64).max)
        best = score.argmin(axis=1)
        took = wanting[np.arange(rows.size), best]
        rows, chosen = rows[took], candidates[best[took]]
        remaining[rows, chosen] -= slot_hours[s]
        taker[rows, s] = chosen
    return Dispatch(hours_obtained=plan.hours_needed[None, :] - np.maximum(remaining, 0.0), taker=taker)


def dispatch_one(plan: Plan, clear: list[bool], ln_seeing: list[float], lottery: list[int]) -> list[float]:
    """The same rule for one realisation as a plain Python loop; returns the hours obtained per request."""
    total = [0] * plan.n_requests
    candidates_by_slot = [c.tolist() for c in plan.candidates]
    for candidates in candidates_by_slot:
        for k in candidates:
            total[k] += 1
    seen = [0] * plan.n_requests
    needed = plan.hours_needed.tolist()
    remaining = list(needed)
    rank, limits = plan.rank.tolist(), plan.ln_seeing_limit.tolist()
    hours, nights = plan.slot_hours.tolist(), plan.slot_night.tolist()
    for s, candidates in enumerate(candidates_by_slot):
        night = nights[s]
        best: tuple[float, int, int] | None = None
        chosen = -1
        for k in candidates:
            if clear[night] and remaining[k] > 0.0 and ln_seeing[night] <= limits[k]:
                key = (rank[k], total[k] - seen[k], lottery[k])
                if best is None or key < best:
                    best, chosen = key, k
        for k in candidates:
            seen[k] += 1
        if chosen >= 0:
            remaining[chosen] -= hours[s]
    return [n - max(r, 0.0) for n, r in zip(needed, remaining)]
