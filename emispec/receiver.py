"""EMI receiver: CISPR 16-1-1 bands, the resolution filter and the PK, QP and AV detectors.

At a tuning frequency the receiver's IF envelope is the magnitude of the sum of
all spectral lines within reach of its resolution filter, each weighted by the
filter response and rotating at its offset from the tuning frequency.  The
detectors then read that envelope:

- **peak**: its maximum;
- **average**: the meter-weighted linear average (critically damped meter with
  the band's time constant), the maximum of the meter output in the periodic
  steady state; above 1 GHz the plain linear average (47 CFR 15.35(b), FCC KDB
  714737);
- **quasi-peak**: the charge/discharge diode detector with the band's time
  constants followed by the critically damped meter, solved to its periodic
  steady state; no QP above 1 GHz;
- **RMS-average**: the RMS of the envelope (the corner-frequency weighting of
  CISPR 16-1-1's RMS-average detector for pulses is not modelled).

Every detector is calibrated so that an unmodulated sine reads its RMS value.

The resolution filter is Gaussian with the band's 6 dB bandwidth,
|H(df)| = exp(-ln 2 (2 df / B6)^2): a Gaussian fits the CISPR 16-1-1
selectivity masks closely near the centre, and its phase is ignored (a linear
phase only delays the envelope).

References
----------
CISPR 16-1-1:2019, clauses 4 to 6 (bandwidths, detector time constants, the
quasi-peak pulse response); 47 CFR 15.35; FCC KDB 714737 (linear average above
1 GHz).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = [
    "Band",
    "BANDS",
    "Detector",
    "DETECTORS",
    "REACH_RBW",
    "band_index",
    "band_names",
    "resolution_bandwidth_hz",
    "filter_response",
    "detect",
    "detect_steps",
    "sweep",
]

#: Envelope samples per line of the occupied span: the QP balance needs 4 (0.05 dB
#: against stepping the detector on 1024 samples); PK (refined between samples) and
#: the AV mean agree with the brute-force receiver within 0.005 dB at 2.
OVERSAMPLING = {"QP": 4, "other": 2}

#: Threads for each large batch of envelope FFTs (-1: all cores).  A process
#: pool's workers set 1, so that two processes do not fight over the same cores.
FFT_WORKERS = -1
#: Batches of at least this many cells go to scipy.fft with threads; smaller ones
#: to numpy.fft (the same pocketfft, the same numbers, and no scipy import at start).
THREADED_FFT_CELLS = 1 << 20


def _ifft_rows(spectrum: np.ndarray) -> np.ndarray:
    if spectrum.size >= THREADED_FFT_CELLS:
        import scipy.fft  # threads pay off on large batches

        return scipy.fft.ifft(spectrum, axis=1, workers=FFT_WORKERS, overwrite_x=True)
    return np.fft.ifft(spectrum, axis=1)

#: Lines further than this many bandwidths from the tuning frequency are out of
#: the filter's reach (|H| < 5e-6, -106 dB).
REACH_RBW = 2.1


@dataclass(frozen=True)
class Band:
    """One CISPR 16-1-1 frequency band with its 6 dB bandwidth and time constants [s]."""

    name: str
    start_hz: float
    stop_hz: float
    rbw_hz: float
    qp_charge_s: float | None
    qp_discharge_s: float | None
    meter_s: float | None


#: CISPR 16-1-1 bands; band E has no quasi-peak detector and averages linearly.
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


def filter_response(offset_hz, rbw_hz) -> np.ndarray:
    """Amplitude response of the Gaussian resolution filter with 6 dB bandwidth ``rbw_hz``."""
    x = 2.0 * np.asarray(offset_hz) / rbw_hz
    return np.exp(-np.log(2.0) * x * x)


# ---------------------------------------------------------------- detectors


def _meter_steps(u: np.ndarray, step_s: np.ndarray, meter_s: float) -> np.ndarray:
    """Periodic steady-state output of the critically damped meter 1/(1 + s Tm)^2.

    ``u`` (rows x S) is held constant for ``step_s[j]`` during step j; the
    output is returned at the end of every step.  The cascade of two equal
    first-order lags is discretised exactly for a held input.
    """
    a = np.exp(-step_s / meter_s)
    b = (step_s / meter_s) * a

    def run(x1, x2, record):
        out = np.empty_like(u) if record else None
        for j in range(u.shape[1]):
            d1, d2 = x1 - u[:, j], x2 - u[:, j]
            x1, x2 = u[:, j] + d1 * a[j], u[:, j] + d2 * a[j] + d1 * b[j]
            if record:
                out[:, j] = x2
        return x1, x2, out

    zeros = np.zeros(u.shape[0])
    g1, g2, _ = run(zeros, zeros, False)  # response to one period from rest
    period = step_s.sum()
    a_t = np.exp(-period / meter_s)
    x1 = g1 / (1 - a_t)  # fixed point of x(T) = Phi x(0) + Gamma
    x2 = (g2 + (period / meter_s) * a_t * x1) / (1 - a_t)
    return run(x1, x2, True)[2]


def _qp_exact(env: np.ndarray, step_s: np.ndarray, band: Band) -> np.ndarray:
    """Quasi-peak reading by stepping the diode detector through one period.

    dV/dt = (e - V)^+ / tau_c - V / tau_d.  The periodic steady state V(0) is
    the root of g(v) = P(v) - v, P the one-period map (monotone, a contraction),
    bracketed by 0 and the envelope's maximum and found by the Illinois
    variant of regula falsi (superlinear; a handful of periods instead of the
    fifty of a bisection).
    """
    tc, td = band.qp_charge_s, band.qp_discharge_s
    ratio = tc / td
    charge = np.exp(-step_s * (1 / tc + 1 / td))
    discharge = np.exp(-step_s / td)
    target = env / (1 + ratio)  # where a charging capacitor would settle

    def one_period(v, record=False):
        trace = np.empty_like(env) if record else None
        for j in range(env.shape[1]):
            on = env[:, j] > v
            v = np.where(on, target[:, j] + (v - target[:, j]) * charge[j], v * discharge[j])
            if record:
                trace[:, j] = v
        return v, trace

    lo, hi = np.zeros(env.shape[0]), env.max(axis=1)
    g_lo, g_hi = one_period(lo)[0] - lo, one_period(hi)[0] - hi  # g_lo >= 0 >= g_hi
    side = np.zeros(env.shape[0])
    for _ in range(60):
        width = hi - lo
        if np.all(width <= 1e-7 * np.maximum(hi, 1e-300)):  # 1e-6 dB
            break
        with np.errstate(invalid="ignore", divide="ignore"):
            mid = np.where(g_lo - g_hi > 0, lo + width * g_lo / (g_lo - g_hi), 0.5 * (lo + hi))
        mid = np.clip(mid, lo, hi)
        g_mid = one_period(mid)[0] - mid
        up = g_mid > 0
        # Illinois: halve the stale end's value when the same end is kept twice, so both ends close in
        lo, g_lo = np.where(up, mid, lo), np.where(up, g_mid, np.where(side == 1, 0.5 * g_lo, g_lo))
        hi, g_hi = np.where(up, hi, mid), np.where(up, np.where(side == -1, 0.5 * g_hi, g_hi), g_mid)
        side = np.where(up, -1, 1)
    start = np.where(np.abs(g_lo) < np.abs(g_hi), lo, hi)
    _, trace = one_period(start, record=True)
    held = 0.5 * (np.concatenate([start[:, None], trace[:, :-1]], axis=1) + trace)
    return _meter_steps(held, step_s, band.meter_s).max(axis=1) * (1 + ratio)


def _qp_fast(env: np.ndarray, band: Band) -> np.ndarray:
    """Quasi-peak reading of an envelope whose period is far below the discharge time.

    Over one short period V hardly moves, so the steady state balances the mean
    charge and discharge currents: mean((e - V)^+) / tau_c = V / tau_d.  With
    the samples sorted, the balance is linear in V between two samples, so the
    root is found exactly without iteration.
    """
    ratio = band.qp_charge_s / band.qp_discharge_s
    n = env.shape[1]
    e = -np.sort(-env, axis=1)
    m = np.arange(1, n + 1)
    v = np.cumsum(e, axis=1, dtype=float) / (m + ratio * n)
    below = np.concatenate([e[:, 1:], np.zeros((e.shape[0], 1))], axis=1)
    valid = (v >= below) & (v <= e)
    pick = np.argmax(valid, axis=1)
    return v[np.arange(e.shape[0]), pick] * (1 + ratio)


def _peak_refined(env: np.ndarray) -> np.ndarray:
    """Envelope maximum refined between samples by a parabola through the top three samples."""
    rows = np.arange(env.shape[0])
    best = np.argmax(env, axis=1)
    y0 = env[rows, best - 1]
    y1 = env[rows, best]
    y2 = env[rows, (best + 1) % env.shape[1]]
    curvature = y0 - 2 * y1 + y2
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(curvature < 0, 0.5 * (y0 - y2) / curvature, 0.0)
    return np.maximum(y1, y1 - 0.25 * (y0 - y2) * shift)


def repeats_fast(period_s: float, band: Band) -> bool:
    """True where the envelope repeats 100 times faster than the meter and discharge time constants.

    The meter then shows the mean of its input and the QP balance is solved
    exactly from the sorted samples, with no time stepping.
    """
    return band.meter_s is None or 100 * period_s < min(band.meter_s, band.qp_discharge_s or np.inf)


def _uniform_steps(env: np.ndarray, period_s: float) -> np.ndarray:
    return np.full(env.shape[1], period_s / env.shape[1])


def _nan_rows(env: np.ndarray) -> np.ndarray:
    return np.full(env.shape[0], np.nan)


def _average_periodic(env, period_s, band):
    if repeats_fast(period_s, band):
        return env.mean(axis=1)
    return _average_stepped(env, _uniform_steps(env, period_s), band)


def _average_stepped(env, step_s, band):
    if band.meter_s is None:
        return env @ (step_s / step_s.sum())
    return _meter_steps(env, step_s, band.meter_s).max(axis=1)


def _qp_periodic(env, period_s, band):
    if band.qp_charge_s is None:
        return _nan_rows(env)
    return _qp_fast(env, band) if repeats_fast(period_s, band) else _qp_exact(env, _uniform_steps(env, period_s), band)


def _qp_stepped(env, step_s, band):
    return _nan_rows(env) if band.qp_charge_s is None else _qp_exact(env, step_s, band)


@dataclass(frozen=True)
class Detector:
    """A detector: its reading of a uniformly sampled periodic envelope and of one held in unequal steps.

    Both take ``env`` (rows x samples, RMS-calibrated: a CW of RMS a is a
    constant a) and a :class:`Band`, and return one reading per row.
    """

    name: str
    periodic: Callable[[np.ndarray, float, Band], np.ndarray]
    stepped: Callable[[np.ndarray, np.ndarray, Band], np.ndarray]
    available: Callable[[Band], bool] = lambda band: True
    meaning: str = ""


#: The detectors a limit line may name, by name.
DETECTORS: dict[str, Detector] = {d.name: d for d in (
    Detector("PK", lambda env, period, band: _peak_refined(env), lambda env, step, band: env.max(axis=1),
             meaning="peak: the maximum of the envelope (refined between samples)"),
    Detector("QP", _qp_periodic, _qp_stepped, available=lambda band: band.qp_charge_s is not None,
             meaning="quasi-peak: charge/discharge detector and critically damped meter (no QP above 1 GHz)"),
    Detector("AV", _average_periodic, _average_stepped,
             meaning="CISPR average: meter-weighted linear average (linear average above 1 GHz)"),
    Detector("RMS-AV", lambda env, period, band: np.sqrt((env**2).mean(axis=1)),
             lambda env, step, band: np.sqrt((env**2) @ (step / step.sum())),
             meaning="RMS of the envelope (the pulse corner-frequency weighting is not modelled)"),
)}


def _detector(name: str) -> Detector:
    if name not in DETECTORS:
        raise ValueError(f"unknown detector {name!r}")
    return DETECTORS[name]


def detect_steps(envelope, step_s, band: Band, detectors) -> dict[str, np.ndarray]:
    """Detector readings of a periodic envelope sampled with unequal steps.

    Parameters
    ----------
    envelope : array_like, shape (rows, S)
        IF envelope (RMS-calibrated: a CW of RMS a gives a constant a), each
        sample held for the matching step.
    step_s : array_like, shape (S,)
        Duration of each sample [s]; they add up to one period.
    band : Band
    detectors : iterable of str

    Returns
    -------
    dict
        Detector -> reading per row (NaN for QP in band E).
    """
    env = np.atleast_2d(np.asarray(envelope, dtype=float))
    step = np.asarray(step_s, dtype=float)
    return {det: _detector(det).stepped(env, step, band) for det in detectors}


def detect(envelope, period_s: float, band: Band, detectors) -> dict[str, np.ndarray]:
    """Detector readings of a periodic envelope sampled uniformly over one period.

    Envelopes that repeat much faster than the detector and meter time
    constants (a spread-spectrum modulation at tens of kHz) take closed forms:
    the meter then shows the mean of its input, and the QP balance is solved
    exactly from the sorted samples.  Slower envelopes are stepped in time.
    The peak is refined between samples by a parabola through the top three.
    """
    env = np.atleast_2d(np.asarray(envelope))
    if env.dtype != np.float32:  # the swept receiver's envelopes stay single precision
        env = env.astype(float, copy=False)
    return {det: _detector(det).periodic(env, period_s, band) for det in detectors}


# ---------------------------------------------------------------- swept readings


def sweep(line_hz, line_amplitude, grid_hz: float, tuning_hz, detectors, max_cells: int = 1 << 21):
    """What each detector reads at each tuning frequency from one source's lines.

    Parameters
    ----------
    line_hz : array_like
        Line frequencies [Hz], ascending.
    line_amplitude : array_like of complex
        RMS amplitudes of the lines (any linear unit), with their phases.
    grid_hz : float
        Spacing that the line frequencies share (the modulation rate of a
        spread clock, f0 of an unmodulated one).  The envelope repeats with
        period 1/grid_hz; lines of different harmonics that are not on one
        grid are placed on the nearest grid point, which changes only the rate
        of their beat, not its depth.
    tuning_hz : array_like
        Tuning frequencies [Hz].
    detectors : iterable of str

    Returns
    -------
    dict
        Detector -> reading at each tuning frequency (0 where no line is in reach).
    """
    line_hz = np.asarray(line_hz, dtype=float)
    amp = np.asarray(line_amplitude, dtype=complex)
    tuning = np.asarray(tuning_hz, dtype=float)
    detectors = tuple(detectors)
    out = {det: np.zeros(tuning.shape) for det in detectors}
    if tuning.size == 0 or line_hz.size == 0:
        return out
    bands = band_index(tuning)
    for b in np.flatnonzero(np.bincount(bands, minlength=len(BANDS))):
        band = BANDS[b]
        rows = np.flatnonzero(bands == b)
        reach = REACH_RBW * band.rbw_hz
        lo = np.searchsorted(line_hz, tuning[rows] - reach, side="left")
        hi = np.searchsorted(line_hz, tuning[rows] + reach, side="right")
        live = hi > lo  # the other points read nothing
        if not live.any():
            continue
        rows, lo, hi = rows[live], lo[live], hi[live]
        # the lines these points reach; the envelopes are built in single precision
        start, stop = int(lo.min()), int(hi.max())
        here, amp_here = line_hz[start:stop], amp[start:stop]
        lo, hi = lo - start, hi - start
        count = hi - lo
        # each point's envelope length follows from its own lines only, so a point reads the same whatever it is
        # batched with (a memo of readings relies on it); one pass per length and number of lines reached (in
        # steps of 1/8 of a power of two, so little padding is computed)
        span = np.rint((here[hi - 1] - here[lo]) / grid_hz).astype(np.int64) + 1
        qp = "QP" in detectors and DETECTORS["QP"].available(band)
        n_fft = _envelope_length(span, OVERSAMPLING["QP" if qp else "other"])
        step = np.maximum(2 ** np.floor(np.log2(count)) / 8, 1)
        sizes = (np.ceil(count / step) * step).astype(np.int64)
        group = sizes << 32 | n_fft
        single = amp_here.astype(np.complex64)
        for key in np.unique(group):
            size, length = int(key >> 32), int(key & 0xFFFFFFFF)
            for chunk in _chunks(np.flatnonzero(group == key), max_cells // (8 * length)):
                values = _sweep_rows(here, amp_here, single, grid_hz, tuning[rows[chunk]], lo[chunk], count[chunk],
                                     size, length, band, detectors)
                for det in detectors:
                    out[det][rows[chunk]] = values[det]
    return out


def _envelope_length(span: np.ndarray, oversampling: int) -> np.ndarray:
    """Envelope samples for lines spanning ``span`` grid points: at least ``oversampling`` per point and 32, rounded
    up to 1, 1.25, 1.5 or 1.75 times a power of two (lengths pocketfft transforms fast; few distinct ones, so few
    passes, for at most 25 % more samples than needed)."""
    need = np.maximum(32, oversampling * np.asarray(span, dtype=np.int64))
    power = 2 ** np.floor(np.log2(need)).astype(np.int64)
    return -(-4 * need // power) * power // 4


def _chunks(index: np.ndarray, rows: int):
    rows = max(int(rows), 1)
    return [index[i:i + rows] for i in range(0, index.size, rows)]


#: The Gaussian filter's exponent per (2 offset / RBW)^2, in single precision (see :func:`filter_response`).
_GAUSS_32 = np.float32(-np.log(2.0))


def _sweep_rows(line_hz, amp, single, grid_hz, tuning, lo, count, width, n_fft, band, detectors):
    """Envelopes (``n_fft`` samples) and readings for tuning points that each reach at most ``width`` lines
    (``single``: the amplitudes ``amp`` in single precision)."""
    col = np.arange(width)
    present = col[None, :] < count[:, None]
    idx = np.where(present, lo[:, None] + col[None, :], lo[:, None])
    freq = line_hz[idx]
    if width == 1:  # a single line: a CW reads its RMS value on every detector the band has
        level = np.abs(amp[idx[:, 0]]) * filter_response(freq[:, 0] - tuning, band.rbw_hz)
        return {det: level if DETECTORS[det].available(band) else np.full(level.shape, np.nan) for det in detectors}
    # offsets need float64 (lines at GHz, offsets at kHz); the weights and the envelope do not
    x = ((freq - tuning[:, None]) * (2.0 / band.rbw_hz)).astype(np.float32)
    x *= x
    x *= _GAUSS_32
    gain = np.exp(x, out=x)  # filter_response in single precision
    gain *= present
    weights = single[idx] * gain
    bins = np.rint((freq - freq[:, :1]) / grid_hz).astype(np.intp)
    # lines of two harmonics may round onto one bin, so the lines are added in, not assigned (the padding adds 0)
    bins += np.arange(0, tuning.size * n_fft, n_fft)[:, None]
    spectrum = np.zeros((tuning.size, n_fft), dtype=np.complex64)
    np.add.at(spectrum.reshape(-1), bins.reshape(-1), weights.reshape(-1))
    env = np.abs(_ifft_rows(spectrum))
    env *= n_fft
    return detect(env, 1.0 / grid_hz, band, detectors)
