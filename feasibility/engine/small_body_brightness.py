"""The predicted magnitude of a minor body: the IAU H, G system for asteroids, the total-magnitude law for comets.

- Asteroids (Bowell, E. et al. 1989, in *Asteroids II*, p. 524): V = H + 5 log₁₀(r Δ) − 2.5 log₁₀[(1 − G) Φ₁ + G Φ₂],
  Φᵢ = exp(−Aᵢ tan(α/2)^Bᵢ), A₁ = 3.33, B₁ = 0.63, A₂ = 1.87, B₂ = 1.22; α the phase angle (Sun–body–Earth).
- Comets: the total (nucleus and coma) magnitude m = M1 + 5 log₁₀ Δ + K1 log₁₀ r, r and Δ in au.

Both vectorised over the observing times.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["HG_A1", "HG_A2", "HG_B1", "HG_B2", "comet_total_magnitude", "hg_magnitude"]

#: Constants of the phase functions Φ₁ and Φ₂ (Bowell et al. 1989).
HG_A1, HG_B1, HG_A2, HG_B2 = 3.33, 0.63, 1.87, 1.22


def hg_magnitude(
    absolute_magnitude: float, slope: float, sun_distance_au: ArrayLike, earth_distance_au: ArrayLike, phase_angle_deg: ArrayLike
) -> NDArray[np.float64]:
    """V magnitude of an asteroid in the IAU H, G system (module docstring)."""
    r = np.asarray(sun_distance_au, dtype=float)
    delta = np.asarray(earth_distance_au, dtype=float)
    half = np.tan(np.radians(np.asarray(phase_angle_deg, dtype=float)) / 2.0)
    phi1 = np.exp(-HG_A1 * half**HG_B1)
    phi2 = np.exp(-HG_A2 * half**HG_B2)
    return absolute_magnitude + 5.0 * np.log10(r * delta) - 2.5 * np.log10((1.0 - slope) * phi1 + slope * phi2)


def comet_total_magnitude(total_absolute_magnitude: float, slope: float, sun_distance_au: ArrayLike, earth_distance_au: ArrayLike) -> NDArray[np.float64]:
    """A comet's total magnitude m = M1 + 5 log₁₀ Δ + K1 log₁₀ r (``slope`` is K1)."""
    r = np.asarray(sun_distance_au, dtype=float)
    delta = np.asarray(earth_distance_au, dtype=float)
    return total_absolute_magnitude + 5.0 * np.log10(delta) + slope * np.log10(r)
