"""Weather and seeing for the semester simulation: the climate per night, and random realisations of it.

The model (each part documented in the README's "Chance of completion"):

- Each night is usable or not, whole (no partly cloudy nights). Nights follow a
  two-state Markov chain whose parameters are those of the night's calendar month:
  ``P(usable)`` in the long run is the month's usable-night fraction ``f``, the chance
  that a usable night follows a usable one is ``a`` (``climate.clear_after_clear``,
  default ``f``: independent nights), and the chance that one follows a bad night
  ``b = f (1 - a) / (1 - f)``, so that ``f`` stays the chain's stationary fraction
  (the observatory description refuses an ``a`` that would make ``b`` exceed 1).
  The first night is usable with chance ``f``.
- Each night has one seeing value (the zenith FWHM at 500 nm), log-normal around
  the site's median: ``ln FWHM = ln median + σ z`` with ``z`` standard normal,
  independent from night to night and of the weather; ``σ`` is
  ``climate.seeing_log_spread``, default the engine's ``SEEING_LOG_SPREAD``.

Realisations are drawn many at once (one row each) with NumPy's ``Generator``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Observatory
from feasibility.engine.exposure_checks import SEEING_LOG_SPREAD

__all__ = ["NightClimate", "Weather", "draw_weather", "night_climate"]


@dataclass(frozen=True)
class NightClimate:
    """The climate of each night of a semester: the chain's parameters and the seeing's median and spread."""

    usable_fraction: NDArray[np.float64]
    """Long-run chance the night is usable (its month's usable-night fraction)."""
    clear_after_clear: NDArray[np.float64]
    """Chance the night is usable when the night before was."""
    ln_median_seeing: NDArray[np.float64]
    """ln of the median zenith seeing at 500 nm (arcsec)."""
    seeing_log_spread: float

    @property
    def n_nights(self) -> int:
        return int(self.usable_fraction.size)

    @property
    def clear_after_cloudy(self) -> NDArray[np.float64]:
        """Chance the night is usable when the night before was not: ``f (1 - a) / (1 - f)`` (1 when ``f`` is 1)."""
        f, a = self.usable_fraction, self.clear_after_clear
        with np.errstate(divide="ignore", invalid="ignore"):
            b = np.where(f < 1.0, f * (1.0 - a) / np.where(f < 1.0, 1.0 - f, 1.0), 1.0)
        return np.clip(b, 0.0, 1.0)


def night_climate(observatory: Observatory, months: NDArray[np.int64]) -> NightClimate:
    """The climate of nights whose calendar months are ``months`` (1-12), from the observatory description.

    A month without a usable-night fraction counts every night usable, as the checks do.
    """
    climate = observatory.climate
    fraction = np.array([climate.usable_night_fraction.get(int(m), 1.0) for m in months], dtype=float)
    persistence = np.array([climate.clear_after_clear.get(int(m), f) for m, f in zip(months, fraction)], dtype=float)
    spread = climate.seeing_log_spread if climate.seeing_log_spread is not None else SEEING_LOG_SPREAD
    return NightClimate(
        usable_fraction=fraction,
        clear_after_clear=persistence,
        ln_median_seeing=np.full(fraction.size, math.log(climate.median_seeing_arcsec)),
        seeing_log_spread=float(spread),
    )


@dataclass(frozen=True)
class Weather:
    """Realisations of a semester's weather: one row per realisation, one column per night."""

    clear: NDArray[np.bool_]
    ln_seeing: NDArray[np.float64]
    """ln of the night's zenith seeing at 500 nm (arcsec)."""

    @property
    def realisations(self) -> int:
        return int(self.clear.shape[0])


def draw_weather(climate: NightClimate, realisations: int, rng: np.random.Generator) -> Weather:
    """Draw ``realisations`` semesters of weather and seeing (see the module docstring for the model)."""
    n = climate.n_nights
    uniform = rng.random((realisations, n))
    normal = rng.standard_normal((realisations, n))
    clear = np.empty((realisations, n), dtype=bool)
    if n:
        after_clear, after_cloudy = climate.clear_after_clear, climate.clear_after_cloudy
        clear[:, 0] = uniform[:, 0] < climate.usable_fraction[0]
        for night in range(1, n):
            chance = np.where(clear[:, night - 1], after_clear[night], after_cloudy[night])
            clear[:, night] = uniform[:, night] < chance
    ln_seeing = climate.ln_median_seeing[None, :] + climate.seeing_log_spread * normal
    return Weather(clear=clear, ln_seeing=ln_seeing)
