"""A smooth curve through tabulated points: monotone piecewise-cubic Hermite interpolation (PCHIP).

Used for the wavelength curves of spectra (zero point, dark sky, extinction
corrections, the Sun's colour): the curve passes exactly through every point, is
continuous with a continuous slope, and never overshoots the points — between two
points it stays within their values, so a curve of band values has no spurious
bumps, and a monotone run of points gives a monotone curve.

Method
------
Fritsch & Carlson (1980), with the weighted harmonic mean of the neighbouring
secant slopes at interior points (Fritsch & Butland 1984) and the shape-preserving
three-point formula at the ends — the construction of Moler, *Numerical Computing
with MATLAB*, ch. 3 ("pchip"). Beyond the ends the curve is held at its end value
or continued along its end slope (``beyond="hold"`` or ``"slope"``).

References
----------
Fritsch, F. N. & Carlson, R. E. 1980, SIAM J. Numer. Anal. 17, 238.
Fritsch, F. N. & Butland, J. 1984, SIAM J. Sci. Stat. Comput. 5, 300.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Sequence
from typing import Literal

__all__ = ["SmoothCurve"]


class SmoothCurve:
    """The monotone cubic through ``(x, y)`` points (``x`` strictly increasing), evaluated at one abscissa at a time."""

    __slots__ = ("_x", "_y", "_slopes", "_beyond")

    def __init__(self, x: Sequence[float], y: Sequence[float], beyond: Literal["hold", "slope"] = "hold") -> None:
        if len(x) != len(y) or not x:
            raise ValueError("a curve needs as many ordinates as abscissae, at least one")
        if any(not math.isfinite(v) for v in (*x, *y)):
            raise ValueError("a curve's points must be finite")
        if any(b <= a for a, b in zip(x, x[1:])):
            raise ValueError("a curve's abscissae must increase strictly")
        self._x = [float(v) for v in x]
        self._y = [float(v) for v in y]
        self._slopes = _pchip_slopes(self._x, self._y)
        self._beyond = beyond

    def __call__(self, at: float) -> float:
        """The curve's value at ``at``."""
        x, y, d = self._x, self._y, self._slopes
        if at <= x[0] or at >= x[-1]:
            end = 0 if at <= x[0] else len(x) - 1
            if self._beyond == "hold" or len(x) == 1:
                return y[end]
            return y[end] + d[end] * (at - x[end])
        i = bisect.bisect_right(x, at) - 1
        h = x[i + 1] - x[i]
        t = (at - x[i]) / h
        t2, t3 = t * t, t * t * t
        return (2 * t3 - 3 * t2 + 1) * y[i] + (t3 - 2 * t2 + t) * h * d[i] + (-2 * t3 + 3 * t2) * y[i + 1] + (t3 - t2) * h * d[i + 1]


def _pchip_slopes(x: list[float], y: list[float]) -> list[float]:
    """Slopes at the points that keep the cubic monotone between them (module docstring)."""
    n = len(x)
    if n == 1:
        return [0.0]
    h = [b - a for a, b in zip(x, x[1:])]
    delta = [(y[k + 1] - y[k]) / h[k] for k in range(n - 1)]
    if n == 2:
        return [delta[0], delta[0]]
    slopes = [0.0] * n
    for k in range(1, n - 1):
        if delta[k - 1] * delta[k] > 0.0:
            w1, w2 = 2.0 * h[k] + h[k - 1], h[k] + 2.0 * h[k - 1]
            slopes[k] = (w1 + w2) / (w1 / delta[k - 1] + w2 / delta[k])
    slopes[0] = _end_slope(h[0], h[1], delta[0], delta[1])
    slopes[-1] = _end_slope(h[-1], h[-2], delta[-1], delta[-2])
    return slopes


def _end_slope(h0: float, h1: float, d0: float, d1: float) -> float:
    """The shape-preserving three-point slope at an end point."""
    slope = ((2.0 * h0 + h1) * d0 - h0 * d1) / (h0 + h1)
    if slope * d0 <= 0.0:
        return 0.0
    if d0 * d1 < 0.0 and abs(slope) > abs(3.0 * d0):
        return 3.0 * d0
    return slope
