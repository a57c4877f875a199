"""Chance of completion: a semester simulated night by night under weather, seeing and competing requests.

A verdict says whether a request *can* be done in a semester of average weather
with nothing else on the telescope. :func:`simulate_semester` says whether it
*will* be: it draws many realisations of the semester's weather and seeing
(:mod:`feasibility.engine.weather`), hands out each night's time among all the
requests that can use it (:mod:`feasibility.engine.simulate_plan` for which can,
:mod:`feasibility.engine.simulate_dispatch` for the rule) and counts, per request
and proposal, how often it gets its hours, and per instrument and lunar time how
the offered time was used, lost to weather and asked for.

The hours a request must obtain are the engine's hours needed for its goal at
the design conditions (``hours="needed"``, the figure ``hours_needed`` of its
check; the hours requested when the check gives none), or the hours requested
(``hours="requested"``).

Only feasible and marginal requests take part in the dispatch. A request the
engine found infeasible cannot be completed in any semester (its hours needed
can be thousands of times what it asked for), so it is listed with a chance of
0, its hours requested as its hours to obtain, and ``"dispatched": false``; it
asks nothing of the offered time, so it does not inflate the oversubscription.

Realisations are drawn in fixed blocks of :data:`BLOCK` from one
``numpy.random.SeedSequence(seed)`` (block ``i`` from its ``i``-th child), so the
same seed gives the same answer, and a longer run begins with the realisations of
a shorter one.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import InstrumentSchedule, Observatory, Proposal
from feasibility.engine.evaluate import check_proposal
from feasibility.engine.simulate_dispatch import dispatch, draw_lottery, slot_order
from feasibility.engine.simulate_plan import DEFAULT_SLOT_MINUTES, LUNAR_TIMES, Plan, PlanRequest, build_plan
from feasibility.engine.skygrid import SkyGrid, sky_grid
from feasibility.engine.weather import NightClimate, Weather, draw_weather, night_climate
from feasibility.results import COMPETING_LEVELS

__all__ = ["BLOCK", "LeftOut", "Outcomes", "run_realisations", "simulate_semester", "summarise"]

#: Realisations drawn and dispatched together (a fixed size, so that results do not depend on how a run is cut).
BLOCK = 500

HoursBasis = Literal["needed", "requested"]
Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class LeftOut:
    """A request kept out of the dispatch because the engine found it infeasible: listed with a chance of 0."""

    proposal_id: str
    label: str
    instrument: str
    rank: float
    hours_requested: float
    reason: str


@dataclass(frozen=True)
class Outcomes:
    """Every realisation's result: hours obtained per request, and per bucket the hours lost to weather and used."""

    hours_obtained: NDArray[np.float64]
    """(realisations, requests)."""
    hours_lost: NDArray[np.float64]
    """(realisations, buckets): offered hours on bad nights."""
    hours_used: NDArray[np.float64]
    """(realisations, buckets): hours of the slots requests took."""


def run_realisations(plan: Plan, climate: NightClimate, realisations: int, seed: int, progress: Progress | None = None) -> Outcomes:
    """Draw ``realisations`` semesters of weather (in blocks of :data:`BLOCK`) and dispatch each; see the module docstring."""
    order = slot_order(plan)
    children = np.random.SeedSequence(seed).spawn(-(-realisations // BLOCK))
    offered = _bucket_matrix(plan)
    obtained, lost, used = [], [], []
    done = 0
    for child in children:
        size = min(BLOCK, realisations - done)
        rng = np.random.default_rng(child)
        full = draw_weather(climate, BLOCK, rng)  # always a whole block, so a block's rows never depend on the run's length
        weather = Weather(clear=full.clear[:size], ln_seeing=full.ln_seeing[:size])
        lottery = draw_lottery(plan.n_requests, BLOCK, rng)[:size]
        outcome = dispatch(plan, weather, lottery, order)
        obtained.append(outcome.hours_obtained)
        cloudy = ~weather.clear[:, plan.slot_night] if plan.n_slots else np.zeros((size, 0), dtype=bool)
        lost.append((cloudy * plan.slot_hours) @ offered)
        used.append(((outcome.taker >= 0) * plan.slot_hours) @ offered)
        done += size
        if progress is not None:
            progress(done, realisations)
    return Outcomes(np.concatenate(obtained), np.concatenate(lost), np.concatenate(used))


def simulate_semester(
    proposals: Sequence[Proposal],
    observatory: Observatory,
    schedule: InstrumentSchedule | None = None,
    *,
    ranks: Mapping[str, float] | None = None,
    realisations: int = 1000,
    seed: int = 0,
    hours: HoursBasis = "needed",
    slot_minutes: float = DEFAULT_SLOT_MINUTES,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Simulate the proposals' semester ``realisations`` times; the chance of completion and the use of time, as a mapping.

    All proposals must be for one semester the observatory has (``ValueError`` otherwise).
    ``ranks`` gives a proposal's rank by id (smaller goes first); proposals not listed
    come after every listed one; without ranks all are equal. A request the engine
    cannot check (it names something the observatory lacks) is left out and named in ``notes``;
    an infeasible request is listed with a chance of 0 but not dispatched (module docstring).
    """
    semesters = {p.semester for p in proposals}
    if len(semesters) != 1:
        raise ValueError(f"the proposals must be for one semester, got {sorted(semesters) or 'none'}")
    (name,) = semesters
    semester = observatory.semester_named(name)
    if semester is None:
        raise ValueError(f"the observatory has no semester {name!r}")
    if realisations < 1:
        raise ValueError("realisations must be at least 1")
    if schedule is not None and schedule.semester != name:
        schedule = None
    site = observatory.site
    grid = sky_grid(site.latitude_deg, site.longitude_deg, site.elevation_m, semester.first_night, semester.last_night)
    items, left_out, notes = _plan_requests(proposals, observatory, schedule, ranks, hours)
    plan = build_plan(items, observatory, grid, schedule, slot_minutes)
    climate = night_climate(observatory, grid.night_months)
    outcomes = run_realisations(plan, climate, realisations, seed, progress)
    result = summarise(plan, items, outcomes, left_out)
    place = {(p.id, r.label): (i, j) for i, p in enumerate(proposals) for j, r in enumerate(p.requests)}
    first = {p.id: i for i, p in enumerate(proposals)}
    result["requests"].sort(key=lambda row: place[(row["proposal_id"], row["label"])])  # in the documents' order
    result["proposals"].sort(key=lambda row: first[row["proposal_id"]])
    return {
        "semester": name,
        "observatory": observatory.name,
        "observatory_version": observatory.version,
        "schedule_version": schedule.version if schedule is not None else None,
        "realisations": realisations,
        "seed": seed,
        "hours_basis": hours,
        "slot_minutes": slot_minutes,
        "model": _model(climate, grid),
        **result,
        "notes": notes + ([] if schedule is not None else ["no instrument schedule: every instrument is taken as mounted every night"]),
    }


def summarise(plan: Plan, items: Sequence[PlanRequest], outcomes: Outcomes, left_out: Sequence[LeftOut] = ()) -> dict[str, list[dict[str, Any]]]:
    """Per request, per proposal and per (instrument, lunar time): chances, expected hours and their spread.

    ``left_out`` requests (infeasible) are listed with a chance of 0; a proposal with one is never complete.
    """
    obtained, needed = outcomes.hours_obtained, plan.hours_needed
    complete = obtained >= needed[None, :] - 1e-9
    half = obtained >= 0.5 * needed[None, :] - 1e-9
    opportunity = np.zeros(plan.n_requests)
    for s, candidates in enumerate(plan.candidates):
        opportunity[candidates] += plan.slot_hours[s]

    requests = []
    for k, item in enumerate(items):
        requests.append(
            {
                "proposal_id": item.proposal_id,
                "label": item.label,
                "instrument": item.instrument.name,
                "rank": item.rank,
                "hours_to_obtain": round(float(needed[k]), 3),
                "hours_offered_clear_sky": round(float(opportunity[k]), 2),
                "dispatched": True,
                **_chances(complete[:, k], half[:, k], obtained[:, k]),
            }
        )
    runs = obtained.shape[0]
    never = np.zeros(runs, dtype=bool)
    for out in left_out:
        requests.append(
            {
                "proposal_id": out.proposal_id,
                "label": out.label,
                "instrument": out.instrument,
                "rank": out.rank,
                "hours_to_obtain": round(out.hours_requested, 3),
                "hours_offered_clear_sky": 0.0,
                "dispatched": False,
                "left_out_because": out.reason,
                **_chances(never, never, np.zeros(runs)),
            }
        )

    proposals = []
    order: dict[str, tuple[list[int], list[LeftOut]]] = {}
    for k, item in enumerate(items):
        order.setdefault(item.proposal_id, ([], []))[0].append(k)
    for out in left_out:
        order.setdefault(out.proposal_id, ([], []))[1].append(out)
    ranks = {item.proposal_id: item.rank for item in items} | {out.proposal_id: out.rank for out in left_out}
    for proposal_id, (members, outs) in order.items():
        total = obtained[:, members].sum(axis=1)
        wanted = float(needed[members].sum()) + sum(out.hours_requested for out in outs)
        done = np.all(complete[:, members], axis=1) & (not outs)
        proposals.append(
            {
                "proposal_id": proposal_id,
                "rank": ranks[proposal_id],
                "requests": len(members) + len(outs),
                "requests_infeasible": len(outs),
                "hours_to_obtain": round(wanted, 3),
                **_chances(done, total >= 0.5 * wanted - 1e-9, total),
            }
        )

    demand = _demand(plan)
    offered = plan.slot_hours @ _bucket_matrix(plan) if plan.n_slots else np.zeros(len(plan.buckets))
    time = []
    for b, (instrument, lunar) in enumerate(plan.buckets):
        lost = outcomes.hours_lost[:, b]
        used = outcomes.hours_used[:, b]
        clear = float(offered[b] - lost.mean())
        time.append(
            {
                "instrument": instrument,
                "lunar_time": lunar,
                "hours_offered": round(float(offered[b]), 2),
                "hours_lost_to_weather": _spread(lost),
                "hours_used": _spread(used),
                "used_fraction_of_offered": round(float(used.mean() / offered[b]), 4) if offered[b] else None,
                "hours_asked": round(float(demand[b]), 2),
                "oversubscription": round(float(demand[b] / clear), 3) if clear > 0 else None,
            }
        )
    time.sort(key=lambda row: (row["instrument"], LUNAR_TIMES.index(row["lunar_time"])))
    return {"requests": requests, "proposals": proposals, "time": time}


def _chances(complete: NDArray[np.bool_], half: NDArray[np.bool_], hours: NDArray[np.float64]) -> dict[str, Any]:
    """Chance of completion and of at least half, each with its Monte Carlo standard error, and the hours obtained."""
    n = complete.size
    p, q = float(complete.mean()), float(half.mean())
    return {
        "chance_of_completion": round(p, 4),
        "chance_of_completion_error": round(math.sqrt(p * (1.0 - p) / n), 4),
        "chance_of_half": round(q, 4),
        "hours_obtained": _spread(hours),
    }


def _spread(values: NDArray[np.float64]) -> dict[str, float]:
    """Mean, standard deviation and the 10th, 50th and 90th percentiles."""
    p10, p50, p90 = np.percentile(values, [10, 50, 90]) if values.size else (0.0, 0.0, 0.0)
    return {
        "mean": round(float(values.mean()), 3) if values.size else 0.0,
        "spread": round(float(values.std()), 3) if values.size else 0.0,
        "p10": round(float(p10), 3),
        "p50": round(float(p50), 3),
        "p90": round(float(p90), 3),
    }


def _bucket_matrix(plan: Plan) -> NDArray[np.float64]:
    """(slots, buckets): 1 where a slot belongs to a bucket (a closed night's slots to none)."""
    matrix = np.zeros((plan.n_slots, len(plan.buckets)))
    inside = np.flatnonzero(plan.bucket_of_slot >= 0)
    matrix[inside, plan.bucket_of_slot[inside]] = 1.0
    return matrix


def _demand(plan: Plan) -> NDArray[np.float64]:
    """Hours asked of each bucket: each request's hours spread over the buckets in proportion to its usable slot hours there."""
    share = np.zeros((plan.n_requests, len(plan.buckets)))
    for s, candidates in enumerate(plan.candidates):
        b = plan.bucket_of_slot[s]
        if b >= 0 and candidates.size:
            share[candidates, b] += plan.slot_hours[s]
    totals = share.sum(axis=1, keepdims=True)
    share = np.divide(share, totals, out=np.zeros_like(share), where=totals > 0)
    return plan.hours_needed @ share


def _plan_requests(
    proposals: Sequence[Proposal],
    observatory: Observatory,
    schedule: InstrumentSchedule | None,
    ranks: Mapping[str, float] | None,
    hours: HoursBasis,
) -> tuple[list[PlanRequest], list[LeftOut], list[str]]:
    """Each feasible or marginal request with its hours to obtain, rank, and the airmass and wavelength
    its seeing limit is judged at; the infeasible ones, left out of the dispatch; notes on unchecked ones."""
    unlisted = (max(ranks.values()) + 1.0) if ranks else 0.0
    items: list[PlanRequest] = []
    left_out: list[LeftOut] = []
    notes: list[str] = []
    for proposal in proposals:
        rank = float(ranks.get(proposal.id, unlisted)) if ranks else 0.0
        result = check_proposal(proposal, observatory, schedule)
        for request, checked in zip(proposal.requests, result.requests):
            instrument = observatory.instrument_named(request.instrument)
            if instrument is None or checked.verdict.value == "unchecked":
                notes.append(f"{proposal.id} {request.label}: left out, the engine could not check it")
                continue
            if checked.verdict.value not in COMPETING_LEVELS:  # infeasible (unchecked ones are named in the notes above)
                left_out.append(
                    LeftOut(
                        proposal_id=proposal.id,
                        label=request.label,
                        instrument=instrument.name,
                        rank=rank,
                        hours_requested=float(request.hours_requested),
                        reason="the engine found it infeasible",
                    )
                )
                continue
            figures = checked.figures
            needed = _positive(figures.get("hours_needed"))
            to_obtain = request.hours_requested if hours == "requested" or needed is None else needed
            items.append(
                PlanRequest(
                    proposal_id=proposal.id,
                    label=request.label,
                    request=request,
                    instrument=instrument,
                    hours=to_obtain,
                    rank=rank,
                    airmass=_positive(figures.get("airmass_median")) or 1.0,
                    wavelength_nm=_positive(figures.get("wavelength_nm")) or 500.0,
                )
            )
    return items, left_out, notes


def _positive(value: object) -> float | None:
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value) and value > 0:
        return float(value)
    return None


def _model(climate: NightClimate, grid: SkyGrid) -> dict[str, Any]:
    """The weather model's settings as used, for the record."""
    return {
        "nights": grid.n_nights,
        "usable_night_fraction_mean": round(float(climate.usable_fraction.mean()), 4) if climate.n_nights else None,
        "persistent_weather": bool(np.any(np.abs(climate.clear_after_clear - climate.usable_fraction) > 1e-12)),
        "seeing_log_spread": climate.seeing_log_spread,
        "dispatch_rule": "rank first, then the request with the fewest opportunities left, then a lottery drawn per realisation",
    }
