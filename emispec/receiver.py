"""EMI receiver: CISPR 16-1-1 bands, resolution bandwidths and detector readings.

The receiver turns the RMS spectral lines that reach it into what each
detector would read.  This module currently models a receiver tuned onto
isolated, unmodulated lines: a CW sine reads its RMS value on the peak,
quasi-peak and average detectors alike (CISPR 16-1-1 calibrates every
detector with an unmodulated sine).  Swept readings of closely spaced or
spread lines plug in behind :func:`read_lines` without changing its callers.

References
----------
CISPR 16-1-1:2019, clauses 4 to 6 (bandwidths and detectors per band).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Band", "BANDS", "band_index", "band_names", "resolution_bandwidth_hz", "read_lines"]


@dataclass(frozen=True)
class Band:
    """One CISPR 16-1-1 frequency band with its 6 dB bandwidth and QP time constants."""

    name: str
    start_hz: float
    stop_hz: float
    rbw_hz: float
    qp_charge_s: float | None
    qp_discharge_s: float | None
    meter_s: float | None


#: CISPR 16-1-1 bands; band E has no quasi-peak detector.
BANDS = (
    Band("A", 9e3, 150e3, 200.0, 45e-3, 500e-3, 160e-3),
    Band("B", 150e3, 30e6, 9e3, 1e-3, 160e-3, 160e-3),
    Band("C/D", 30e6, 1e9, 120e3, 1e-3, 550e-3, 100e-3),
    Band("E", 1e9, np.inf, 1e6, None, None, None),
)


def band_index(frequency_hz) -> np.ndarray:
    """Index into :data:`BANDS` of each frequency; a boundary belongs to the lower band."""
    stops = np.array([band.stop_hz for band in BANDS[:-1]])
    return np.searchsorted(stops, np.asarray(frequency_hz, dtype=float), side="left")


def band_names(frequency_hz) -> np.ndarray:
    return np.array([band.name for band in BANDS], dtype=object)[band_index(frequency_hz)]


def resolution_bandwidth_hz(frequency_hz) -> np.ndarray:
    """CISPR 16-1-1 6 dB resolution bandwidth at each frequency [Hz]."""
    return np.array([band.rbw_hz for band in BANDS])[band_index(frequency_hz)]


def read_lines(frequency_hz, level_rms, detectors) -> dict[str, np.ndarray]:
    """Detector readings of isolated unmodulated lines, tuned exactly onto each.

    Parameters
    ----------
    frequency_hz : array_like
        Line frequencies [Hz].
    level_rms : array_like
        RMS amplitude of each line in any linear unit (V, A, V/m).
    detectors : iterable of str
        Detector names (PK, QP, AV, RMS-AV).

    Returns
    -------
    dict
        Detector -> reading in the unit of ``level_rms``.  A CW sine reads
        its RMS value on every detector (CISPR 16-1-1 calibration).
    """
    level = np.asarray(level_rms, dtype=float)
    return {det: level.copy() for det in detectors}
