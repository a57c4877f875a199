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

A few more proposals (:data:`SOLAR_SYSTEM_BODIES`, drawn from their own seeded stream after the
others) ask for solar-system bodies, followed along their paths by the engine: a planet by name, an
invented main-belt asteroid by osculating elements with H, G, an invented comet by elements with M1, K1,
and an invented asteroid given as the proposer's ephemeris table (worked out here from its elements by the
engine's own two-body orbit). The minor bodies are placed at opposition on a date drawn in the semester's
middle months, so they are well placed (aimed at feasible, as most requests).

Everything here is invented: people, institutions, titles and target names. The
eight hand-written examples in ``feasibility/data/proposals`` stay the documented ones.
"""

from __future__ import annotations

import copy
import datetime as dt
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
#: The solar-system proposals appended to the generated set, one per kind of moving target (see the module's description).
SOLAR_SYSTEM_BODIES = ("planet", "asteroid", "comet", "table")
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
    solar_rng = random.Random(f"{seed}-solar-system")  # its own stream: the fixed-target drafts stay as they were
    drafts += [_solar_system_proposal(solar_rng, len(drafts) + k + 1, body, semester) for k, body in enumerate(SOLAR_SYSTEM_BODIES)]
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


def _solar_system_proposal(rng: random.Random, number: int, body: str, semester: str) -> tuple[dict[str, Any], list[_Sizing]]:
    """One proposal asking for a solar-system body (``body``: planet, asteroid, comet or table), sized as the others."""
    given, family = rng.choice(_GIVEN), rng.choice(_FAMILY)
    first, last = _semester_nights(semester)
    opposition = first + dt.timedelta(days=round(rng.uniform(0.3, 0.6) * (last - first).days))
    designation = f"{opposition.year} {chr(ord('A') + rng.randrange(24))}{chr(ord('A') + rng.randrange(25))}{rng.randrange(2, 90)}"
    constraints: dict[str, Any] = {"max_airmass": rng.choice((1.8, 2.0))}
    setup: dict[str, Any] = {"filter": rng.choice(("V", "R"))}
    instrument, band, magnitude, snr = "KESTREL", "V", 0.0, rng.choice((30, 50))
    if body == "planet":
        target: dict[str, Any] = {"kind": "major_body", "name": "Neptune", "body": "neptune"}
        instrument, snr = "HERON", rng.choice((100, 200))
        setup = {"grating": "R2500", "slit_arcsec": 1.2, "central_wavelength_nm": rng.choice((520, 580, 650))}
        magnitude = 7.8  # Neptune's apparent V (from memory), as a proposer writes it; the brighter planets saturate HERON
        title = "Methane bands of Neptune across the night"
    elif body == "comet":
        target = _comet(rng, f"P/{designation[:4]} {designation[5:]} (invented)", opposition)
        magnitude, title = 15.0, "Coma activity of an invented periodic comet"
        constraints["max_airmass"] = 2.0
    else:
        target = _asteroid(rng, f"({rng.randrange(20000, 99999)}) {rng.choice(_FAMILY)} (invented)", opposition)
        magnitude, title = 19.0, "Rotation light curve of an invented main-belt asteroid"
        if body == "table":
            target = _as_ephemeris_table(target, first, last)
            title = "Colours of an invented asteroid from the proposer's own ephemeris"
    request = {
        "label": f"r1-{body}",
        "target": target,
        "instrument": instrument,
        "setup": setup,
        "brightness": {"magnitude": magnitude, "band": band},
        "goal": {"snr": snr},
        "hours_requested": 1.0,  # a placeholder, as for the others
        "constraints": constraints,
    }
    document = {
        "id": f"GEN-{semester}-{number:03d}",
        "semester": semester,
        "title": title,
        "pi": {"name": f"{given} {family}", "email": f"{given.lower()}.{_ascii(family.lower())}@example.org", "institution": rng.choice(_PLACES)},
        "requests": [request],
    }
    if body == "asteroid":  # a light curve's hours follow the rotation period, not the S/N of one exposure
        return document, [_Sizing("fixed", round(rng.uniform(2.0, 5.0), 1), None)]
    return document, [_Sizing("design", rng.uniform(*CONTINGENCY), None)]  # the body's own brightness law: nothing to move


def _asteroid(rng: random.Random, name: str, opposition: dt.date) -> dict[str, Any]:
    """An invented main-belt asteroid at opposition on ``opposition``: its osculating elements there, with H, G."""
    a, e, i = rng.uniform(2.3, 3.1), rng.uniform(0.05, 0.18), rng.uniform(2.0, 14.0)
    node, argument = rng.uniform(0.0, 360.0), rng.uniform(0.0, 360.0)
    u = _argument_of_latitude(_earth_longitude_deg(opposition) - node, i)  # at opposition, the Earth's heliocentric longitude
    true_anomaly = math.radians(u - argument)
    eccentric = 2.0 * math.atan(math.sqrt((1.0 - e) / (1.0 + e)) * math.tan(true_anomaly / 2.0))
    mean = math.degrees(eccentric - e * math.sin(eccentric)) % 360.0
    return {
        "kind": "orbital_elements",
        "name": name,
        "epoch": opposition.isoformat(),
        "semi_major_axis": round(a, 4),
        "eccentricity": round(e, 4),
        "inclination": round(i, 3),
        "ascending_node_longitude": round(node, 3),
        "perihelion_argument": round(argument, 3),
        "mean_anomaly": round(mean, 3),
        "absolute_magnitude": round(rng.uniform(14.5, 16.0), 1),
        "slope_parameter": 0.15,
    }


def _comet(rng: random.Random, name: str, opposition: dt.date) -> dict[str, Any]:
    """An invented short-period comet passing perihelion at opposition on ``opposition``, with M1, K1."""
    q, e, i = rng.uniform(1.8, 2.4), rng.uniform(0.35, 0.55), rng.uniform(4.0, 20.0)
    argument = rng.uniform(0.0, 360.0)
    ecliptic_offset = math.degrees(math.atan2(math.cos(math.radians(i)) * math.sin(math.radians(argument)), math.cos(math.radians(argument))))
    node = (_earth_longitude_deg(opposition) - ecliptic_offset) % 360.0  # perihelion in the Earth's direction from the Sun
    return {
        "kind": "orbital_elements",
        "name": name,
        "epoch": opposition.isoformat(),
        "perihelion_distance": round(q, 4),
        "eccentricity": round(e, 4),
        "inclination": round(i, 3),
        "ascending_node_longitude": round(node, 3),
        "perihelion_argument": round(argument, 3),
        "perihelion_time": f"{opposition.isoformat()}T00:00:00Z",
        "total_absolute_magnitude": round(rng.uniform(13.5, 15.0), 1),
        "total_magnitude_slope": 10.0,  # K1 = 10 (common practice)
    }


def _as_ephemeris_table(elements: dict[str, Any], first: dt.date, last: dt.date, step_days: int = 4) -> dict[str, Any]:
    """The asteroid of ``elements`` as an ephemeris table over the semester, from the engine's own two-body orbit."""
    import numpy as np

    from feasibility.documents.moving_targets import OrbitalElementsTarget
    from feasibility.engine import orbits
    from feasibility.engine.small_body_brightness import hg_magnitude

    dates = [first + dt.timedelta(days=k) for k in range(-step_days, (last - first).days + 2 * step_days, step_days)]
    tt = np.array([_jd(d) for d in dates])
    target = OrbitalElementsTarget.model_validate(elements)
    seen = orbits.geocentric(orbits.orbit_from_target(target), tt)
    magnitude = hg_magnitude(float(target.absolute_magnitude or 0.0), target.slope, seen.sun_distance_au, seen.earth_distance_au, seen.phase_angle_deg)
    x, y, z = seen.geocentric.T
    ra, dec = np.degrees(np.arctan2(y, x)) % 360.0, np.degrees(np.arctan2(z, np.hypot(x, y)))
    rows = [
        {"time": f"{d.isoformat()}T00:00:00Z", "ra": _sexagesimal(float(r) / 15.0, seconds=True), "dec": round(float(de), 4), "magnitude": round(float(m), 2)}
        for d, r, de, m in zip(dates, ra, dec, magnitude, strict=True)
    ]
    return {"kind": "ephemeris_table", "name": elements["name"], "ephemeris_table": rows}


def _argument_of_latitude(longitude_from_node_deg: float, inclination_deg: float) -> float:
    """The argument of latitude u (degrees) whose ecliptic longitude from the node is the one given: tan(l − Ω) = cos i tan u."""
    angle = math.radians(longitude_from_node_deg)
    return math.degrees(math.atan2(math.sin(angle), math.cos(angle) * math.cos(math.radians(inclination_deg))))


def _earth_longitude_deg(date: dt.date) -> float:
    """The Earth's heliocentric ecliptic longitude (degrees, J2000.0) at 0h of ``date``, from the engine's ERFA ``epv00``
    position turned to the ecliptic by the J2000.0 obliquity 23.439° (enough to aim at opposition)."""
    import numpy as np

    from feasibility.engine import orbits

    x, y, z = orbits.earth_heliocentric(np.array([_jd(date)]))[0]
    obliquity = math.radians(23.4392911)
    return math.degrees(math.atan2(y * math.cos(obliquity) + z * math.sin(obliquity), x)) % 360.0


def _jd(date: dt.date) -> float:
    """The Julian date (TT) of 0h UTC on ``date``: TT − UTC is 69.184 s from 2017 on (37 leap seconds + 32.184 s, from memory)."""
    return 2400000.5 + (date - dt.date(1858, 11, 17)).days + 69.184 / 86400.0


def _semester_nights(semester: str) -> tuple[dt.date, dt.date]:
    """The first and last nights of ``semester`` in the packaged demo observatory."""
    from feasibility.documents import Observatory, load_document

    observatory = load_document(Observatory, Path(str(resources.files("feasibility") / "data" / "observatory.yaml")))
    found = observatory.semester_named(semester)
    if found is None:
        raise ValueError(f"semester {semester!r} is not in the demo observatory")
    return found.first_night, found.last_night


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
