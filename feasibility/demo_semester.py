"""A reproducible invented semester of demo proposals, for trying the committee's pages on a realistic load.

:func:`demo_semester` draws about 150 proposals for the demo observatory's 2027A
semester from a seeded random generator, so every call gives the same documents.
They are spread over the three instruments, the lunar times (dark, grey, bright),
right ascension and difficulty. Each proposal is drawn from one of three kinds of
request mixes, aimed (not guaranteed: the engine decides) at roughly 70 % feasible,
20 % marginal and 10 % infeasible verdicts; ``tests/web/test_demo.py`` checks the
mix with the real engine.

Each request is sized the way a proposer sizes one: the brightness, setup and S/N
goal are drawn first, the real engine (:func:`feasibility.engine.check_proposal`
on the draft, against the packaged demo observatory and schedule) says how many
hours the goal needs at the design conditions, and the proposer asks for that times
a small contingency (1.0 to 1.4), rounded up to a tenth of an hour and never under
:data:`MIN_BLOCK_HOURS`. Marginal requests ask for a bit less than the design
conditions need (but what the typical ones need), or carry a tight seeing limit or
a magnitude uncertain by 0.6 mag; infeasible ones point where the target never
rises, are far too faint, or ask for seeing the site never has. So the committee's
pressure views (requested ÷ offered) look like a real call. The drafts are checked
once per process (the result is remembered per seed and semester).

Everything here is invented: people, institutions, titles and target names. The
eight hand-written examples in ``feasibility/data/proposals`` stay the documented ones.
"""

from __future__ import annotations

import copy
import functools
import math
import random
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

__all__ = ["DEMO_SEED", "DEMO_SEMESTER", "demo_semester", "semester_yaml"]

#: The seed and the semester of the packaged generated set.
DEMO_SEED = 2027
DEMO_SEMESTER = "2027A"
#: How many proposals of each kind the generated set has (aimed-at verdicts, see the module's description).
KIND_COUNTS = {"easy": 113, "tight": 23, "hard": 14}
#: The shortest block a generated request asks for (hours): nobody asks for a few minutes of a night.
MIN_BLOCK_HOURS = 0.5
#: A proposer's contingency on the hours the goal needs at the design conditions (smallest, largest).
CONTINGENCY = (1.0, 1.4)
#: The design conditions' need a target's brightness is aimed at: log-uniform between these hours.
_AIM_LOG_HOURS = (math.log(0.6), math.log(6.0))
#: Rounds of moving the targets' magnitudes towards their aimed-at needs (each one engine check of the moved drafts).
_BRIGHTNESS_ROUNDS = 3

_GIVEN = (
    "Ilona",
    "Tavi",
    "Marek",
    "Oona",
    "Rafi",
    "Selin",
    "Bruno",
    "Keziah",
    "Anouk",
    "Dario",
    "Lumi",
    "Femke",
    "Ostap",
    "Yara",
    "Caio",
    "Nell",
    "Ivo",
    "Zaida",
    "Pim",
    "Rhea",
    "Teodor",
    "Ines",
    "Kaito",
    "Maren",
)
_FAMILY = (
    "Varnholt",
    "Quenby",
    "Lisandru",
    "Okavé",
    "Brennick",
    "Tamsort",
    "Villaro",
    "Haskeld",
    "Moravy",
    "Ferrent",
    "Oduya",
    "Castrel",
    "Nieminô",
    "Pellago",
    "Drossel",
    "Ambrin",
    "Kellisto",
    "Sorvane",
    "Uttley",
    "Marwick",
)
_PLACES = (
    "Institute of Invented Astrophysics",
    "Observatorio de la Meseta (invented)",
    "Lakeshore Physics School (invented)",
    "Northfold University (invented)",
    "Centro de Cielo Austral (invented)",
)
_TOPICS = (
    "Variable stars in",
    "Star formation across",
    "Chemical abundances in",
    "Faint companions in",
    "Dust and gas in",
    "Rotation curves of",
    "Transients in",
    "Stellar populations of",
)
_SUBJECTS = (
    "a southern field",
    "the outer disc of an invented spiral",
    "an invented open cluster",
    "a dwarf galaxy field",
    "a high-latitude cloud",
    "an invented group of galaxies",
    "a bulge window",
    "a young association",
)
_SKIES = ("dark", "grey", "bright", None)


def demo_semester(seed: int = DEMO_SEED, semester: str = DEMO_SEMESTER) -> list[dict[str, Any]]:
    """The generated proposals as documents (dicts a proposal file would hold), in id order."""
    return copy.deepcopy(_sized_semester(seed, semester))


@functools.lru_cache(maxsize=4)
def _sized_semester(seed: int, semester: str) -> list[dict[str, Any]]:
    """Draw the drafts, settle each target's brightness, then size every request from the engine's hours needed."""
    rng = random.Random(seed)
    kinds = [kind for kind, count in KIND_COUNTS.items() for _ in range(count)]
    rng.shuffle(kinds)
    drafts = [_proposal(rng, number + 1, kind, semester) for number, kind in enumerate(kinds)]
    check = _engine_for(semester)
    needs = [check(document) for document, _ in drafts]
    for _ in range(_BRIGHTNESS_ROUNDS):
        for k, (document, sizings) in enumerate(drafts):
            if _settle_brightness(document, sizings, needs[k]):
                needs[k] = check(document)
    for (document, sizings), need in zip(drafts, needs, strict=True):
        for request, sizing in zip(document["requests"], sizings, strict=True):
            request["hours_requested"] = _hours_asked(sizing, *need[request["label"]])
    return [document for document, _ in drafts]


def semester_yaml(document: dict[str, Any]) -> str:
    """One generated proposal as a YAML file's text, with a header saying it is invented."""
    import yaml

    header = "# Generated demo proposal (feasibility.demo_semester): invented people, titles and targets.\n"
    return header + yaml.safe_dump(document, sort_keys=False, allow_unicode=True)


def _proposal(rng: random.Random, number: int, kind: str, semester: str) -> tuple[dict[str, Any], list[_Sizing]]:
    given, family = rng.choice(_GIVEN), rng.choice(_FAMILY)
    count = rng.choices((1, 2, 3), weights=(5, 3, 1))[0]
    drawn = [_request(rng, k, kind if k == 0 else "easy") for k in range(count)]
    document = {
        "id": f"GEN-{semester}-{number:03d}",
        "semester": semester,
        "title": f"{rng.choice(_TOPICS)} {rng.choice(_SUBJECTS)}",
        "pi": {
            "name": f"{given} {family}",
            "email": f"{given.lower()}.{_ascii(family.lower())}@example.org",
            "institution": rng.choice(_PLACES),
        },
        "requests": [request for request, _ in drawn],
    }
    return document, [sizing for _, sizing in drawn]


@dataclass(frozen=True)
class _Sizing:
    """How a request's target brightness and hours are settled once the engine has said what it needs.

    ``aim_hours``: the design conditions' need the target's brightness is moved towards (a target worth a
    few hours of this telescope; None keeps the drawn brightness). ``rule``: ``design`` asks ``factor`` ×
    the design need; ``between`` asks that fraction of the way from the typical to the design need;
    ``fixed`` asks ``factor`` hours whatever is needed.
    """

    rule: str
    factor: float
    aim_hours: float | None


def _request(rng: random.Random, index: int, kind: str) -> tuple[dict[str, Any], _Sizing]:
    """One draft observation request and how to size it; ``kind`` easy (aimed at feasible), tight (marginal) or hard (infeasible)."""
    instrument = rng.choices(("KESTREL", "HERON", "OWL"), weights=(5, 3, 2))[0]
    ra_hours = rng.uniform(10.0, 22.0)  # on the meridian in the 2027A nights
    dec = rng.uniform(-65.0, 5.0)
    sky = rng.choice(_SKIES)
    constraints: dict[str, Any] = {"max_airmass": rng.choice((1.5, 1.8, 2.0))}
    if sky is not None:
        constraints["sky"] = sky
    setup, band, magnitude, snr = _setup(rng, instrument)
    brightness: dict[str, Any] = {"magnitude": magnitude, "band": band}
    sizing = _Sizing("design", rng.uniform(*CONTINGENCY), math.exp(rng.uniform(*_AIM_LOG_HOURS)))
    if kind == "tight":
        trouble = rng.choice(("seeing", "error", "short"))
        if trouble == "seeing":
            constraints["max_seeing_arcsec"] = rng.choice((0.6, 0.65, 0.7))
        elif trouble == "error":
            brightness["error"] = 0.6
        else:
            sizing = _Sizing("between", rng.uniform(0.3, 0.7), sizing.aim_hours)
    elif kind == "hard":
        trouble = rng.choice(("north", "faint", "seeing"))
        if trouble == "north":
            dec = rng.uniform(62.0, 80.0)  # never above the site's 15° limit at latitude −26°
        elif trouble == "faint":
            brightness["magnitude"] = round(magnitude + 7.0, 1)
            sizing = _Sizing("fixed", rng.uniform(2.0, 8.0), None)  # an over-optimistic proposer, far from the need
        else:
            constraints["max_seeing_arcsec"] = 0.3
    name = f"Field {_sexagesimal(ra_hours)}{'+' if dec >= 0 else '-'}{abs(int(dec)):02d}"
    request = {
        "label": f"r{index + 1}-{instrument.lower()}",
        "target": {"name": name, "ra": _sexagesimal(ra_hours, seconds=True), "dec": round(dec, 3)},
        "instrument": instrument,
        "setup": setup,
        "brightness": brightness,
        "goal": {"snr": snr},
        "hours_requested": 1.0,  # a placeholder: the engine's hours needed do not depend on it
        "constraints": constraints,
    }
    return request, sizing


def _settle_brightness(document: dict[str, Any], sizings: list[_Sizing], needs: dict[str, tuple[float | None, float | None]]) -> bool:
    """Move each target's magnitude towards its aimed-at need (hours ∝ flux⁻² when the sky dominates); True if any moved."""
    moved = False
    for request, sizing in zip(document["requests"], sizings, strict=True):
        design = needs[request["label"]][0]
        if sizing.aim_hours is None or design is None:
            continue
        step = max(-1.5, min(3.0, 1.25 * math.log10(sizing.aim_hours / design)))
        if abs(step) >= 0.05:
            request["brightness"]["magnitude"] = round(request["brightness"]["magnitude"] + step, 1)
            moved = True
    return moved


def _hours_asked(sizing: _Sizing, design: float | None, typical: float | None) -> float:
    """The hours a proposer asks for: the need times the contingency, in tenths of an hour, at least one block."""
    rule, factor = sizing.rule, sizing.factor
    if rule == "fixed" or design is None or not math.isfinite(design):
        hours = factor if rule == "fixed" else MIN_BLOCK_HOURS
    elif rule == "between" and typical is not None and math.isfinite(typical):
        hours = typical + factor * (design - typical)
        return max(round(math.floor(hours * 10) / 10, 1), 0.1)  # below the design need, so no block floor
    else:
        hours = factor * design
    return max(round(math.ceil(hours * 10 - 1e-9) / 10, 1), MIN_BLOCK_HOURS)


def _engine_for(semester: str) -> Any:
    """A function giving {label: (hours needed at design, at typical conditions)} of a draft, by the real engine."""
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.engine import check_proposal

    data = resources.files("feasibility") / "data"
    observatory = load_document(Observatory, Path(str(data / "observatory.yaml")))
    schedule_file = data / f"schedule-{semester}.yaml"
    schedule = load_document(InstrumentSchedule, Path(str(schedule_file))) if schedule_file.is_file() else None

    def needs(document: dict[str, Any]) -> dict[str, tuple[float | None, float | None]]:
        result = check_proposal(parse_document(Proposal, document, "proposal"), observatory, schedule)
        return {item.label: (_positive(item.figures.get("hours_needed")), _positive(item.figures.get("hours_needed_typical"))) for item in result.requests}

    return needs


def _positive(value: object) -> float | None:
    return float(value) if isinstance(value, int | float) and math.isfinite(value) and value > 0 else None


def _setup(rng: random.Random, instrument: str) -> tuple[dict[str, Any], str, float, int]:
    """A setup, the brightness band, a starting magnitude (moved later towards a few hours' need) and a S/N goal."""
    if instrument == "KESTREL":
        band = rng.choice(("B", "V", "R", "I"))
        return {"filter": band}, band, round(rng.uniform(21.5, 23.0), 1), rng.choice((20, 30, 50))
    if instrument == "HERON":
        if rng.random() < 0.7:
            setup = {"grating": "R600", "slit_arcsec": rng.choice((1.2, 2.0)), "central_wavelength_nm": rng.choice((500, 600, 700))}
        else:
            setup = {"grating": "R2500", "slit_arcsec": 1.2, "central_wavelength_nm": rng.choice((520, 580, 650))}
        return setup, "V", round(rng.uniform(18.0, 19.5), 1), rng.choice((20, 30, 50))
    band = rng.choice(("J", "H", "Ks"))
    return {"filter": band}, band, round(rng.uniform(18.0, 19.5), 1), rng.choice((20, 30, 50))


def _sexagesimal(hours: float, seconds: bool = False) -> str:
    total = int(round(hours * 3600)) % 86400
    h, m, s = total // 3600, total // 60 % 60, total % 60
    return f"{h:02d}:{m:02d}:{s:02d}" if seconds else f"{h:02d}h{m:02d}"


def _ascii(text: str) -> str:
    import unicodedata

    return unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode()
