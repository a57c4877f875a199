"""A reproducible invented semester of demo proposals, for trying the committee's pages on a realistic load.

:func:`demo_semester` draws about 150 proposals for the demo observatory's 2027A
semester from a seeded random generator, so every call gives the same documents.
They are spread over the three instruments, the lunar times (dark, grey, bright),
right ascension and difficulty. Each proposal is drawn from one of three kinds of
request mixes, aimed (not guaranteed: the engine decides) at roughly 70 % feasible,
20 % marginal and 10 % infeasible verdicts; ``tests/service/test_demo_semester.py``
checks the mix with the real engine.

Everything here is invented: people, institutions, titles and target names. The
seven hand-written examples in ``feasibility/data/proposals`` stay the documented ones.
"""

from __future__ import annotations

import random
from typing import Any

__all__ = ["DEMO_SEED", "DEMO_SEMESTER", "demo_semester", "semester_yaml"]

#: The seed and the semester of the packaged generated set.
DEMO_SEED = 2027
DEMO_SEMESTER = "2027A"
#: How many proposals of each kind the generated set has (aimed-at verdicts, see the module's description).
KIND_COUNTS = {"easy": 102, "tight": 33, "hard": 15}

_GIVEN = ("Ilona", "Tavi", "Marek", "Oona", "Rafi", "Selin", "Bruno", "Keziah", "Anouk", "Dario", "Lumi", "Femke",
          "Ostap", "Yara", "Caio", "Nell", "Ivo", "Zaida", "Pim", "Rhea", "Teodor", "Ines", "Kaito", "Maren")
_FAMILY = ("Varnholt", "Quenby", "Lisandru", "Okavé", "Brennick", "Tamsort", "Villaro", "Haskeld", "Moravy", "Ferrent",
           "Oduya", "Castrel", "Nieminô", "Pellago", "Drossel", "Ambrin", "Kellisto", "Sorvane", "Uttley", "Marwick")
_PLACES = ("Institute of Invented Astrophysics", "Observatorio de la Meseta (invented)", "Lakeshore Physics School (invented)",
           "Northfold University (invented)", "Centro de Cielo Austral (invented)")
_TOPICS = ("Variable stars in", "Star formation across", "Chemical abundances in", "Faint companions in",
           "Dust and gas in", "Rotation curves of", "Transients in", "Stellar populations of")
_SUBJECTS = ("a southern field", "the outer disc of an invented spiral", "an invented open cluster", "a dwarf galaxy field",
             "a high-latitude cloud", "an invented group of galaxies", "a bulge window", "a young association")
_SKIES = ("dark", "grey", "bright", None)


def demo_semester(seed: int = DEMO_SEED, semester: str = DEMO_SEMESTER) -> list[dict[str, Any]]:
    """The generated proposals as documents (dicts a proposal file would hold), in id order."""
    rng = random.Random(seed)
    kinds = [kind for kind, count in KIND_COUNTS.items() for _ in range(count)]
    rng.shuffle(kinds)
    return [_proposal(rng, number + 1, kind, semester) for number, kind in enumerate(kinds)]


def semester_yaml(document: dict[str, Any]) -> str:
    """One generated proposal as a YAML file's text, with a header saying it is invented."""
    import yaml

    header = "# Generated demo proposal (feasibility.demo_semester): invented people, titles and targets.\n"
    return header + yaml.safe_dump(document, sort_keys=False, allow_unicode=True)


def _proposal(rng: random.Random, number: int, kind: str, semester: str) -> dict[str, Any]:
    given, family = rng.choice(_GIVEN), rng.choice(_FAMILY)
    count = rng.choices((1, 2, 3), weights=(5, 3, 1))[0]
    requests = [_request(rng, k, kind if k == 0 else "easy") for k in range(count)]
    return {
        "id": f"GEN-{semester}-{number:03d}",
        "semester": semester,
        "title": f"{rng.choice(_TOPICS)} {rng.choice(_SUBJECTS)}",
        "pi": {
            "name": f"{given} {family}",
            "email": f"{given.lower()}.{_ascii(family.lower())}@example.org",
            "institution": rng.choice(_PLACES),
        },
        "requests": requests,
    }


def _request(rng: random.Random, index: int, kind: str) -> dict[str, Any]:
    """One observation request; ``kind`` easy (aimed at feasible), tight (marginal) or hard (infeasible)."""
    instrument = rng.choices(("KESTREL", "HERON", "OWL"), weights=(5, 3, 2))[0]
    ra_hours = rng.uniform(10.0, 22.0)  # on the meridian in the 2027A nights
    dec = rng.uniform(-65.0, 5.0)
    sky = rng.choice(_SKIES)
    hours = round(rng.uniform(1.0, 5.0) * 2) / 2
    constraints: dict[str, Any] = {"max_airmass": rng.choice((1.5, 1.8, 2.0))}
    if sky is not None:
        constraints["sky"] = sky
    setup, band, magnitude, snr = _setup(rng, instrument)
    brightness: dict[str, Any] = {"magnitude": magnitude, "band": band}
    if kind == "tight":
        trouble = rng.choice(("seeing", "error"))
        if trouble == "seeing":
            constraints["max_seeing_arcsec"] = rng.choice((0.6, 0.65, 0.7))
        else:
            brightness["error"] = 0.6
            brightness["magnitude"] = magnitude + 2.2
    elif kind == "hard":
        trouble = rng.choice(("north", "faint", "seeing"))
        if trouble == "north":
            dec = rng.uniform(62.0, 80.0)  # never above the site's 15° limit at latitude −26°
        elif trouble == "faint":
            brightness["magnitude"] = magnitude + 7.0
        else:
            constraints["max_seeing_arcsec"] = 0.3
    name = f"Field {_sexagesimal(ra_hours)}{'+' if dec >= 0 else '-'}{abs(int(dec)):02d}"
    return {
        "label": f"r{index + 1}-{instrument.lower()}",
        "target": {"name": name, "ra": _sexagesimal(ra_hours, seconds=True), "dec": round(dec, 3)},
        "instrument": instrument,
        "setup": setup,
        "brightness": brightness,
        "goal": {"snr": snr},
        "hours_requested": hours,
        "constraints": constraints,
    }


def _setup(rng: random.Random, instrument: str) -> tuple[dict[str, Any], str, float, int]:
    """A setup, the brightness band, a magnitude comfortably reached, and a S/N goal."""
    if instrument == "KESTREL":
        band = rng.choice(("B", "V", "R", "I"))
        return {"filter": band}, band, round(rng.uniform(17.0, 20.5), 1), rng.choice((20, 30, 50))
    if instrument == "HERON":
        if rng.random() < 0.7:
            setup = {"grating": "R600", "slit_arcsec": rng.choice((1.2, 2.0)), "central_wavelength_nm": rng.choice((500, 600, 700))}
        else:
            setup = {"grating": "R2500", "slit_arcsec": 1.2, "central_wavelength_nm": rng.choice((520, 580, 650))}
        return setup, "V", round(rng.uniform(14.0, 16.5), 1), rng.choice((20, 30, 50))
    band = rng.choice(("J", "H", "Ks"))
    return {"filter": band}, band, round(rng.uniform(14.0, 17.0), 1), rng.choice((20, 30, 50))


def _sexagesimal(hours: float, seconds: bool = False) -> str:
    total = int(round(hours * 3600)) % 86400
    h, m, s = total // 3600, total // 60 % 60, total % 60
    return f"{h:02d}:{m:02d}:{s:02d}" if seconds else f"{h:02d}h{m:02d}"


def _ascii(text: str) -> str:
    import unicodedata

    return unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode()
