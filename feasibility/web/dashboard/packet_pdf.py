"""Writing the meeting packet as PDF with matplotlib's ``PdfPages``: A4 pages of text lines, tables and plots.

Only layout lives here; what goes on the pages comes from :mod:`feasibility.web.dashboard.packet`.
Each proposal starts on a new page; plots are the dashboard's own figures
(:func:`feasibility.web.plots.figures_kept`), rasterised at print resolution by
:mod:`feasibility.web.dashboard.packet_plots` and placed pixel for pixel (no
resampling: the PDF scales the image, which is cheaper and sharper).
"""

from __future__ import annotations

import io
import textwrap
from datetime import UTC, datetime
from typing import Any

import numpy as np
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from feasibility.web import plots

__all__ = ["PacketWriter"]

#: ISO 216 A4 in inches (210 x 297 mm).
A4 = (8.27, 11.69)
_MARGIN_X = 0.08
_MARGIN_Y = 0.06


class PacketWriter:
    """Lays lines of text and plots down A4 pages, starting a new page when one is full."""

    def __init__(self, title: str) -> None:
        self._buffer = io.BytesIO()
        self._pdf = PdfPages(self._buffer, metadata={"Title": title, "Creator": "feasibility", "CreationDate": None, "ModDate": None})
        self._fig: Figure | None = None
        self._y = 0.0
        self.pages = 0
        self._footer = title

    def new_page(self) -> None:
        """Finish the page being written (if any) and start an empty one."""
        self._finish_page()
        self._fig = Figure(figsize=A4)
        self._y = 1.0 - _MARGIN_Y
        self.pages += 1

    def heading(self, text: str, size: float = 15) -> None:
        self.line(text, size=size, weight="bold", space_after=0.3)

    def line(self, text: str, *, size: float = 9.5, weight: str = "normal", indent: float = 0.0, mono: bool = False,
             colour: str = "#111111", space_after: float = 0.0) -> None:
        """One paragraph, wrapped to the page's width."""
        width = int((1 - 2 * _MARGIN_X - indent) * A4[0] * 72 / (size * (0.6 if mono else 0.52)))
        for part in textwrap.wrap(text, width=max(width, 20), break_long_words=True) or [""]:
            step = size * 1.4 / 72 / A4[1]
            self._room(step)
            assert self._fig is not None
            self._fig.text(_MARGIN_X + indent, self._y, part, fontsize=size, weight=weight, va="top", color=colour,
                           family="monospace" if mono else "sans-serif")
            self._y -= step
        self._y -= space_after * size / 72 / A4[1]

    def gap(self, lines: float = 0.6) -> None:
        self._y -= lines * 9.5 * 1.4 / 72 / A4[1]

    def image(self, pixels: np.ndarray) -> None:
        """A plot already rasterised (RGB rows of pixels), as wide as the text."""
        width = 1 - 2 * _MARGIN_X
        height = width * A4[0] / A4[1] * pixels.shape[0] / pixels.shape[1]
        self._room(height + 0.01)
        assert self._fig is not None
        axes = self._fig.add_axes((_MARGIN_X, self._y - height, width, height))
        axes.imshow(pixels, interpolation="none")  # embedded as drawn, not resampled to the page's resolution
        axes.set_axis_off()
        self._y -= height + 0.015

    def finish(self) -> bytes:
        """The PDF document."""
        self._finish_page()
        self._pdf.close()
        return self._buffer.getvalue()

    def _room(self, needed: float) -> None:
        if self._fig is None or self._y - needed < _MARGIN_Y:
            self.new_page()

    def _finish_page(self) -> None:
        if self._fig is not None:
            stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
            self._fig.text(0.5, _MARGIN_Y / 2, f"{self._footer} · page {self.pages} · printed {stamp}", fontsize=7, ha="center",
                           color="#555555")
            with plots.DRAWING_LOCK:
                self._pdf.savefig(self._fig)
            self._fig = None


def table_lines(header: list[str], rows: list[list[Any]], widths: list[int]) -> list[str]:
    """Fixed-width lines of a small table (for a monospace font)."""
    def cells(values: list[Any]) -> str:
        return "  ".join(_cut(str(v), w).ljust(w) for v, w in zip(values, widths)).rstrip()

    return [cells(header), "  ".join("-" * w for w in widths), *(cells(row) for row in rows)]


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"
