"""Frequency-level data: limit lines, transfer tables, swept spectra and measured scans.

Everything in emispec that is "a level against frequency" is a :class:`Trace`:
ascending frequencies with a level in dB of a stated unit, the detector it
belongs to (if any), and how it reads between and beyond its points.  Levels
between points are linear in dB over log frequency, which is how the standards
write sloped limit segments and how tables of gain or impedance are
interpolated; a frequency listed twice is a step, and the lower level applies
at the step (47 CFR 15.107(a) note, 15.109(c)).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Trace", "interp_log_f"]


def interp_log_f(frequency_hz, table_hz, values, outside: str = "hold") -> np.ndarray:
    """Interpolate ``values`` linearly over log frequency.

    Parameters
    ----------
    frequency_hz : array_like
        Where to evaluate [Hz], > 0.
    table_hz : array_like
        Ascending table frequencies [Hz]; a frequency listed twice is a step.
    values : array_like
        The table's values (dB, a log magnitude, a phase: anything that is
        linear over log f between points).
    outside : {"hold", "nan"}
        Beyond the table: keep the end values, or NaN.

    Returns
    -------
    numpy.ndarray
        Interpolated values.  At a step frequency the lower of the two values.
    """
    x = np.log10(np.asarray(table_hz, dtype=float))
    y = np.asarray(values, dtype=float)
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    lf = np.log10(f)
    if outside == "hold" and not (x[1:] == x[:-1]).any():
        level = np.interp(lf, x, y)
    else:
        i = np.clip(np.searchsorted(x, lf, side="right") - 1, 0, len(x) - 2)
        x0, x1, y0, y1 = x[i], x[i + 1], y[i], y[i + 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(x1 > x0, (lf - x0) / (x1 - x0), 0.0)
        if outside == "hold":
            t = np.clip(t, 0.0, 1.0)
        level = y0 + t * (y1 - y0)
        # exact hits on a listed frequency take the lowest level listed there
        listed = np.unique(x)
        lowest = np.array([y[x == xf].min() for xf in listed])
        above = np.searchsorted(listed, lf).clip(0, listed.size - 1)
        below = (above - 1).clip(0)
        nearest = np.where(np.abs(lf - listed[below]) < np.abs(lf - listed[above]), below, above)
        hit = np.abs(lf - listed[nearest]) <= 1e-12
        level[hit] = lowest[nearest[hit]]
    if outside == "nan":
        lo, hi = 10.0 ** x[0], 10.0 ** x[-1]
        inside = (f >= lo * (1 - 1e-12)) & (f <= hi * (1 + 1e-12))
        level = np.where(inside, level, np.nan)
    return level


@dataclass(frozen=True)
class Trace:
    """Levels against frequency.

    Parameters
    ----------
    frequency_hz : numpy.ndarray
        Ascending frequencies [Hz] (a frequency may appear twice: a step).
    level_db : numpy.ndarray
        Levels in dB of ``unit``.
    unit : str
        ``"dBuV/m"``, ``"dBuV"``, ``"dBuA"`` for levels; ``"dB"`` for a gain.
    detector : str or None
        The detector a limit line or a measured column belongs to.
    outside : {"nan", "hold"}
        How the trace reads beyond its ends: a limit line does not exist there
        (NaN); a transfer table keeps its end values.
    origin : str
        Where the data came from (a file, a bundled limit, "computed").
    """

    frequency_hz: np.ndarray
    level_db: np.ndarray
    unit: str = "dB"
    detector: str | None = None
    outside: str = "nan"
    origin: str = field(default="", compare=False)

    @property
    def span_hz(self) -> tuple[float, float]:
        return float(self.frequency_hz[0]), float(self.frequency_hz[-1])

    def at(self, frequency_hz) -> np.ndarray:
        """The trace's level at each frequency (see :func:`interp_log_f`)."""
        return interp_log_f(frequency_hz, self.frequency_hz, self.level_db, self.outside)

    def level(self, frequency_hz) -> np.ndarray:
        """Alias of :meth:`at`, the word limit lines use."""
        return self.at(frequency_hz)
