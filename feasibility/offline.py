"""Configure astropy, once, to work without a network connection.

The service must never download anything at run time. astropy, left to its
defaults, fetches a fresh IERS-A Earth-orientation table when a computation asks
for dates past the predictions of the table it has, and may fetch leap-second
tables and other remote data. :func:`configure_offline` turns all of that off:

- ``astropy.utils.iers.conf.auto_download = False``: use the IERS-A table bundled
  with the installed ``astropy-iers-data`` package;
- ``astropy.utils.iers.conf.auto_max_age = None``: never consider that table too
  old (no stale-table error or warning);
- ``astropy.utils.iers.conf.iers_degraded_accuracy = "warn"``: dates outside the
  table degrade accuracy instead of raising;
- ``astropy.utils.data.conf.allow_internet = False``: no remote data at all.

Past the end of the bundled table astropy holds UT1−UTC at its last tabulated
(predicted) value; |UT1−UTC| stays below 0.9 s by definition of UTC, so the
Earth's rotation angle is off by at most 0.9 s × 15″/s ≈ 0.004°, far inside the
engine's tolerance. :func:`note_beyond_iers_table` logs that once per process;
the sky grid turns astropy's and ERFA's warnings into log records the same way
(:func:`log_astropy_warnings`), so pytest's warnings-as-errors never sees them.
"""

from __future__ import annotations

import contextlib
import logging
import re
import warnings
from collections.abc import Iterator

__all__ = ["configure_offline", "iers_table_end_mjd", "log_astropy_warnings", "note_beyond_iers_table"]

log = logging.getLogger(__name__)

_configured = False
_logged: set[str] = set()


def configure_offline() -> None:
    """Set astropy's IERS and remote-data options for offline use; later calls do nothing."""
    global _configured
    if _configured:
        return
    from astropy.utils import iers
    from astropy.utils.data import conf as data_conf

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    iers.conf.iers_degraded_accuracy = "warn"
    data_conf.allow_internet = False
    _configured = True


def iers_table_end_mjd() -> float:
    """The last MJD of the Earth-orientation table astropy uses (bundled IERS-A, offline)."""
    configure_offline()
    from astropy.utils import iers

    table = iers.earth_orientation_table.get()
    return float(table["MJD"][-1].value)


def note_beyond_iers_table(last_mjd: float) -> bool:
    """Log once per process when ``last_mjd`` (UTC) lies past the bundled IERS table; True if it does."""
    end = iers_table_end_mjd()
    if last_mjd <= end:
        return False
    _log_once(
        "iers-end",
        "dates past MJD %.0f, the end of the bundled IERS-A table: UT1-UTC is held at its last "
        "predicted value (error below 0.004 degrees of Earth rotation); no download attempted",
        end,
    )
    return True


@contextlib.contextmanager
def log_astropy_warnings() -> Iterator[None]:
    """Run a block with astropy's and ERFA's warnings turned into one log record each per process.

    Used around the few astropy calls the sky grid makes, so that a date past the
    bundled tables (an IERS or "dubious year" warning) is reported in the log but
    never raised, while unrelated warnings still propagate.
    """
    from astropy.utils.exceptions import AstropyWarning
    from erfa import ErfaWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", AstropyWarning)
        warnings.simplefilter("always", ErfaWarning)
        yield
    for item in caught:
        if issubclass(item.category, (AstropyWarning, ErfaWarning)):
            text = str(item.message)
            _log_once(f"{item.category.__name__}:{re.sub(r'[0-9]+', '#', text)[:80]}", "%s: %s", item.category.__name__, text)
        else:
            warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)


def _log_once(key: str, message: str, *args: object) -> None:
    if key in _logged:
        return
    _logged.add(key)
    log.warning(message, *args)
