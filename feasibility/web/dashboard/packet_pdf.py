"""Writing the meeting packet as PDF with ReportLab: A4 pages of text lines, tables and plots.

Only layout lives here; what goes on the pages comes from :mod:`feasibility.web.dashboard.packet`.
Each proposal starts on a new page; plots are the dashboard's own figures
(:func:`feasibility.web.plots.figures_kept`), rasterised at print resolution by
:mod:`feasibility.web.dashboard.packet_plots`. Text is set in DejaVu Sans (the font
matplotlib ships, so every character the pages and plots use is there), embedded as
a subset. ReportLab sets a page of text in milliseconds, where drawing the same text
through matplotlib's PDF backend cost some five seconds for a six-proposal packet.
"""

from __future__ import annotations

import io
import threading
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import matplotlib
import numpy as np
from PIL import Image
from reportlab.lib.colors import HexColor
from reportlab.lib.pagesizes import A4
from reportlab.lib.utils import ImageReader, simpleSplit
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont
from reportlab.pdfgen.canvas import Canvas

__all__ = ["PacketWriter"]

#: Margins as fractions of the A4 page (ISO 216: 210 x 297 mm).
_MARGIN_X = 0.08
_MARGIN_Y = 0.06
#: Font name -> file in matplotlib's own font folder.
_FONTS = {"packet-sans": "DejaVuSans.ttf", "packet-sans-bold": "DejaVuSans-Bold.ttf", "packet-mono": "DejaVuSansMono.ttf"}
_fonts_lock = threading.Lock()


def _register_fonts() -> None:
    """Register the packet's fonts with ReportLab once per process."""
    with _fonts_lock:
        registered = set(pdfmetrics.getRegisteredFontNames())
        folder = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        for name, file in _FONTS.items():
            if name not in registered:
                pdfmetrics.registerFont(TTFont(name, str(folder / file)))


class PacketWriter:
    """Lays lines of text and plots down A4 pages, starting a new page when one is full."""

    def __init__(self, title: str) -> None:
        _register_fonts()
        self._buffer = io.BytesIO()
        self._canvas = Canvas(self._buffer, pagesize=A4, invariant=True, pageCompression=0)
        self._canvas.setTitle(title)
        self._canvas.setCreator("feasibility")
        self._open = False
        self._y = 0.0
        self.pages = 0
        self._footer = title

    def new_page(self) -> None:
        """Finish the page being written (if any) and start an empty one."""
        self._finish_page()
        self._open = True
        self._y = A4[1] * (1.0 - _MARGIN_Y)
        self.pages += 1

    def heading(self, text: str, size: float = 15) -> None:
        self.line(text, size=size, weight="bold", space_after=0.3)

    def line(
        self,
        text: str,
        *,
        size: float = 9.5,
        weight: str = "normal",
        indent: float = 0.0,
        mono: bool = False,
        colour: str = "#111111",
        space_after: float = 0.0,
    ) -> None:
        """One paragraph, wrapped to the page's width (``indent`` as a fraction of it; ``space_after`` in lines)."""
        font = "packet-mono" if mono else ("packet-sans-bold" if weight == "bold" else "packet-sans")
        left = A4[0] * (_MARGIN_X + indent)
        width = A4[0] * (1 - 2 * _MARGIN_X - indent)
        step = size * 1.4
        fits = pdfmetrics.stringWidth(text, font, size) <= width
        for part in ([text] if fits else simpleSplit(text, font, size, width)) or [""]:  # a line that fits keeps its spacing (tables)
            self._room(step)
            self._canvas.setFont(font, size)
            self._canvas.setFillColor(HexColor(colour))
            self._canvas.drawString(left, self._y - size, part)
            self._y -= step
        self._y -= space_after * size

    def gap(self, lines: float = 0.6) -> None:
        self._y -= lines * 9.5 * 1.4

    def image(self, pixels: np.ndarray) -> None:
        """A plot already rasterised (RGB rows of pixels), as wide as the text."""
        width = A4[0] * (1 - 2 * _MARGIN_X)
        height = width * pixels.shape[0] / pixels.shape[1]
        self._room(height + 6)
        self._canvas.drawImage(ImageReader(Image.fromarray(pixels)), A4[0] * _MARGIN_X, self._y - height, width, height)
        self._y -= height + 0.015 * A4[1]

    def finish(self) -> bytes:
        """The PDF document."""
        self._finish_page()
        self._canvas.save()
        return self._buffer.getvalue()

    def _room(self, needed: float) -> None:
        if not self._open or self._y - needed < A4[1] * _MARGIN_Y:
            self.new_page()

    def _finish_page(self) -> None:
        if self._open:
            stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
            self._canvas.setFont("packet-sans", 7)
            self._canvas.setFillColor(HexColor("#555555"))
            self._canvas.drawCentredString(A4[0] / 2, A4[1] * _MARGIN_Y / 2, f"{self._footer} · page {self.pages} · printed {stamp}")
            self._canvas.showPage()
            self._open = False


def table_lines(header: list[str], rows: list[list[Any]], widths: list[int]) -> list[str]:
    """Fixed-width lines of a small table (for a monospace font)."""

    def cells(values: list[Any]) -> str:
        return "  ".join(_cut(str(v), w).ljust(w) for v, w in zip(values, widths)).rstrip()

    return [cells(header), "  ".join("-" * w for w in widths), *(cells(row) for row in rows)]


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"
