"""Benchmark of the semester simulation (not a test): realisations of a 200-proposal semester on one core.

Run:  python benchmarks/bench_simulate.py [--proposals 200] [--realisations 1000] [--loop-realisations 20]

Prints, in one run on one core (BLAS threads pinned to 1):

- the time to prepare the semester (each proposal checked by the engine, the
  slots and the requests that can use them), sky grid already cached;
- the time of ``--realisations`` realisations (weather drawn, slots dispatched
  over all realisations at once with NumPy, summaries) — the figure the goal is
  about (issue: 1,000 realisations of a 200-proposal semester in at most 60 s);
- the same rule as a plain Python loop over realisations
  (:func:`feasibility.engine.simulate_dispatch.dispatch_one`), timed on
  ``--loop-realisations`` of the same realisations and scaled to ``--realisations``,
  and the speed ratio; the loop's hours are checked equal to the vectorised ones.

Wall and CPU time are both shown: on a shared machine CPU time is the figure to compare.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse  # noqa: E402
import random  # noqa: E402
import time  # noqa: E402
from importlib import resources  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document  # noqa: E402
from feasibility.engine.simulate import _plan_requests, run_realisations, summarise  # noqa: E402
from feasibility.engine.simulate_dispatch import dispatch, dispatch_one, draw_lottery, slot_order  # noqa: E402
from feasibility.engine.simulate_plan import build_plan  # noqa: E402
from feasibility.engine.skygrid import sky_grid  # noqa: E402
from feasibility.engine.weather import draw_weather, night_climate  # noqa: E402

SEMESTER = "2027A"
REQUESTS_PER_PROPOSAL = 4


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--proposals", type=int, default=200)
    parser.add_argument("--realisations", type=int, default=1000)
    parser.add_argument("--loop-realisations", type=int, default=20, help="realisations for the plain-loop baseline (default 20)")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()

    data = Path(str(resources.files("feasibility") / "data"))
    observatory = load_document(Observatory, data / "observatory.yaml")
    schedule = load_document(InstrumentSchedule, data / f"schedule-{SEMESTER}.yaml")
    semester = observatory.semester_named(SEMESTER)
    assert semester is not None
    site = observatory.site
    grid = sky_grid(site.latitude_deg, site.longitude_deg, site.elevation_m, semester.first_night, semester.last_night)

    rng = random.Random(args.seed)
    proposals = [
        parse_document(
            Proposal,
            {
                "id": f"BENCH-{p:04d}",
                "semester": SEMESTER,
                "title": "benchmark",
                "pi": {"name": "Bench Mark", "email": "bench@example.org"},
                "requests": [_random_request(rng, p * REQUESTS_PER_PROPOSAL + i) for i in range(REQUESTS_PER_PROPOSAL)],
            },
        )
        for p in range(args.proposals)
    ]
    ranks = {p.id: float(rng.randint(1, 4)) for p in proposals}

    started, cpu = time.perf_counter(), time.process_time()
    items, left_out, _ = _plan_requests(proposals, observatory, schedule, ranks, "needed")
    plan = build_plan(items, observatory, grid, schedule)
    climate = night_climate(observatory, grid.night_months)
    prepare = (time.perf_counter() - started, time.process_time() - cpu)
    candidates = sum(c.size for c in plan.candidates)
    print(
        f"semester {SEMESTER}: {len(proposals)} proposals, {plan.n_requests} requests, {plan.n_slots} slots, "
        f"{candidates / max(1, plan.n_slots):.1f} candidate requests per slot on average"
    )
    print(f"prepare (engine checks + slots): {prepare[0]:7.2f} s wall, {prepare[1]:7.2f} s CPU")

    load_before = os.getloadavg()[0]
    started, cpu = time.perf_counter(), time.process_time()
    outcomes = run_realisations(plan, climate, args.realisations, args.seed)
    summary = summarise(plan, items, outcomes, left_out)
    simulate = (time.perf_counter() - started, time.process_time() - cpu)
    print(f"{args.realisations} realisations, vectorised (NumPy):  {simulate[0]:7.2f} s wall, {simulate[1]:7.2f} s CPU")
    print(
        f"prepare + realisations:                     {prepare[0] + simulate[0]:7.2f} s wall "
        f"(goal: 1,000 realisations of a 200-proposal semester in at most 60 s)"
    )

    # The plain Python loop over realisations, on the same weather as the vectorised dispatcher.
    generator = np.random.default_rng(args.seed)
    weather = draw_weather(climate, args.loop_realisations, generator)
    lottery = draw_lottery(plan.n_requests, args.loop_realisations, generator)
    vectorised = dispatch(plan, weather, lottery, slot_order(plan)).hours_obtained
    started, cpu = time.perf_counter(), time.process_time()
    looped = [dispatch_one(plan, weather.clear[r].tolist(), weather.ln_seeing[r].tolist(), lottery[r].tolist()) for r in range(args.loop_realisations)]
    loop = (time.perf_counter() - started, time.process_time() - cpu)
    scale = args.realisations / args.loop_realisations
    assert np.allclose(np.array(looped), vectorised), "the plain loop and the vectorised dispatcher disagree"
    started, cpu = time.perf_counter(), time.process_time()
    dispatch(plan, weather, lottery, slot_order(plan))
    small = (time.perf_counter() - started, time.process_time() - cpu)
    print(
        f"plain Python loop, {args.loop_realisations} realisations: {loop[0]:7.2f} s wall, {loop[1]:7.2f} s CPU; "
        f"scaled to {args.realisations}: {loop[1] * scale:8.1f} s CPU (same hours as the vectorised dispatcher: yes)"
    )
    print(
        f"speed ratio, vectorised over the plain loop at {args.realisations} realisations: {loop[1] * scale / simulate[1]:6.1f}x CPU "
        f"(dispatch alone on {args.loop_realisations} realisations: {small[1]:.2f} s CPU)"
    )
    complete = [row["chance_of_completion"] for row in summary["requests"]]
    print(f"requests: mean chance of completion {np.mean(complete):.3f}; {sum(c >= 0.9 for c in complete)} of {len(complete)} at 0.9 or more")
    print(f"load average (1 min) before and after: {load_before:.1f}, {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


def _random_request(rng: random.Random, i: int) -> dict[str, Any]:
    """A plausible request: a random southern or equatorial target on a random instrument setup."""
    kind = rng.choice(["KESTREL", "KESTREL", "HERON", "OWL"])
    request: dict[str, Any] = {
        "label": f"r{i}",
        "target": {"name": f"target {i}", "ra": rng.uniform(0.0, 359.9), "dec": rng.uniform(-85.0, 35.0)},
        "instrument": kind,
        "hours_requested": rng.choice([1.0, 2.0, 4.0, 8.0]),
        "goal": {"snr": rng.choice([10, 30, 100])},
        "constraints": {
            "max_airmass": rng.choice([1.3, 1.5, 2.0, 2.5]),
            "min_moon_separation_deg": rng.choice([10.0, 30.0, 60.0]),
            "sky": rng.choice([None, "dark", "grey", "bright"]),
            "max_seeing_arcsec": rng.choice([None, None, 0.8, 1.0, 1.5]),
        },
    }
    if kind == "KESTREL":
        band = rng.choice(["B", "V", "R", "I"])
        request.update(setup={"filter": band}, brightness={"magnitude": rng.uniform(14.0, 22.0), "band": band})
    elif kind == "OWL":
        band = rng.choice(["J", "H", "Ks"])
        request.update(setup={"filter": band}, brightness={"magnitude": rng.uniform(12.0, 18.0), "band": band})
    else:
        request.update(
            setup={"grating": "R600", "slit_arcsec": 1.2, "central_wavelength_nm": 600.0},
            brightness={"magnitude": rng.uniform(12.0, 17.0), "band": "V"},
        )
    return request


if __name__ == "__main__":
    main()
