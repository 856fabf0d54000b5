"""Measured scans against the model: levels referred to the limit, peaks, matches, and the fit of free keys.

A scan (:func:`emispec.readers.read_scan`) is first referred to the limit (:func:`prepare`): a reading in dBm
becomes dBuV (50 ohm), correction tables are added (antenna factor and cable loss positive, a preamplifier's
gain negative), and a scan taken at another distance than the limit's is scaled by inverse distance.  Then:

- **peaks** are the trace's local maxima with a prominence of at least :data:`PROMINENCE_DB` (scipy's
  ``find_peaks``) that stand :data:`CLEAR_DB` over the measured noise floor, the median of the trace in bins of
  a twentieth of a decade, interpolated over log f;
- a peak is **matched** to a predicted source harmonic whose band lies within max(RBW, :data:`MATCH_FRACTION`
  of f, 1.5 scan steps) of it; of several, the one the model reads highest takes it, and each harmonic takes
  at most one peak (the highest; lower peaks near it, such as the horns of a spread band, count as explained).  The prediction compared is the model's receiver tuned to the peak's own
  frequency, all sources together, so that the scan's frequency grid costs the model what it costs the
  measurement;
- peaks that match nothing are **unexplained** (ambient, or a source the board does not model); harmonics the
  model reads :data:`CLEAR_DB` over the measured floor, with no measured peak near them, are **not seen**;
- :func:`fit` moves free keys (any numeric key path) to minimise the dB differences over the matched peaks by
  robust least squares, with standard errors from the Jacobian.

References
----------
CISPR 16-1-1 (resolution bandwidths); 47 CFR 15.31(f)(1) (inverse-distance extrapolation); scipy.signal.find_peaks
(prominence); scipy.optimize.least_squares (soft-L1 loss, the Gauss-Newton covariance (J^T J)^-1 s^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .receiver import resolution_bandwidth_hz
from .trace import Trace

__all__ = ["ScanError", "Scan", "prepare", "noise_floor", "Comparison", "compare", "FitResult", "fit",
           "PROMINENCE_DB", "CLEAR_DB", "MATCH_FRACTION", "DBM_TO_DBUV"]

#: Least prominence of a measured peak [dB].
PROMINENCE_DB = 6.0
#: Least height of a peak, or of a prediction, over the measured floor [dB].
CLEAR_DB = 6.0
#: Width of the bins the floor is the median of [decades].
FLOOR_BIN_DECADES = 0.05
#: A peak and a harmonic match within max(RBW, this fraction of f, 1.5 scan steps): ten times a crystal's
#: usual +-100 ppm, so a clock off its nominal frequency still matches, an ambient carrier a few RBW away not.
MATCH_FRACTION = 0.001
#: dBm to dBuV across 50 ohm: 10 log10(50 ohm x 1 mW / (1 uV)^2).
DBM_TO_DBUV = 10 * math.log10(50 * 1e-3 / 1e-12)
#: Detectors in the order a scan's peaks are looked for.
PRIMARY_ORDER = ("PK", "QP", "AV", "RMS-AV")


class ScanError(InputError):
    """A scan that cannot be compared with the board (its unit, its corrections, its keys)."""


@dataclass(frozen=True)
class Scan:
    """A measured scan in the limit's unit at the limit's distance: one trace per detector.

    ``detector`` is the one peaks are found on (PK if the scan has it); ``notes`` say what was done to the file's
    levels (dBm to dBuV, corrections, distance).
    """

    traces: dict
    unit: str
    detector: str
    file: str
    notes: tuple[str, ...] = ()

    @property
    def frequency_hz(self) -> np.ndarray:
        return self.traces[self.detector].frequency_hz

    @property
    def level_db(self) -> np.ndarray:
        return self.traces[self.detector].level_db


def prepare(data, limit, corrections=(), distance_m: float | None = None) -> Scan:
    """Refer a scan (:class:`emispec.readers.ScanData`) to ``limit``: its unit and its distance.

    ``corrections`` are (file, :class:`~emispec.trace.Trace` in dB) pairs, each added to every level;
    ``distance_m`` is where the scan was taken (default: a ``distance`` line of the file, else the limit's).

    Raises
    ------
    ScanError
        A unit that does not become the limit's, a correction that does not cover the scan, a bad distance.
    """
    from .units import QuantityError, parse_quantity

    f = data.frequency_hz
    levels = {d: np.asarray(v, dtype=float).copy() for d, v in data.levels.items()}
    unit, notes = data.unit, []
    if unit == "dBm":
        levels = {d: v + DBM_TO_DBUV for d, v in levels.items()}
        unit = "dBuV"
        notes.append(f"dBm read as dBuV across 50 ohm (+{DBM_TO_DBUV:.2f} dB)")
    for file, table in corrections:
        lo, hi = table.span_hz
        if f[0] < lo * (1 - 1e-9) or f[-1] > hi * (1 + 1e-9):
            raise ScanError(f"{file}: the correction covers {lo / 1e6:g} to {hi / 1e6:g} MHz; the scan runs from "
                            f"{f[0] / 1e6:g} to {f[-1] / 1e6:g} MHz")
        levels = {d: v + table.at(f) for d, v in levels.items()}
        notes.append(f"correction {file} added")
    if corrections and unit == "dBuV" and limit.unit == "dBuV/m":
        unit = "dBuV/m"  # an antenna factor (dB/m) among the corrections turns the voltage into field strength
    if unit != limit.unit:
        hint = (" give the antenna factor (and cable loss) with --correction" if limit.unit == "dBuV/m"
                and unit == "dBuV" else "")
        raise ScanError(f"{data.file}: the scan is in {data.unit} and the limit {limit.name} in {limit.unit};{hint or ' they must agree'}")
    if limit.distance_m is not None:
        if distance_m is None and "distance" in data.metadata:
            try:
                distance_m = parse_quantity(data.metadata["distance"].replace(",", "."), "length")
            except QuantityError as err:
                raise ScanError(f"{data.file}: distance line {data.metadata['distance']!r}: {err}") from None
        if distance_m is not None:
            if not distance_m > 0:
                raise ScanError(f"{data.file}: distance must be > 0 m")
            if distance_m != limit.distance_m:
                shift = 20 * math.log10(distance_m / limit.distance_m)
                levels = {d: v + shift for d, v in levels.items()}
                notes.append(f"taken at {distance_m:g} m, scaled to the limit's {limit.distance_m:g} m by inverse "
                             f"distance ({shift:+.2f} dB)")
    detector = next(d for d in PRIMARY_ORDER if d in levels)
    traces = {d: Trace(f, v, unit, d, "nan", data.file) for d, v in levels.items()}
    return Scan(traces, unit, detector, data.file, tuple(notes))


def noise_floor(frequency_hz: np.ndarray, level_db: np.ndarray) -> np.ndarray:
    """The measured floor: the median level in bins of :data:`FLOOR_BIN_DECADES`, interpolated over log f."""
    x = np.log10(frequency_hz)
    which = np.floor((x - x[0]) / FLOOR_BIN_DECADES).astype(int)
    order = np.lexsort((level_db, which))  # by bin, then by level: each bin's median is its middle element
    sorted_bins = which[order]
    starts = np.flatnonzero(np.r_[True, sorted_bins[1:] != sorted_bins[:-1]])
    counts = np.diff(np.r_[starts, len(order)])
    lower = level_db[order][starts + (counts - 1) // 2]
    upper = level_db[order][starts + counts // 2]
    centres = np.bincount(which, weights=x) / np.maximum(np.bincount(which), 1)
    return np.interp(x, centres[sorted_bins[starts]], 0.5 * (lower + upper))


def _peaks(scan: Scan) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Indices of the scan's clear peaks, their prominences, and the floor at every point."""
    from scipy.signal import find_peaks

    level = np.where(np.isfinite(scan.level_db), scan.level_db, -np.inf)
    floor = noise_floor(scan.frequency_hz, scan.level_db)
    index, props = find_peaks(level, prominence=PROMINENCE_DB)
    clear = level[index] - floor[index] >= CLEAR_DB
    return index[clear], props["prominences"][clear], floor


def match_tolerance_hz(frequency_hz: np.ndarray, scan_hz: np.ndarray) -> np.ndarray:
    """How far from a peak a harmonic's band may lie and still explain it."""
    step = np.gradient(scan_hz) if len(scan_hz) > 1 else np.zeros(1)
    local = np.interp(frequency_hz, scan_hz, step)
    return np.maximum.reduce([resolution_bandwidth_hz(frequency_hz), MATCH_FRACTION * frequency_hz, 1.5 * local])


@dataclass(frozen=True)
class Comparison:
    """A scan against a board's estimate (dB of the limit's unit; arrays over matches, unexplained peaks and
    harmonics not seen).  ``predicted`` and ``measured`` map every detector of the scan to its levels at the
    matched peaks' frequencies; ``difference_db`` is measured - predicted on the scan's detector."""

    scan: Scan
    peak_hz: np.ndarray
    source: np.ndarray
    harmonic: np.ndarray
    harmonic_hz: np.ndarray
    measured: dict
    predicted: dict
    prominence_db: np.ndarray
    unexplained_hz: np.ndarray
    unexplained_db: np.ndarray
    unexplained_floor_db: np.ndarray
    not_seen_source: np.ndarray
    not_seen_harmonic: np.ndarray
    not_seen_hz: np.ndarray
    not_seen_predicted_db: np.ndarray
    not_seen_floor_db: np.ndarray
    floor_db: np.ndarray

    @property
    def difference_db(self) -> np.ndarray:
        d = self.scan.detector
        return self.measured[d] - self.predicted[d]

    def residual(self) -> dict:
        return residual_stats(self.difference_db)


def residual_stats(difference_db: np.ndarray) -> dict:
    """Median and RMS of the finite differences (None when there are none)."""
    d = np.asarray(difference_db, dtype=float)
    d = d[np.isfinite(d)]
    if not d.size:
        return {"median": None, "rms": None}
    return {"median": float(np.median(d)), "rms": float(np.sqrt(np.mean(d ** 2)))}


def compare(est, scan: Scan) -> Comparison:
    """Match the scan's peaks to the estimate's harmonics (see the module docstring)."""
    from .pipeline import readings_at

    board, rows = est.board, est.rows
    f_scan = scan.frequency_hz
    index, prominence, floor = _peaks(scan)
    peak_hz = f_scan[index]
    inside = (rows.band_hi_hz >= f_scan[0]) & (rows.band_lo_hz <= f_scan[-1])
    row_ids = np.flatnonzero(inside)
    lo, hi = rows.band_lo_hz[row_ids], rows.band_hi_hz[row_ids]
    centre = rows.frequency_hz[row_ids]
    row_level = readings_at(board, est.lines, centre, (scan.detector,))[scan.detector].level_db if row_ids.size \
        else np.array([])
    if scan.detector in rows.readings:  # a spread row's best point, where its band reads most
        row_level = np.fmax(row_level, rows.readings[scan.detector][row_ids])
    row_level = np.where(np.isfinite(row_level), row_level, -np.inf)
    # peaks x rows: how far each harmonic's band lies from each peak, and whether that is close enough
    tol = match_tolerance_hz(peak_hz, f_scan)
    gap = np.maximum(0.0, np.maximum(lo[None, :] - peak_hz[:, None], peak_hz[:, None] - hi[None, :]))
    near = gap <= tol[:, None]
    taken = np.zeros(row_ids.size, bool)
    chosen = np.full(peak_hz.size, -1)
    for p in np.argsort(-scan.level_db[index], kind="stable"):  # the highest peaks choose first
        candidates = np.flatnonzero(near[p] & ~taken)
        if candidates.size:
            best = candidates[np.argmax(row_level[candidates])]
            chosen[p], taken[best] = best, True
    matched = chosen >= 0
    # a peak near a harmonic that a higher peak already took (a spread band's horns, ripple on it) is explained
    # by that harmonic: neither a match nor unexplained
    lone = ~matched & ~near.any(axis=1)
    k = row_ids[chosen[matched]]
    at = peak_hz[matched]
    predicted = {d: t.level_db for d, t in readings_at(board, est.lines, at, tuple(scan.traces)).items()}
    measured = {d: t.level_db[index[matched]] for d, t in scan.traces.items()}
    # harmonics the model reads clear of the measured floor, with no measured peak near them at all
    floor_at_row = np.interp(centre, f_scan, floor)
    anywhere = near.any(axis=0)
    hidden = ~taken & ~anywhere & (row_level >= floor_at_row + CLEAR_DB)
    ns = row_ids[hidden]
    return Comparison(
        scan, at, rows.source[k], rows.harmonic[k], rows.frequency_hz[k], measured, predicted, prominence[matched],
        peak_hz[lone], scan.level_db[index[lone]], floor[index[lone]],
        rows.source[ns], rows.harmonic[ns], rows.frequency_hz[ns], row_level[hidden], floor_at_row[hidden], floor)


# ---------------------------------------------------------------- fitting free keys to the matched peaks

@dataclass(frozen=True)
class FitResult:
    """Fitted keys (SI; dB for gains) with standard errors, and the comparison before and after."""

    keys: tuple[str, ...]
    units: tuple[str, ...]
    nominal: np.ndarray
    fitted: np.ndarray
    stderr: np.ndarray
    before: Comparison
    after_difference_db: np.ndarray
    constraining: tuple[tuple[int, ...], ...]  # per key: the matched peaks that move it, most telling first
    shares: tuple[tuple[float, ...], ...]
    iterations: int


def _transforms(parameter):
    """(to x, from x, bounds in x) for a key: log for positive quantities, as is for dB gains and numbers."""
    declared = parameter.declaration
    low, high = declared.low, declared.high
    if declared.kind == "count":
        raise ScanError(f"--free {parameter.key}: a count cannot be fitted; vary it instead")
    if declared.kind == "gain":
        return (lambda v: v), (lambda x: x), (-300.0, 0.0)
    if declared.kind == "number" or low is None or low < 0:
        return (lambda v: v), (lambda x: x), (-np.inf if low is None else low, np.inf if high is None else high)
    return math.log, math.exp, (-np.inf if low <= 0 else math.log(low), np.inf if high is None else math.log(high))


def fit(template, scan: Scan, keys, nominal_estimate=None) -> FitResult:
    """Least squares in dB over the peaks matched on the nominal board, moving ``keys`` (numeric key paths).

    Each key is fitted in log space when it is a positive quantity (an area, an inductance), as is when it is a
    dB gain; bounds are the key's allowed range.  The loss is soft-L1 with a 1 dB scale, so one odd peak (an
    ambient carrier on a harmonic) does not pull the fit.

    Raises
    ------
    ScanError
        A key with no value in the board, fewer matched peaks than keys, a key no matched peak depends on.
    """
    from scipy.optimize import least_squares

    from .pipeline import Reuse, board_lines, estimate, readings_at

    params = [template.parameter(k) for k in keys]
    for p in params:
        if p.value is None:
            raise ScanError(f"--free {p.key}: no value for it in the board file; write a starting value there")
    est = nominal_estimate or estimate(template.nominal)
    before = compare(est, scan)
    m = before.peak_hz.size
    if m < len(params):
        raise ScanError(f"--free: {len(params)} keys but {m} matched peaks; free at most as many keys as peaks")
    transforms = [_transforms(p) for p in params]
    x0 = np.array([to(p.value) for p, (to, _, _) in zip(params, transforms)])
    lb = np.array([t[2][0] for t in transforms])
    ub = np.array([t[2][1] for t in transforms])
    x0 = np.clip(x0, lb, ub)
    measured = before.measured[scan.detector]
    reuse = Reuse()

    def values(x):
        return {p.key: back(v) for p, (_, back, _), v in zip(params, transforms, x)}

    def residuals(x):
        board = template.board_at(values(x))
        level = readings_at(board, board_lines(board, reuse), before.peak_hz, (scan.detector,))[scan.detector].level_db
        return np.where(np.isfinite(level), measured - level, 0.0)

    r0 = residuals(x0)
    for j, p in enumerate(params):  # a key that moves no matched peak cannot be fitted
        probe = x0.copy()
        probe[j] = probe[j] + 0.05 if np.isfinite(ub[j]) and probe[j] + 0.05 <= ub[j] else probe[j] - 0.05
        if np.max(np.abs(residuals(probe) - r0)) < 1e-6:
            raise ScanError(f"--free {p.key}: changes none of the {m} matched peaks; nothing in the scan "
                            "constrains it")
    result = least_squares(residuals, x0, bounds=(lb, ub), loss="soft_l1", f_scale=1.0, diff_step=1e-4,
                           x_scale="jac")
    jac = np.atleast_2d(result.jac)
    dof = m - len(params)
    fitted = np.array([back(v) for (_, back, _), v in zip(transforms, result.x)])
    stderr = np.full(len(params), np.nan)
    if dof > 0:
        try:
            cov = np.linalg.inv(jac.T @ jac) * (2 * result.cost / dof)
            sx = np.sqrt(np.clip(np.diag(cov), 0, None))
            # back to the key's own unit: d(value) = value dx for a key fitted in log space
            stderr = np.array([s * (v if back is math.exp else 1.0)
                               for s, v, (_, back, _) in zip(sx, fitted, transforms)])
        except np.linalg.LinAlgError:
            pass
    information = jac ** 2
    total = information.sum(axis=0)
    constraining, shares = [], []
    for j in range(len(params)):
        share = information[:, j] / total[j] if total[j] > 0 else np.zeros(m)
        order = [i for i in np.argsort(-share, kind="stable") if share[i] >= 1e-3]
        constraining.append(tuple(int(i) for i in order))
        shares.append(tuple(float(share[i]) for i in order))
    return FitResult(tuple(keys), tuple(p.unit for p in params), np.array([p.value for p in params]), fitted,
                     stderr, before, residuals(result.x), tuple(constraining), tuple(shares), int(result.nfev))
