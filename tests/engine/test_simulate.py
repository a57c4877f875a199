"""The semester simulation against things computed independently (docs/references.md, "Semester simulation").

Most tests build small semesters by hand (a few nights, one slot each) so that the
exact answer follows from probability theory: the binomial sum for independent
nights, the occupation-time variance of a stationary two-state Markov chain for
persistent weather, symmetry for identical competing requests. Statistical
tolerances are 4-5 Monte Carlo standard errors, fixed seeds keep them repeatable.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from feasibility.documents import DocumentError, Observatory, parse_document
from feasibility.engine.exposure_checks import diffraction_fwhm_arcsec, fraction_seeing_better, seeing_fwhm_arcsec
from feasibility.engine.simulate import BLOCK, run_realisations, simulate_semester
from feasibility.engine.simulate_dispatch import dispatch, dispatch_one, draw_lottery, slot_order
from feasibility.engine.simulate_plan import Plan, PlanRequest, seeing_limit_ln
from feasibility.engine.weather import NightClimate, draw_weather


def _plan(
    usable: list[list[int]],
    hours_needed: list[float],
    *,
    rank: list[float] | None = None,
    ln_seeing_limit: list[float] | None = None,
    slot_night: list[int] | None = None,
) -> Plan:
    """A hand-made plan: ``usable[s]`` lists the requests that can use slot ``s``; 1-hour slots, one per night by default."""
    n = len(hours_needed)
    return Plan(
        hours_needed=np.array(hours_needed, dtype=float),
        rank=np.array(rank or [0.0] * n, dtype=float),
        ln_seeing_limit=np.array(ln_seeing_limit or [math.inf] * n, dtype=float),
        slot_night=np.array(slot_night if slot_night is not None else range(len(usable)), dtype=np.intp),
        slot_hours=np.ones(len(usable)),
        candidates=[np.array(c, dtype=np.intp) for c in usable],
        bucket_of_slot=np.full(len(usable), -1, dtype=np.intp),
    )


def _climate(nights: int, fraction: float, persistence: float | None = None, ln_median: float = 0.0, spread: float = 0.35) -> NightClimate:
    return NightClimate(
        usable_fraction=np.full(nights, fraction),
        clear_after_clear=np.full(nights, fraction if persistence is None else persistence),
        ln_median_seeing=np.full(nights, ln_median),
        seeing_log_spread=spread,
    )


def _binomial_tail(n: int, p: float, k: int) -> float:
    """P(X >= k) for X ~ Binomial(n, p), the sum of C(n, j) p^j (1-p)^(n-j) (math.comb; definition of the binomial law)."""
    return sum(math.comb(n, j) * p**j * (1.0 - p) ** (n - j) for j in range(k, n + 1))


def _normal_cdf(z: float) -> float:
    """Φ(z) = (1 + erf(z / √2)) / 2 (definition of the standard normal distribution)."""
    return 0.5 * (1.0 + math.erf(z / math.sqrt(2.0)))


def test_one_request_on_independent_nights_gets_the_binomial_chance() -> None:
    nights, needed, fraction = 30, 20, 0.7
    plan = _plan([[0]] * nights, [float(needed)])
    realisations = 20_000
    obtained = run_realisations(plan, _climate(nights, fraction), realisations, seed=11).hours_obtained[:, 0]
    expected = _binomial_tail(nights, fraction, needed)  # P(at least 20 usable nights of 30), binomial law
    error = math.sqrt(expected * (1.0 - expected) / realisations)
    assert abs(float((obtained >= needed).mean()) - expected) < 4.0 * error
    half = _binomial_tail(nights, fraction, needed // 2)
    assert abs(float((obtained >= needed / 2).mean()) - half) < 4.0 * math.sqrt(half * (1.0 - half) / realisations) + 1e-4


def test_a_seeing_limit_thins_the_nights_as_the_log_normal_law_says() -> None:
    nights, needed, fraction, spread = 25, 8, 0.8, 0.35
    ln_limit = math.log(0.7 / 0.85)  # 0.7" asked, median 0.85"
    plan = _plan([[0]] * nights, [float(needed)], ln_seeing_limit=[ln_limit])
    realisations = 20_000
    climate = _climate(nights, fraction, ln_median=0.0, spread=spread)
    obtained = run_realisations(plan, climate, realisations, seed=5).hours_obtained[:, 0]
    # A night serves when usable (chance f) and its seeing is good enough (Φ(ln(limit/median)/σ)), independently.
    chance_per_night = fraction * _normal_cdf(ln_limit / spread)
    expected = _binomial_tail(nights, chance_per_night, needed)
    assert abs(float((obtained >= needed).mean()) - expected) < 4.0 * math.sqrt(expected * (1.0 - expected) / realisations)


def test_the_seeing_limit_matches_the_image_quality_check() -> None:
    """P(night's seeing within the request's limit) equals the image-quality check's fraction of good seeing."""
    median, airmass, wavelength, aperture, limit = 0.85, 1.3, 650.0, 3.2, 0.9
    item = _item(max_seeing_arcsec=limit, airmass=airmass, wavelength_nm=wavelength)
    ln_limit = seeing_limit_ln(item, aperture)
    ours = _normal_cdf((ln_limit - math.log(median)) / 0.35)
    engine = fraction_seeing_better(limit, seeing_fwhm_arcsec(median, airmass, wavelength), diffraction_fwhm_arcsec(wavelength, aperture))
    assert ours == pytest.approx(engine, rel=1e-12)


def test_persistent_weather_raises_the_variance_as_the_two_state_chain_says() -> None:
    """Clear nights counted over n nights of a stationary two-state chain.

    With stationary clear fraction π, P(clear | clear) = a and P(clear | cloudy) = b,
    the indicator of a clear night has autocorrelation λ^k at lag k, λ = a − b (the
    chain's second eigenvalue), so the number of clear nights S_n has
    Var(S_n) = n π(1−π) (1+λ)/(1−λ) − 2 π(1−π) λ (1−λ^n)/(1−λ)²
    (the variance of the occupation time of a stationary two-state Markov chain; e.g.
    Kemeny & Snell, *Finite Markov Chains*, 1960; from memory, see docs/references.md).
    For independent nights (λ = 0) it is the binomial n π(1−π).
    """
    nights, pi, a = 60, 0.75, 0.9
    b = pi * (1.0 - a) / (1.0 - pi)
    lam = a - b
    formula = nights * pi * (1 - pi) * (1 + lam) / (1 - lam) - 2 * pi * (1 - pi) * lam * (1 - lam**nights) / (1 - lam) ** 2
    by_sum = pi * (1 - pi) * (nights + 2 * sum((nights - k) * lam**k for k in range(1, nights)))
    assert formula == pytest.approx(by_sum, rel=1e-12)  # the closed form agrees with the sum of autocovariances

    plan = _plan([[0]] * nights, [1e9])  # never complete: hours obtained = usable nights
    realisations = 40_000
    clear_nights = run_realisations(plan, _climate(nights, pi, a), realisations, seed=3).hours_obtained[:, 0]
    assert float(clear_nights.mean()) == pytest.approx(nights * pi, abs=5 * math.sqrt(formula / realisations))
    # Sampling error of a variance: about Var × √(2/(R−1)) for a near-normal sum; 5 of those.
    assert float(clear_nights.var(ddof=1)) == pytest.approx(formula, rel=5 * math.sqrt(2.0 / (realisations - 1)))
    binomial = nights * pi * (1 - pi)
    assert formula > 2.5 * binomial  # persistence more than doubles the variance here

    independent = run_realisations(plan, _climate(nights, pi), realisations, seed=3).hours_obtained[:, 0]
    assert float(independent.var(ddof=1)) == pytest.approx(binomial, rel=5 * math.sqrt(2.0 / (realisations - 1)))


def test_two_identical_requests_competing_for_one_slot_share_the_chance() -> None:
    fraction, realisations = 0.8, 20_000
    plan = _plan([[0, 1]], [1.0, 1.0])
    obtained = run_realisations(plan, _climate(1, fraction), realisations, seed=8).hours_obtained
    complete = obtained >= 1.0
    share = fraction / 2.0  # by symmetry each gets the slot half of the usable times
    error = math.sqrt(share * (1 - share) / realisations)
    assert abs(float(complete[:, 0].mean()) - share) < 4 * error
    assert abs(float(complete[:, 1].mean()) - share) < 4 * error
    assert not np.any(complete.all(axis=1))  # one slot, never both
    assert float(complete.any(axis=1).mean()) == pytest.approx(fraction, abs=4 * math.sqrt(fraction * (1 - fraction) / realisations))


def test_rank_goes_first_then_the_request_with_fewest_opportunities() -> None:
    clear = _climate(2, 1.0)
    ranked = _plan([[0, 1]], [1.0, 1.0], rank=[2.0, 1.0], slot_night=[0])
    obtained = run_realisations(ranked, _climate(1, 1.0), 200, seed=1).hours_obtained
    assert np.all(obtained[:, 1] == 1.0) and np.all(obtained[:, 0] == 0.0)
    # Request 0 can use both slots, request 1 only the first: the first goes to 1, the second to 0, always.
    scarce = _plan([[0, 1], [0]], [1.0, 1.0])
    obtained = run_realisations(scarce, clear, 200, seed=1).hours_obtained
    assert np.all(obtained == 1.0)


def test_the_vectorised_dispatcher_agrees_with_the_plain_loop() -> None:
    rng = np.random.default_rng(4)
    n_requests, n_nights, per_night = 12, 20, 4
    usable = [sorted(rng.choice(n_requests, size=rng.integers(0, 6), replace=False).tolist()) for _ in range(n_nights * per_night)]
    plan = _plan(
        usable,
        rng.choice([0.5, 1.0, 2.0, 3.0], size=n_requests).tolist(),
        rank=rng.integers(0, 3, size=n_requests).astype(float).tolist(),
        ln_seeing_limit=[math.inf if x < 0.5 else math.log(0.8) for x in rng.random(n_requests)],
        slot_night=np.repeat(np.arange(n_nights), per_night).tolist(),
    )
    weather = draw_weather(_climate(n_nights, 0.7, 0.85, ln_median=math.log(0.85)), 64, rng)
    lottery = draw_lottery(n_requests, 64, rng)
    vectorised = dispatch(plan, weather, lottery, slot_order(plan)).hours_obtained
    for r in range(64):
        looped = dispatch_one(plan, weather.clear[r].tolist(), weather.ln_seeing[r].tolist(), lottery[r].tolist())
        assert looped == pytest.approx(vectorised[r].tolist(), abs=1e-12)


def test_results_converge_as_realisations_grow() -> None:
    nights, needed, fraction = 20, 14, 0.7
    plan = _plan([[0]] * nights, [float(needed)])
    expected = _binomial_tail(nights, fraction, needed)
    for realisations in (250, 2_000, 16_000):
        obtained = run_realisations(plan, _climate(nights, fraction), realisations, seed=21).hours_obtained[:, 0]
        estimate = float((obtained >= needed).mean())
        assert abs(estimate - expected) < 4.0 * math.sqrt(expected * (1 - expected) / realisations)
    # The scatter between seeds shrinks as 1/√R: 16 times the realisations, about a quarter of the scatter.
    scatter = []
    for realisations in (250, 4_000):
        estimates = [
            float((run_realisations(plan, _climate(nights, fraction), realisations, seed=seed).hours_obtained[:, 0] >= needed).mean()) for seed in range(12)
        ]
        scatter.append(float(np.std(estimates)))
    assert scatter[1] < 0.5 * scatter[0]
    assert scatter[1] < 2.0 * math.sqrt(expected * (1 - expected) / 4_000)


def test_a_fixed_seed_reproduces_exactly_and_longer_runs_extend_shorter_ones() -> None:
    plan = _plan([[0, 1], [1, 2], [0, 2], [2]], [1.0, 1.5, 2.0], slot_night=[0, 0, 1, 2])
    climate = _climate(3, 0.6, 0.8)
    first = run_realisations(plan, climate, BLOCK + 37, seed=99)
    again = run_realisations(plan, climate, BLOCK + 37, seed=99)
    assert np.array_equal(first.hours_obtained, again.hours_obtained)
    other = run_realisations(plan, climate, BLOCK + 37, seed=100)
    assert not np.array_equal(first.hours_obtained, other.hours_obtained)
    longer = run_realisations(plan, climate, 2 * BLOCK + 5, seed=99)
    assert np.array_equal(longer.hours_obtained[: BLOCK + 37], first.hours_obtained)


def test_weather_chain_keeps_the_usable_night_fraction() -> None:
    """b = f(1−a)/(1−f) makes f the chain's stationary fraction: f = f a + (1−f) b."""
    climate = _climate(5, 0.62, 0.75)
    b = float(climate.clear_after_cloudy[0])
    assert 0.62 * 0.75 + 0.38 * b == pytest.approx(0.62, rel=1e-12)


# -- The climate fields in the observatory description ------------------------------------------------------------


def _observatory_data(demo_observatory: Observatory, **climate: object) -> dict[str, object]:
    data = demo_observatory.model_dump(mode="json")
    data["climate"].update(climate)  # type: ignore[union-attr]
    return data


def test_persistence_inconsistent_with_the_fraction_is_a_field_error(demo_observatory: Observatory) -> None:
    # f = 0.88 in October: a must be at least (2f − 1)/f = 0.864 for P(clear | cloudy) to stay at most 1.
    data = _observatory_data(demo_observatory, clear_after_clear={10: 0.5})
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, data)
    (problem,) = caught.value.problems
    assert problem.field == "climate.clear_after_clear"
    assert "month 10" in problem.message and "0.864" in problem.message
    every_night = _observatory_data(demo_observatory, usable_night_fraction={1: 1.0}, clear_after_clear={1: 0.9})
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, every_night)
    assert caught.value.problems[0].field == "climate.clear_after_clear"
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, _observatory_data(demo_observatory, clear_after_clear={13: 0.9}))
    assert caught.value.problems[0].field == "climate.clear_after_clear"


def test_the_climate_fields_are_optional_and_default_to_independent_nights(demo_observatory: Observatory) -> None:
    data = demo_observatory.model_dump(mode="json")
    del data["climate"]["clear_after_clear"], data["climate"]["seeing_log_spread"]  # type: ignore[union-attr]
    observatory = parse_document(Observatory, data)
    assert observatory.climate.clear_after_clear == {} and observatory.climate.seeing_log_spread is None
    from feasibility.engine.weather import night_climate

    climate = night_climate(observatory, np.array([1, 6, 10]))
    assert np.allclose(climate.clear_after_clear, climate.usable_fraction)
    assert np.allclose(climate.clear_after_cloudy, climate.usable_fraction)  # independent nights: a = b = f
    assert climate.seeing_log_spread == 0.35


# -- The demo semester end to end -----------------------------------------------------------------------------------


def test_demo_semester_offers_the_scheduled_true_night(demo_observatory: Observatory, demo_schedule, grid_2027a) -> None:
    from pathlib import Path

    from feasibility.documents import Proposal, load_document
    from tests.engine.conftest import DEMO_DATA

    proposals = [load_document(Proposal, Path(str(p))) for p in sorted((DEMO_DATA / "proposals").iterdir()) if p.name.endswith(".yaml")]
    proposals = [p for p in proposals if p.semester == "2027A"]
    result = simulate_semester(proposals, demo_observatory, demo_schedule, realisations=200, seed=2)
    again = simulate_semester(proposals, demo_observatory, demo_schedule, realisations=200, seed=2)
    assert result["requests"] == again["requests"]
    # Hours offered to KESTREL: its scheduled nights' astronomical night (the engine's night hours), to within
    # one 5-minute grid step per night from cutting the nights into slots.
    from feasibility.engine.sky_checks import night_availability

    kestrel = night_availability(grid_2027a, "KESTREL", demo_schedule)
    night_hours = float(grid_2027a.night_hours(-18.0)[kestrel].sum())
    offered = sum(row["hours_offered"] for row in result["time"] if row["instrument"] == "KESTREL")
    assert offered == pytest.approx(night_hours, abs=kestrel.sum() * grid_2027a.step_hours + 0.01)
    for row in result["requests"]:
        assert 0.0 <= row["chance_of_completion"] <= row["chance_of_half"] <= 1.0
        if row["hours_offered_clear_sky"] == 0.0:
            assert row["chance_of_completion"] == 0.0
    # Infeasible requests are listed with a chance of 0 but ask nothing of the offered time (issue: the simulation
    # is of the feasible and marginal requests); the engine's own verdicts say which they are.
    from feasibility.engine.evaluate import check_proposal

    infeasible = {
        (p.id, checked.label)
        for p in proposals
        for checked in check_proposal(p, demo_observatory, demo_schedule).requests
        if checked.verdict.value == "infeasible"
    }
    assert infeasible, "the demo examples include infeasible requests"
    assert {(row["proposal_id"], row["label"]) for row in result["requests"] if not row["dispatched"]} == infeasible
    for row in result["requests"]:
        if not row["dispatched"]:
            assert row["chance_of_completion"] == row["chance_of_half"] == 0.0 and row["hours_obtained"]["mean"] == 0.0
    dispatched_hours = sum(row["hours_to_obtain"] for row in result["requests"] if row["dispatched"] and row["hours_offered_clear_sky"] > 0)
    assert sum(row["hours_asked"] for row in result["time"]) == pytest.approx(dispatched_hours, rel=1e-6, abs=0.05)
    with_infeasible = {proposal_id for proposal_id, _ in infeasible}
    for row in result["proposals"]:
        if row["proposal_id"] in with_infeasible:
            assert row["chance_of_completion"] == 0.0 and row["requests_infeasible"] >= 1
    with pytest.raises(ValueError, match="one semester"):
        simulate_semester([*proposals, proposals[0].model_copy(update={"semester": "2027B"})], demo_observatory)


def _item(**values: object) -> PlanRequest:
    from feasibility.documents import ObservationRequest

    request = ObservationRequest.model_validate(
        {
            "label": "x",
            "target": {"name": "t", "ra": 10.0, "dec": -30.0},
            "instrument": "KESTREL",
            "setup": {"filter": "V"},
            "brightness": {"magnitude": 18.0, "band": "V"},
            "goal": {"snr": 10},
            "hours_requested": 1.0,
            "constraints": {"max_seeing_arcsec": values.pop("max_seeing_arcsec", None)},
        }
    )
    return PlanRequest(proposal_id="P", label="x", request=request, instrument=None, hours=1.0, **values)  # type: ignore[arg-type]
