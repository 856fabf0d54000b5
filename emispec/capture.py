"""Measured and simulated clock waveforms: what a time-domain record says about the trapezoid and its harmonics.

From a record (a scope capture or a simulator's output) :func:`analyse` finds the two levels, the edges, the
fundamental frequency and duty cycle, the overshoot and any ringing, and the harmonics of the waveform:

- **levels** are the modes of the histogram's lower and upper halves (the settled states), not the extremes,
  so overshoot and noise do not widen the swing;
- **edges** are found with hysteresis (30 % / 70 %) and timed at their 50 % crossing by linear interpolation;
  10-90 and 20-80 times are the last crossing of the lower threshold before it and the first crossing of the
  upper threshold after it, as a median over every edge;
- **frequency and duty cycle** come from a least-squares fit of every rising and falling crossing time to
  t = a + k T (one period, two offsets), so the whole record counts, not one period;
- **harmonics** are those of an integer number of periods: the record is resampled onto a grid of exactly P
  points per period (a Kaiser-windowed sinc interpolator, or linear for a simulator's non-uniform time steps),
  the periods are averaged, and the FFT of the mean period gives harmonic n at bin n: no leakage, no window,
  no scalloping, and noise and aliases that are not locked to the clock average out;
- **the limit** of what the record knows: harmonics up to 0.4 of its Nyquist frequency (a scope's analog
  bandwidth is typically that fraction of its sampling rate) or a stated ``bandwidth``, and no higher than the
  last harmonic that stands 10 dB over the record's noise floor.

References
----------
IEEE Std 181-2011, Transitions, Pulses, and Related Waveforms (state levels from the histogram, reference
level instants, overshoot). C. R. Paul, Introduction to Electromagnetic Compatibility, 2nd ed., Wiley 2006,
sec. 3.2 (trapezoid spectrum). J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
function", Proc. IEEE ISCAS 1974 (windowed-sinc interpolation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .waveform import Trapezoid

__all__ = ["CaptureError", "Analysis", "analyse", "analyse_file", "neighbourhood_ratio", "NYQUIST_FRACTION",
           "FLOOR_MARGIN_DB"]

#: Highest harmonic a record is trusted for, as a fraction of its Nyquist frequency.
NYQUIST_FRACTION = 0.4
#: A harmonic counts as measured when it stands this far over the record's noise floor [dB].
FLOOR_MARGIN_DB = 10.0
#: Fewest whole periods a record must hold.
MIN_PERIODS = 3
#: Half-width of the interpolating kernel [input samples] and its Kaiser shape parameter.
KERNEL_HALF, KERNEL_BETA = 16, 8.0


class CaptureError(InputError):
    """A record that cannot be analysed (too few periods, no edges, clipped); the message names the file."""


@dataclass(frozen=True)
class Analysis:
    """What a record says (SI units; edges as measured, 10-90 and 20-80).

    ``harmonics`` are the one-sided peak phasors of harmonics 1..len (phase referred to the fitted rising
    50 % crossing); ``limit`` is the last harmonic the record is trusted for.
    """

    frequency_hz: float
    duty: float
    rise_s: float
    fall_s: float
    rise_2080_s: float
    fall_2080_s: float
    low_v: float
    high_v: float
    overshoot: float
    undershoot: float
    ringing_hz: float | None
    ringing_damping: float | None
    periods: int
    sample_interval_s: float
    noise_floor_v: float
    harmonics: np.ndarray
    limit: int

    @property
    def swing_v(self) -> float:
        return self.high_v - self.low_v

    def trapezoid(self) -> Trapezoid:
        """The fitted trapezoid: linear ramps with the measured 10-90 times (divided by 0.8), swing and duty."""
        rise, fall = self.rise_s / 0.8, self.fall_s / 0.8
        room = 2 * min(self.duty, 1 - self.duty) / self.frequency_hz
        scale = min(1.0, room / (rise + fall))  # a near-triangle record: edges shrunk to fit, never widened
        return Trapezoid(self.frequency_hz, self.swing_v, self.duty, rise * scale, fall * scale)

    def limit_within(self, bandwidth_hz: float | None) -> int:
        """The record's limit when its bandwidth is ``bandwidth_hz`` (None: the record's own rule only)."""
        return _limit(self.harmonics, self.frequency_hz, self.sample_interval_s, self.noise_floor_v, bandwidth_hz)


def _limit(harmonics, frequency_hz, dt, floor_v, bandwidth_hz) -> int:
    """The last harmonic under the trusted top (a fraction of Nyquist, or ``bandwidth_hz``) that stands
    :data:`FLOOR_MARGIN_DB` over the noise floor (0 when none does)."""
    top = NYQUIST_FRACTION * 0.5 / dt
    if bandwidth_hz is not None:
        top = min(top, bandwidth_hz)
    n = np.arange(1, len(harmonics) + 1)
    clear = np.flatnonzero((n * frequency_hz <= top) & (np.abs(harmonics) >= floor_v * 10 ** (FLOOR_MARGIN_DB / 20)))
    return int(n[clear[-1]]) if len(clear) else 0


def _levels(v: np.ndarray) -> tuple[float, float]:
    """Low and high state levels: the mode of each half of the histogram, refined by the mean around it."""
    lo, hi = np.percentile(v, [0.5, 99.5])
    if not hi > lo:
        raise ValueError("the record is flat")
    mid = 0.5 * (lo + hi)
    levels = []
    for part in (v[v < mid], v[v >= mid]):
        counts, edges = np.histogram(part, bins=64)
        k = int(np.argmax(counts))
        width = edges[1] - edges[0]
        near = part[np.abs(part - 0.5 * (edges[k] + edges[k + 1])) <= 2 * width]
        levels.append(float(np.mean(near)))
    return levels[0], levels[1]


def _crossing(t, v, j, level):
    """Time where the segment from sample j to j + 1 crosses ``level`` (linear interpolation)."""
    dv = v[j + 1] - v[j]
    frac = np.where(dv != 0, (level - v[j]) / np.where(dv != 0, dv, 1.0), 0.5)
    return t[j] + np.clip(frac, 0.0, 1.0) * (t[j + 1] - t[j])


def _edges(t, v, low, high):
    """Rising and falling edges: 50 % crossing times, and the sample index after each crossing."""
    swing = high - low
    state = np.where(v <= low + 0.3 * swing, -1, np.where(v >= low + 0.7 * swing, 1, 0))
    settled = np.flatnonzero(state)
    change = np.flatnonzero(np.diff(state[settled]))
    after = settled[change + 1]  # the first settled sample of the new state
    rising = state[after] > 0
    mid = low + 0.5 * swing
    out = {}
    for name, sel, side in (("rise", rising, v < mid), ("fall", ~rising, v > mid)):
        idx = np.flatnonzero(side)
        j = idx[np.searchsorted(idx, after[sel]) - 1]  # the last sample on the old side of 50 %
        out[name] = (_crossing(t, v, j, mid), j)
    return out


def _edge_time(t, v, j, low, high, lower, upper, rising):
    """Median time from the ``lower`` to the ``upper`` threshold (fractions of the swing) over the edges at j."""
    swing = high - low
    a, b = (low + lower * swing, low + upper * swing) if rising else (low + upper * swing, low + lower * swing)
    start_side = np.flatnonzero(v < a) if rising else np.flatnonzero(v > a)
    end_side = np.flatnonzero(v >= b) if rising else np.flatnonzero(v <= b)
    k0 = np.searchsorted(start_side, j, side="right") - 1
    k1 = np.searchsorted(end_side, j + 1)
    ok = (k0 >= 0) & (k1 < len(end_side))
    j0, j1 = start_side[k0[ok]], end_side[k1[ok]] - 1
    ok2 = (j0 + 1 < len(v)) & (j1 >= 0)
    times = _crossing(t, v, j1[ok2], b) - _crossing(t, v, j0[ok2], a)
    return float(np.median(times))


def _fit_period(rise_t, fall_t):
    """Least squares of every crossing to t = a + k T: period, rising and falling offsets."""
    period0 = np.median(np.diff(rise_t))
    kr = np.round((rise_t - rise_t[0]) / period0)
    kf = np.round((fall_t - fall_t[0]) / period0)  # each kind of edge counted from its own first
    design = np.zeros((len(kr) + len(kf), 3))
    design[:, 0] = np.concatenate([kr, kf])
    design[: len(kr), 1] = 1.0
    design[len(kr):, 2] = 1.0
    (period, a_rise, a_fall), *_ = np.linalg.lstsq(design, np.concatenate([rise_t, fall_t]), rcond=None)
    return float(period), float(a_rise), float(a_fall)


def _kaiser_sinc(x: np.ndarray) -> np.ndarray:
    inside = np.abs(x) < KERNEL_HALF
    arg = np.sqrt(np.clip(1.0 - (x / KERNEL_HALF) ** 2, 0.0, None))
    return np.where(inside, np.sinc(x) * np.i0(KERNEL_BETA * arg) / np.i0(KERNEL_BETA), 0.0)


def _resample(t0: float, dt: float, v: np.ndarray, times: np.ndarray, chunk: int = 1 << 15) -> np.ndarray:
    """Band-limited values of a uniformly sampled record at ``times`` (Kaiser-windowed sinc)."""
    out = np.empty(times.shape)
    offsets = np.arange(-KERNEL_HALF + 1, KERNEL_HALF + 1)
    for start in range(0, len(times), chunk):  # chunks bound the memory of the (points x taps) weights
        pos = (times[start:start + chunk] - t0) / dt
        base = np.floor(pos).astype(int)
        idx = base[:, None] + offsets[None, :]
        w = _kaiser_sinc(pos[:, None] - idx)
        w /= w.sum(axis=1, keepdims=True)  # DC passes exactly
        out[start:start + chunk] = np.sum(w * v[np.clip(idx, 0, len(v) - 1)], axis=1)
    return out


def _ringing(phase_mean, period, start, stop, swing, noise):
    """Frequency [Hz] and damping ratio of the oscillation about a settled level between two phases."""
    from scipy.optimize import curve_fit

    points = len(phase_mean)
    seg = phase_mean[int(np.ceil(start * points)):int(np.floor(stop * points))]
    if len(seg) < 8:
        return None, None
    level = np.median(seg[len(seg) // 2:])
    r = seg - level
    if np.max(np.abs(r)) < max(0.03 * swing, 6 * noise):
        return None, None
    dt = period / points
    tt = np.arange(len(r)) * dt
    spectrum = np.abs(np.fft.rfft(r - r.mean(), 8 * len(r)))
    f0 = np.fft.rfftfreq(8 * len(r), dt)[1 + int(np.argmax(spectrum[1:]))]  # the strongest tone, zero-padded
    if f0 * tt[-1] < 1.0:
        return None, None  # less than a cycle: a slow settling, not ringing
    a0 = r[np.argmax(np.abs(r))]

    def model(x, a, decay, f, phi):
        return a * np.exp(-decay * x) * np.cos(2 * np.pi * f * x + phi)

    try:
        (a, decay, f, phi), _ = curve_fit(model, tt, r, p0=(abs(a0), 1.0 / tt[-1], f0, 0.0 if a0 > 0 else np.pi),
                                          maxfev=4000)
    except (RuntimeError, ValueError):
        return None, None
    if not (f > 0 and np.isfinite(decay)):
        return None, None
    omega = 2 * np.pi * f
    return float(f), float(max(decay, 0.0) / np.hypot(max(decay, 0.0), omega))


def analyse(time_s: np.ndarray, voltage_v: np.ndarray, file: str = "capture",
            bandwidth_hz: float | None = None) -> Analysis:
    """Measure a periodic two-level record (see the module docstring).

    Raises
    ------
    CaptureError
        Fewer than :data:`MIN_PERIODS` periods, no edges, or a clipped signal.
    """
    t = np.asarray(time_s, dtype=float)
    v = np.asarray(voltage_v, dtype=float)
    steps = np.diff(t)
    dt = float(np.median(steps))
    if np.max(np.abs(steps - dt)) > 1e-3 * dt:  # a simulator's own time steps: it interpolates linearly
        grid = np.arange(t[0], t[-1], dt)
        t, v = grid, np.interp(grid, t, v)
    try:
        low, high = _levels(v)
    except ValueError:
        raise CaptureError(f"{file}: the record is flat; it holds no clock") from None
    swing = high - low
    _check_clipping(v, low, high, file)
    edges = _edges(t, v, low, high)
    rise_t, rise_j = edges["rise"]
    fall_t, fall_j = edges["fall"]
    span = t[-1] - t[0]
    if len(rise_t) < 2 or len(fall_t) < 2:
        raise CaptureError(f"{file}: too few periods: {len(rise_t)} rising and {len(fall_t)} falling edges; "
                           f"capture at least {MIN_PERIODS} periods")
    period, a_rise, a_fall = _fit_period(rise_t, fall_t)
    if span < MIN_PERIODS * period:
        raise CaptureError(f"{file}: too few periods: the record holds {span / period:.2f}; capture at least "
                           f"{MIN_PERIODS}")
    duty = float(((a_fall - a_rise) / period) % 1.0)

    def timed(lower, upper):
        return (_edge_time(t, v, rise_j, low, high, lower, upper, True),
                _edge_time(t, v, fall_j, low, high, lower, upper, False))

    (rise, fall), (rise28, fall28) = timed(0.1, 0.9), timed(0.2, 0.8)

    # Harmonics of whole periods: P points per period, at least as fine as the record, the periods averaged.
    points = int(2 ** np.ceil(np.log2(max(64.0, 2 * period / dt))))
    guard = KERNEL_HALF * dt
    periods = int(np.floor((span - 2 * guard) / period))
    start = t[0] + guard
    grid = start + np.arange(periods * points) * (period / points)
    resampled = _resample(t[0], dt, v, grid).reshape(periods, points)
    mean = resampled.mean(axis=0)
    spectrum = np.fft.rfft(mean) / points
    n = np.arange(1, points // 2)
    harmonics = 2 * spectrum[1:points // 2] * np.exp(2j * np.pi * n * (a_rise - start) / period)
    window = np.count_nonzero((t >= start) & (t < start + periods * period))
    residual = float(np.std(resampled - mean)) if periods > 1 else 0.0
    floor = 2 * residual / np.sqrt(window)
    f0 = 1.0 / period
    limit = _limit(harmonics, f0, dt, floor, bandwidth_hz)

    # Overshoot and ringing from the record folded onto one period (the mean of the samples at each phase).
    bins = max(16, int(round(period / dt)))
    phase = ((t - a_rise) / period) % 1.0
    which = np.minimum((phase * bins).astype(int), bins - 1)
    count = np.bincount(which, minlength=bins)
    folded = np.bincount(which, weights=v, minlength=bins) / np.maximum(count, 1)
    folded = np.where(count > 0, folded, np.interp(np.arange(bins), np.flatnonzero(count), folded[count > 0]))
    overshoot = max(0.0, float(folded.max() - high) / swing)
    undershoot = max(0.0, float(low - folded.min()) / swing)
    noise = residual / np.sqrt(max(1.0, window / bins))
    after_rise = (rise / 0.8) / period
    after_fall = (fall / 0.8) / period
    ring = [_ringing(folded, period, 0.5 * after_rise + 0.02, duty - 0.5 * after_fall, swing, noise),
            _ringing(np.roll(folded, -int(round(duty * bins))), period, 0.5 * after_fall + 0.02,
                     1 - duty - 0.5 * after_rise, swing, noise)]
    ringing = next((r for r in ring if r[0] is not None), (None, None))
    return Analysis(f0, duty, rise, fall, rise28, fall28, low, high, overshoot, undershoot, ringing[0], ringing[1],
                    periods, dt, floor, harmonics, limit)


def _check_clipping(v, low, high, file):
    """A state stuck at the record's extreme while the other state shows noise: the instrument clipped it.

    Clipped: over 90 % of the settled samples of one state sit at the record's extreme value while no single
    value holds 80 % of the other state's.  A noise-free record (a simulator's) is never taken for clipped.
    """
    swing = high - low
    for level, extreme, other in ((high, v.max(), low), (low, v.min(), high)):
        state = v[np.abs(v - level) < 0.02 * swing]  # settled samples only, not the edges
        rest = v[np.abs(v - other) < 0.02 * swing]
        if len(state) and len(rest) and np.count_nonzero(state == extreme) > 0.9 * len(state) \
                and np.unique(rest, return_counts=True)[1].max() < 0.8 * len(rest):
            where = "top" if level == high else "bottom"
            raise CaptureError(f"{file}: the signal is clipped at its {where} ({extreme:.4g} V): most samples of "
                               "that state sit at one value; capture it again with more vertical range")



def analyse_file(path, column: str | None = None) -> Analysis:
    """Read a capture file (:func:`emispec.readers.read_capture`) and analyse it (its bandwidth:
    :meth:`Analysis.limit_within`)."""
    from .readers import read_capture

    data = read_capture(path, column)
    return analyse(data.time_s, data.voltage_v, data.file)


#: Half-width of the neighbourhood an envelope of measured harmonics looks across (a third of an octave).
ENVELOPE_WINDOW = 2 ** (1 / 3)


def neighbourhood_ratio(harmonics: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """Per harmonic n = 1..len: the largest |c_m| / reference_m over m within a third of an octave of n (and
    at least n - 1 .. n + 1), so that a measured harmonic in a null reads like its neighbours."""
    count = len(harmonics)
    ratio = np.append(np.abs(harmonics) / reference, 0.0)
    n = np.arange(1, count + 1)
    lo = np.maximum(1, np.minimum(n - 1, np.floor(n / ENVELOPE_WINDOW))).astype(int)
    hi = np.minimum(count, np.maximum(n + 1, np.ceil(n * ENVELOPE_WINDOW))).astype(int)
    return np.maximum.reduceat(ratio, np.column_stack([lo - 1, hi]).ravel())[::2]
