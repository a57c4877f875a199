"""The meeting packet's plots as print-resolution images, drawn once per finished run and kept.

Drawing a request's three plots costs about a second of matplotlib (text layout,
ticks, the constrained layout), which made a six-proposal packet take some twenty
seconds, drawn anew on every download. A finished run's stored result does not
change, so its plots are drawn once, rasterised and kept here as PNG, keyed by the
run (its store, id and finish time: see :func:`run_key`), the request's label and the
plot's kind; later packets and reports reuse them. The store is bounded (least recently used images go first) and lives in the
process, so a new engine or plot version after a restart starts afresh.
"""

from __future__ import annotations

import io
import threading
from collections import OrderedDict
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from PIL import Image
from sqlalchemy.orm import Session

from feasibility.service import details
from feasibility.service.details import RunKey
from feasibility.store.models import CheckRun
from feasibility.web import plots

__all__ = ["PLOT_DPI", "RunKey", "clear", "rasterise", "request_images", "run_key", "stats"]

#: Print resolution of the plots in the packet (dots per inch of the plot's own size, 7.2 x 3.4 in).
PLOT_DPI = 120
#: Most bytes of PNG kept (about 1500 plots, some 500 requests).
MAX_BYTES = 128 * 1024 * 1024

_lock = threading.Lock()
_images: OrderedDict[tuple[RunKey, str, str], bytes] = OrderedDict()
_counts = {"drawn": 0, "reused": 0}


def rasterise(figure: Figure, dpi: int = PLOT_DPI) -> np.ndarray:
    """The figure drawn once at ``dpi`` as an RGB array (height, width, 3) of uint8."""
    with plots.DRAWING_LOCK:
        canvas = FigureCanvasAgg(figure)
        figure.set_dpi(dpi)
        canvas.draw()
        return np.array(canvas.buffer_rgba())[..., :3]


def run_key(session: Session, run: CheckRun | None) -> RunKey | None:
    """What identifies a finished run's plots (:func:`feasibility.service.details.run_key`), or None (not finished: draw every time)."""
    if run is None or run.finished_at is None or run.state != "done":
        return None
    return details.run_key(session, run)


def request_images(run: RunKey | None, item: Mapping[str, Any], kinds: Mapping[str, tuple[str, Callable[..., Any]]]) -> list[np.ndarray]:
    """The plots of one request (``item`` as the pages read it: label, series, figures, target, plots) as RGB arrays, in ``kinds`` order.

    Plots of a finished run (``run`` from :func:`run_key`) are kept and reused; without one they are drawn every time.
    """
    images: list[np.ndarray] = []
    for kind, (_title, draw) in kinds.items():
        if not item["plots"].get(kind):
            continue
        key = (run, str(item["label"]), kind) if run is not None else None
        kept = _get(key)
        if kept is not None:
            images.append(kept)
            continue
        with plots.figures_kept() as figures:
            draw(item["series"], item["figures"], item["target"])
        for figure in figures:
            pixels = rasterise(figure)
            images.append(pixels)
            _put(key, pixels)
    return images


def clear() -> None:
    """Forget every kept image (tests and benchmarks: the next packet draws everything anew)."""
    with _lock:
        _images.clear()
        _counts.update(drawn=0, reused=0)


def stats() -> dict[str, int]:
    """Images drawn and reused since the last :func:`clear`, and how many are kept."""
    with _lock:
        return {**_counts, "kept": len(_images)}


def _get(key: tuple[RunKey, str, str] | None) -> np.ndarray | None:
    if key is None:
        return None
    with _lock:
        data = _images.get(key)
        if data is None:
            return None
        _images.move_to_end(key)
        _counts["reused"] += 1
    with Image.open(io.BytesIO(data)) as image:
        return np.asarray(image.convert("RGB"))


def _put(key: tuple[RunKey, str, str] | None, pixels: np.ndarray) -> None:
    with _lock:
        _counts["drawn"] += 1
    if key is None:
        return
    buffer = io.BytesIO()
    Image.fromarray(pixels).save(buffer, format="PNG", compress_level=1)  # fast; the PDF compresses again anyway
    data = buffer.getvalue()
    with _lock:
        _images[key] = data
        _images.move_to_end(key)
        total = sum(len(value) for value in _images.values())
        while total > MAX_BYTES and len(_images) > 1:
            _, dropped = _images.popitem(last=False)
            total -= len(dropped)
