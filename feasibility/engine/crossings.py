"""A target's altitude-limit crossings solved night by night, instead of testing every instant.

Within one night the grid's rotation to the local frame is east-north-up · R3(ERA)
· C2I with C2I fixed (:class:`~feasibility.engine.skygrid.NightTurns`), so with
``w = C2I v`` the sine of the target's altitude is

    sin h = sin φ w_z + cos φ ρ cos(ERA + λ − α),   ρ = hypot(w_x, w_y), α = atan2(w_y, w_x),

and the instants above a limit ``sin h ≥ s`` are those whose hour angle lies within
± arccos((s − sin φ w_z) / (cos φ ρ)) of a transit: at most two runs of instants per
night (this transit's and the next one's), whose ends follow from the evenly spaced
angles. Each end found this way is then settled by the exact per-instant product
(``up @ v``) at the instant on either side, so the instants chosen are the ones the
per-instant comparison chooses, except where the two products differ in the last
bit right at the limit (tests/engine/test_crossings.py compares both paths).

The work per request is a few dozen operations on per-night arrays and one small
gather at the ends, instead of a product over every instant of the semester.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from feasibility.engine.skygrid import NightSamples, NightTurns

__all__ = ["highest_sine", "instants_above"]

#: Analytic ends are widened by this fraction of a step before the exact product settles them: far above the
#: analytic form's error (about 1e-9 of a step; the grid's Earth rotation is linear within a night to 5e-5 of one).
_WIDEN = 1e-3
_TWO_PI = 2.0 * math.pi


def instants_above(
    view: NightSamples, vector: NDArray[np.float64], sin_low: float, sin_high: float | None = None
) -> NDArray[np.bool_] | None:
    """The instants of ``view`` with ``sin_low <= up @ vector`` (and ``<= sin_high`` when given), as a mask.

    None when the view has no :class:`NightTurns` (the caller then takes the per-instant path).
    """
    turns = view.turns
    if turns is None:
        return None
    a, b, alpha = _coefficients(turns, vector)
    mask = _runs_mask(view, turns, vector, a, b, alpha, sin_low, strict=False)
    if sin_high is not None and float((a + b).max(initial=-2.0)) >= sin_high - 1e-9:
        mask &= ~_runs_mask(view, turns, vector, a, b, alpha, sin_high, strict=True)
    return mask


def highest_sine(view: NightSamples, vector: NDArray[np.float64]) -> float | None:
    """The largest ``up @ vector`` over the view's instants (exact values at each night's candidate instants:
    its ends and the instants on either side of each transit); None without :class:`NightTurns` or instants."""
    turns = view.turns
    if turns is None or view.size == 0:
        return None
    a, b, alpha = _coefficients(turns, vector)
    first = view.night_starts[:-1]
    counts = np.diff(view.night_starts)
    offset = turns.phase - alpha
    m = np.ceil(offset / _TWO_PI)
    transits = np.stack([(_TWO_PI * m - offset) / turns.rate, (_TWO_PI * (m + 1.0) - offset) / turns.rate], axis=1)
    last = (counts - 1)[:, None]
    candidates = np.concatenate(
        [np.zeros((counts.size, 1)), last, np.floor(transits), np.ceil(transits)], axis=1
    )
    candidates = np.clip(candidates, 0, np.maximum(last, 0)).astype(np.intp)
    indices = (first[:, None] + candidates)[counts > 0].ravel()
    return float((np.take(view.up, indices, axis=0) @ vector).max())


def _coefficients(turns: NightTurns, vector: NDArray[np.float64]) -> tuple[NDArray[np.float64], ...]:
    """Per night: a = sin φ w_z, b = cos φ ρ and α (module docstring)."""
    w = turns.celestial_to_intermediate @ vector
    return turns.sin_lat * w[:, 2], turns.cos_lat * np.hypot(w[:, 0], w[:, 1]), np.arctan2(w[:, 1], w[:, 0])


def _runs_mask(
    view: NightSamples,
    turns: NightTurns,
    vector: NDArray[np.float64],
    a: NDArray[np.float64],
    b: NDArray[np.float64],
    alpha: NDArray[np.float64],
    threshold: float,
    strict: bool,
) -> NDArray[np.bool_]:
    """The instants with ``up @ vector >= threshold`` (``>`` when ``strict``), as runs per night turned into a mask."""
    first = view.night_starts[:-1]
    counts = np.diff(view.night_starts)
    with np.errstate(divide="ignore", invalid="ignore"):
        cosine = (threshold - a) / b
    # Nights whose highest point stays below the limit (with room for rounding) have no run.
    possible = (counts > 0) & ~(cosine > 1.0 + 1e-9)
    half = np.arccos(np.clip(np.nan_to_num(cosine, nan=2.0, posinf=2.0, neginf=-2.0), -1.0, 1.0))
    offset = turns.phase - alpha
    m = np.ceil((offset - half) / _TWO_PI)  # the first transit whose run ends at or after the night's first instant
    rate = turns.rate
    starts, stops = [], []
    for shift in (0.0, 1.0):
        centre = (_TWO_PI * (m + shift) - offset) / rate
        lo = np.maximum(np.ceil(centre - half / rate - _WIDEN), 0.0)
        hi = np.minimum(np.floor(centre + half / rate + _WIDEN), counts - 1.0)
        keep = possible & (lo <= hi)
        starts.append((first + lo)[keep])
        stops.append((first + hi)[keep])
    lo_all = np.concatenate(starts).astype(np.intp)
    hi_all = np.concatenate(stops).astype(np.intp)
    if not lo_all.size:
        return np.zeros(view.size, dtype=bool)
    # Settle each end with the exact product: an end the exact comparison leaves out moves one instant in.
    ends = np.take(view.up, np.concatenate([lo_all, hi_all]), axis=0) @ vector
    inside = ends > threshold if strict else ends >= threshold
    lo_all = lo_all + ~inside[: lo_all.size]
    hi_all = hi_all - ~inside[lo_all.size :]
    kept = lo_all <= hi_all
    lo_all, hi_all = lo_all[kept], hi_all[kept]
    order = np.argsort(lo_all, kind="stable")
    lo_all, hi_all = lo_all[order], hi_all[order]
    # Merge runs that touch or overlap (a night's two runs when the target hardly sets), then paint the mask.
    reach = np.maximum.accumulate(hi_all)
    new = np.ones(lo_all.size, dtype=bool)
    new[1:] = lo_all[1:] > reach[:-1] + 1
    run_lo = lo_all[new]
    run_hi = np.maximum.reduceat(hi_all, np.flatnonzero(new))
    lengths = np.empty(2 * run_lo.size + 1, dtype=np.intp)
    lengths[0] = run_lo[0]
    lengths[1:-1:2] = run_hi - run_lo + 1
    lengths[2:-1:2] = run_lo[1:] - run_hi[:-1] - 1
    lengths[-1] = view.size - run_hi[-1] - 1
    pattern = np.zeros(lengths.size, dtype=bool)
    pattern[1::2] = True
    return np.repeat(pattern, lengths)
