"""Trapezoidal clock waveforms, their loads, and triangular current pulses.

Everything here is an exact Fourier series of a periodic piecewise-linear
waveform.  Levels are peak amplitudes of each one-sided cosine component;
divide by sqrt(2) for what an EMI receiver reads (see :func:`rms`).

References
----------
C. R. Paul, *Introduction to Electromagnetic Compatibility*, 2nd ed.,
Wiley, 2006, sec. 3.2 (spectra of digital waveforms): the trapezoidal pulse
train, its sinc-sinc form and its bounding envelope.  The unequal-edge form is
derived the same way, by differentiating the waveform into two rectangular
pulses of height A/tr and -A/tf.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

__all__ = [
    "EDGE_FRACTION",
    "WaveformError",
    "full_edge_time",
    "Trapezoid",
    "harmonic_amplitudes",
    "harmonic_phasors",
    "envelope",
    "corner_frequencies",
    "rms",
    "load_current",
    "triangle_pulse_amplitudes",
    "triangle_pulse_phasors",
    "EDGE_SHAPES",
    "THRESHOLDS",
    "edge_parameter",
    "edge_response",
    "edge_bound",
    "shaped_phasors",
    "spectrum_envelope",
    "supply_current_phasors",
    "supply_current_bound",
    "triangle_pulse_envelope",
]

#: Fraction of the 0-100 % ramp time that an edge measured between these
#: thresholds spans, for a linear ramp: t(10-90) = 0.8 t(0-100), t(20-80) = 0.6 t(0-100).
EDGE_FRACTION = {"10-90": 0.8, "20-80": 0.6, "0-100": 1.0}


class WaveformError(ValueError):
    """Waveform parameters that describe no realisable trapezoid."""


def full_edge_time(edge_s: float, convention: str = "10-90") -> float:
    """Convert a measured edge time to the 0-100 % ramp time of the trapezoid.

    Parameters
    ----------
    edge_s : float
        Edge time between the thresholds of ``convention`` [s].
    convention : {"10-90", "20-80", "0-100"}
        Thresholds the edge time was measured between.

    Returns
    -------
    float
        Full linear-ramp time [s].
    """
    return edge_s / EDGE_FRACTION[convention]


@dataclass(frozen=True)
class Trapezoid:
    """A periodic trapezoidal waveform from 0 to ``swing_v``.

    Parameters
    ----------
    frequency_hz : float
        Repetition frequency f0 = 1/T [Hz].
    swing_v : float
        Low-to-high amplitude A [V] (or [A] when used for a current).
    duty : float
        Width between the 50 % crossings over the period, 0 < duty < 1.
    rise_s, fall_s : float
        0-100 % linear ramp times [s].
    """

    frequency_hz: float
    swing_v: float
    duty: float
    rise_s: float
    fall_s: float

    def __post_init__(self) -> None:
        if not self.frequency_hz > 0:
            raise WaveformError(f"frequency must be > 0 Hz, got {self.frequency_hz}")
        if not 0 < self.duty < 1:
            raise WaveformError(f"duty cycle must be between 0 and 1 (exclusive), got {self.duty}")
        if not (self.rise_s >= 0 and self.fall_s >= 0):
            raise WaveformError("rise and fall times must be >= 0 s")
        # The ramps are centred on the 50 % crossings, so half of each edge lies
        # in the high time and half in the low time: the two half-edges must fit.
        period = 1.0 / self.frequency_hz
        room = min(self.duty, 1.0 - self.duty) * period
        if 0.5 * (self.rise_s + self.fall_s) > room * (1 + 1e-12):
            raise WaveformError(
                f"(rise + fall)/2 = {0.5 * (self.rise_s + self.fall_s):.4g} s does not fit in the "
                f"shorter of the high and low times ({room:.4g} s)"
            )

    @property
    def period_s(self) -> float:
        return 1.0 / self.frequency_hz

    @property
    def width_s(self) -> float:
        """Pulse width tau between the 50 % crossings [s]."""
        return self.duty * self.period_s


def _is_integer(x: np.ndarray) -> np.ndarray:
    """True where x is an integer up to rounding of the products that made it."""
    return np.abs(x - np.round(x)) <= 1e-9 * np.maximum(1.0, np.abs(x))


def harmonic_amplitudes(wave: Trapezoid, n: np.ndarray) -> np.ndarray:
    """Exact peak amplitude of harmonic ``n`` of a trapezoid with unequal edges.

    c_n = (A / (n pi)) |sinc(n tr/T) - exp(-j 2 pi n tau/T) sinc(n tf/T)|,
    with sinc(x) = sin(pi x)/(pi x).  For tr = tf this is the textbook
    2 A (tau/T) |sinc(n tau/T)| |sinc(n tr/T)|.

    Parameters
    ----------
    wave : Trapezoid
    n : array_like of int
        Harmonic numbers, n >= 1.

    Returns
    -------
    numpy.ndarray
        Peak amplitudes [V].  Harmonics on a null of the spectrum (n tau/T or
        both n tr/T and n tf/T integer) are exact zeros, not rounding residue.

    References
    ----------
    Paul (2006), sec. 3.2.  Derivation: the derivative of the waveform is a
    rectangular pulse A/tr over the rise and -A/tf over the fall; divide its
    Fourier coefficients by j n w0.
    """
    n = np.asarray(n, dtype=float)
    if n.size and n.min() < 1:
        raise ValueError("harmonic numbers start at 1")
    f0 = wave.frequency_hz
    sinc_rise = _sinc_of_multiple(n, wave.rise_s * f0)
    equal_edges = wave.rise_s == wave.fall_s
    sinc_fall = sinc_rise if equal_edges else _sinc_of_multiple(n, wave.fall_s * f0)
    half = _sin_pi_multiple(n, wave.duty)
    half *= half  # sin^2(theta / 2), theta = 2 pi n tau / T
    # |s_r - exp(-j theta) s_f|^2 = (s_r - s_f)^2 + 4 s_r s_f sin^2(theta/2)
    #                             = (s_r + s_f)^2 - 4 s_r s_f cos^2(theta/2);
    # take whichever is a sum of non-negative terms, so that harmonics near a
    # null keep their relative accuracy.  In-place steps: this is the hot path.
    cross = sinc_rise * sinc_fall
    opposite = cross < 0
    power = sinc_rise - sinc_fall
    np.add(sinc_rise, sinc_fall, out=power, where=opposite)
    weight = half
    np.subtract(half, 1.0, out=weight, where=opposite)
    power *= power
    weight *= cross
    weight *= 4.0
    power += weight
    amplitude = np.sqrt(power)
    amplitude *= wave.swing_v / np.pi
    amplitude /= n
    # Exact nulls only need confirming where the power is already tiny.
    maybe = np.flatnonzero(power < 1e-12)
    if maybe.size:
        m = n[maybe]
        null = _is_integer(m * wave.duty) & np.isclose(sinc_rise[maybe], sinc_fall[maybe], rtol=1e-9, atol=1e-15)
        if wave.rise_s > 0 and wave.fall_s > 0:
            null |= _is_integer(m * (wave.rise_s * f0)) & _is_integer(m * (wave.fall_s * f0))
        amplitude[maybe[null]] = 0.0
    return amplitude


def harmonic_phasors(wave: Trapezoid, n: np.ndarray) -> np.ndarray:
    """Complex one-sided harmonic amplitudes, phase referred to the middle of the rising edge.

    Magnitudes are those of :func:`harmonic_amplitudes` (exact nulls kept); the
    phase is that of (A / (j pi n)) (sinc(n tr/T) - exp(-j 2 pi n tau/T) sinc(n tf/T)).
    Phases matter only where lines of one clock, or of clocks sharing a
    reference, add inside one receiver bandwidth.
    """
    n = np.asarray(n, dtype=float)
    f0 = wave.frequency_hz
    shape = (np.sinc(n * wave.rise_s * f0) - np.exp(-2j * np.pi * n * wave.duty) * np.sinc(n * wave.fall_s * f0)) / (
        1j * n
    )
    return harmonic_amplitudes(wave, n) * np.exp(1j * np.angle(shape))


def _sinc_of_multiple(n: np.ndarray, c: float) -> np.ndarray:
    """sinc(n c) = sin(pi n c) / (pi n c) for n >= 1, c >= 0."""
    if c == 0:
        return np.ones_like(n)
    s = _sin_pi_multiple(n, c)
    s /= n * (np.pi * c)
    return s


def _sin_pi_multiple(n: np.ndarray, c: float) -> np.ndarray:
    """sin(pi n c) for whole numbers n.

    When c is a fraction p/q with a small denominator (a duty cycle of 45 %,
    an edge of 1.1 ns at 10 MHz), sin(pi n c) repeats with period 2q in n:
    one table of 2q sines and a gather replace 10^6 sine evaluations.
    """
    fraction = Fraction(c).limit_denominator(4096)
    p, q = fraction.numerator, fraction.denominator
    if n.size < 8 * q or abs(c - p / q) > 4 * np.spacing(c):
        return np.sin(n * (np.pi * c))
    table = np.sin(np.pi * ((np.arange(2 * q) * p) % (2 * q)) / q)
    period = 2.0 * q
    index = n - period * np.floor(n / period)  # n mod 2q, exact for whole numbers below 2^52
    return table.take(index.astype(np.intp))


def corner_frequencies(wave: Trapezoid) -> tuple[float, float]:
    """Corner frequencies of the spectral envelope [Hz].

    Returns
    -------
    (f1, f2) : tuple of float
        f1 = 1/(pi tau) where the envelope turns from flat to -20 dB/decade,
        f2 = 1/(pi tr) where it turns to -40 dB/decade (the faster edge).
        tau is the shorter of the high and low times, since a duty cycle D and
        1 - D give the same harmonic amplitudes.

    References
    ----------
    Paul (2006), sec. 3.2, the bounds on the trapezoid spectrum.
    """
    tau = min(wave.duty, 1.0 - wave.duty) * wave.period_s
    edge = min(wave.rise_s, wave.fall_s)
    return 1.0 / (np.pi * tau), (np.inf if edge == 0 else 1.0 / (np.pi * edge))


def envelope(wave: Trapezoid, frequency_hz: np.ndarray) -> np.ndarray:
    """Bounding envelope of the harmonic peak amplitudes [V].

    Flat at 2 A tau/T below f1, 2 A/(pi T f) between f1 and f2, and
    2 A/(pi^2 T tr f^2) above f2.

    References
    ----------
    Paul (2006), sec. 3.2.
    """
    f = np.asarray(frequency_hz, dtype=float)
    f1, f2 = corner_frequencies(wave)
    a, t = wave.swing_v, wave.period_s
    flat = 2 * a / (np.pi * t * f1)  # = 2 A tau / T
    level = np.minimum(flat, 2 * a / (np.pi * t * f))
    if np.isfinite(f2):
        level = np.minimum(level, 2 * a / (np.pi * t * f) * (f2 / f))
    return level


def rms(peak: np.ndarray) -> np.ndarray:
    """RMS of a sinusoid of the given peak amplitude: what a receiver reads."""
    return np.asarray(peak) / np.sqrt(2.0)


def load_current(
    voltage: np.ndarray,
    frequency_hz: np.ndarray,
    resistance_ohm: float | None = None,
    capacitance_f: float | None = None,
) -> np.ndarray:
    """Current drawn by a resistive, capacitive or series R-C load.

    I = V / (R + 1/(j 2 pi f C)); a missing R or C is left out of the series.

    Parameters
    ----------
    voltage : array_like
        Voltage harmonic amplitudes [V] (peak or RMS; the result is the same kind).
    frequency_hz : array_like
        Frequencies [Hz].
    resistance_ohm, capacitance_f : float, optional
        Series load elements [ohm], [F]; at least one is required.

    Returns
    -------
    numpy.ndarray
        Current magnitudes [A].
    """
    if resistance_ohm is None and capacitance_f is None:
        raise ValueError("a load needs a resistance, a capacitance or both")
    omega = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
    impedance = np.zeros_like(omega, dtype=complex)
    if resistance_ohm is not None:
        impedance = impedance + resistance_ohm
    if capacitance_f is not None:
        impedance = impedance + 1.0 / (1j * omega * capacitance_f)
    return np.abs(np.asarray(voltage) / impedance)


def triangle_pulse_amplitudes(
    peak_a: float,
    width_s: float,
    frequency_hz: float,
    n: np.ndarray,
    per: str = "cycle",
    duty: float = 0.5,
) -> np.ndarray:
    """Harmonics of a train of triangular current pulses (supply-pin current).

    Each pulse rises linearly to ``peak_a`` and falls back over a base width
    ``width_s``: a trapezoid with zero flat top (tau = tr = tf = width/2),
    so c_n = 2 Ip (w / 2T) sinc^2(n w / 2T) at one pulse per cycle.  With one
    pulse per edge the second pulse sits at the falling edge, a delay of
    duty * T, which multiplies the line spectrum by |1 + exp(-j 2 pi n D)|.

    Parameters
    ----------
    peak_a : float
        Peak current of each pulse [A].
    width_s : float
        Base width of each pulse [s].
    frequency_hz : float
        Clock frequency [Hz].
    n : array_like of int
        Harmonic numbers of the clock frequency.
    per : {"cycle", "edge"}
        One pulse per clock cycle or one per clock edge.
    duty : float
        Clock duty cycle, placing the falling-edge pulse (``per="edge"``).

    Returns
    -------
    numpy.ndarray
        Peak amplitudes [A] at n f0.

    References
    ----------
    Paul (2006), sec. 3.2, trapezoid spectrum with tau = tr.
    """
    return np.abs(triangle_pulse_phasors(peak_a, width_s, frequency_hz, n, per, duty))


def triangle_pulse_phasors(peak_a, width_s, frequency_hz, n, per="cycle", duty=0.5) -> np.ndarray:
    """Complex harmonics of the triangular pulse train of :func:`triangle_pulse_amplitudes`.

    Phase referred to the middle of the first pulse's rise; exact nulls are zeros.
    """
    if per not in ("cycle", "edge"):
        raise ValueError(f"per must be 'cycle' or 'edge', got {per!r}")
    spacing = (min(duty, 1 - duty) if per == "edge" else 1.0) / frequency_hz
    if not 0 < width_s <= spacing * (1 + 1e-12):
        raise WaveformError(
            f"pulse width must be > 0 s and fit between successive pulses ({spacing:.4g} s)"
        )
    half = 0.5 * width_s
    single = harmonic_phasors(Trapezoid(frequency_hz, peak_a, half * frequency_hz, half, half), n)
    if per == "cycle":
        return single
    x = np.asarray(n, dtype=float) * duty
    pair = 1.0 + np.exp(-2j * np.pi * x)
    return np.where(_is_integer(x - 0.5), 0.0, single * pair)


# ---------------------------------------------------------------- edge shapes, envelopes, supply current

#: Shapes an edge may take in the exact series: a linear ramp (the trapezoid), a single-pole RC response, or a
#: Gaussian step (the error function).
EDGE_SHAPES = ("linear", "rc", "gaussian")

#: Thresholds of each edge-time convention.
THRESHOLDS = {"10-90": (0.1, 0.9), "20-80": (0.2, 0.8), "0-100": (0.0, 1.0)}

# Standard normal quantiles Phi^-1(0.9) and Phi^-1(0.8) (scipy.stats.norm.ppf; checked in the tests).
_PROBIT = {0.9: 1.2815515655446004, 0.8: 0.8416212335729143}


def edge_parameter(edge_s: float, convention: str, shape: str) -> float:
    """The time parameter of an edge shape from an edge time measured between the convention's thresholds.

    linear: the 0-100 % ramp time, t / (hi - lo) (0.8 for 10-90 %, 0.6 for 20-80 %);
    rc: the time constant tau of 1 - exp(-t / tau), t / ln((1 - lo) / (1 - hi)) (ln 9 for 10-90 %, ln 4 for 20-80 %);
    gaussian: the sigma of Phi(t / sigma), t / (2 Phi^-1(hi)) (2.563 for 10-90 %, 1.683 for 20-80 %).

    References
    ----------
    Single-pole step response t(10-90) = tau ln 9 = 2.197 tau (any circuit text); Gaussian step response
    t(10-90) = 2.563 sigma (the normal distribution's quantiles).
    """
    lo, hi = THRESHOLDS[convention]
    if shape == "linear":
        return edge_s / (hi - lo)
    if convention == "0-100":
        raise WaveformError(f"an {shape} edge never reaches 0 and 100 %; give its 10-90 or 20-80 time")
    if shape == "rc":
        return edge_s / np.log((1 - lo) / (1 - hi))
    if shape == "gaussian":
        return edge_s / (2 * _PROBIT[hi])
    raise ValueError(f"edge shape must be one of {EDGE_SHAPES}, got {shape!r}")


def edge_response(frequency_hz, shape: str, parameter: float) -> np.ndarray:
    """Spectrum of one edge's derivative, unit area, timed so that the edge crosses 50 % at t = 0.

    linear: sinc(f t) (a centred ramp); rc: exp(j 2 pi f tau ln 2) / (1 + j 2 pi f tau) (an exponential that
    starts tau ln 2 before its 50 % crossing); gaussian: exp(-2 pi^2 f^2 sigma^2).
    """
    f = np.asarray(frequency_hz, dtype=float)
    if shape == "linear":
        return np.sinc(f * parameter).astype(complex)
    if shape == "rc":
        w_tau = 2 * np.pi * f * parameter
        return np.exp(1j * w_tau * np.log(2.0)) / (1 + 1j * w_tau)
    return np.exp(-2 * (np.pi * f * parameter) ** 2).astype(complex)


def edge_bound(frequency_hz, shape: str, parameter: float) -> np.ndarray:
    """A bound of |edge_response| that falls monotonically: min(1, 1 / (pi f t)) for a ramp, |H| for the others."""
    f = np.asarray(frequency_hz, dtype=float)
    if shape == "linear":
        with np.errstate(divide="ignore"):
            return np.minimum(1.0, 1.0 / (np.pi * f * parameter)) if parameter > 0 else np.ones(f.shape)
    return np.abs(edge_response(f, shape, parameter))


def shaped_phasors(wave: Trapezoid, n, shape: str = "linear", rise: float | None = None,
                   fall: float | None = None) -> np.ndarray:
    """Complex one-sided harmonics (peak) of a pulse train whose edges take ``shape``.

    c_n = (A / (j pi n)) (H_r(n f0) - exp(-j 2 pi n D) H_f(n f0)), the ideal pulse train between its 50 %
    crossings times each edge's spectrum (:func:`edge_response`); ``rise`` and ``fall`` are the shape's
    parameters (:func:`edge_parameter`).  The linear shape is :func:`harmonic_phasors` (exact nulls kept).

    References
    ----------
    Paul (2006), sec. 3.2: the spectrum from the waveform's derivative, here with each edge's own transform.
    """
    if shape == "linear":
        return harmonic_phasors(wave, n)
    n = np.asarray(n, dtype=float)
    f = n * wave.frequency_hz
    h_r = edge_response(f, shape, rise)
    h_f = edge_response(f, shape, fall)
    return wave.swing_v / (1j * np.pi * n) * (h_r - np.exp(-2j * np.pi * n * wave.duty) * h_f)


def spectrum_envelope(wave: Trapezoid, frequency_hz, shape: str = "linear", edge: float | None = None) -> np.ndarray:
    """Upper bound of the harmonic peak amplitudes, with no nulls: min(2 A D', (2 A / (pi n)) B(f)).

    D' = min(D, 1 - D) and B the bound of the faster edge's spectrum (:func:`edge_bound`).  For the linear
    ramp this is Paul's envelope: flat to 1/(pi tau), -20 dB/decade to 1/(pi tr), -40 dB/decade after
    (:func:`envelope`).

    References
    ----------
    Paul (2006), sec. 3.2, the bounds on the spectrum of a trapezoidal pulse train.
    """
    if shape == "linear":
        return envelope(wave, frequency_hz)
    f = np.asarray(frequency_hz, dtype=float)
    a = wave.swing_v
    flat = 2 * a * min(wave.duty, 1 - wave.duty)
    return np.minimum(flat, 2 * a * wave.frequency_hz / (np.pi * f) * edge_bound(f, shape, edge))


def supply_current_phasors(wave: Trapezoid, n, resistance_ohm: float | None, capacitance_f: float | None,
                           shape: str = "linear", rise: float | None = None, fall: float | None = None) -> np.ndarray:
    """Current a driver draws from its supply pin per harmonic (peak): the positive part of its load current.

    A driver sources current only while it drives high.  Into a resistor to ground that is the load current
    v / R itself (never negative).  Into a capacitor (alone or behind a series resistor) it is the charging
    current of each rising edge, a pulse of charge Q = C A per period shaped by the edge and the load's
    time constant R C:  c_n = 2 Q f0 H_r(n f0) / (1 + j 2 pi n f0 R C), with H_r the rising edge's spectrum
    (:func:`edge_response`); the discharge of the falling edge flows to ground, not from the supply.  The form takes
    each charging pulse as settled before the falling edge; a load that has not settled draws slightly less
    charge (with R C one ninth of the high time the harmonics move by less than 0.5 %).

    References
    ----------
    Charge per transition Q = C V of a CMOS output (e.g. H. Johnson and M. Graham, *High-Speed Digital Design*,
    1993, ch. 1, power of logic families); the spectrum of a periodic pulse train as in Paul (2006), sec. 3.2.
    """
    if capacitance_f is None:
        return shaped_phasors(wave, n, shape, rise, fall) / resistance_ohm
    n = np.asarray(n, dtype=float)
    f = n * wave.frequency_hz
    charge = capacitance_f * wave.swing_v
    h = edge_response(f, shape, wave.rise_s if shape == "linear" else rise)
    y = 1.0 if not resistance_ohm else 1.0 / (1 + 2j * np.pi * f * resistance_ohm * capacitance_f)
    return 2 * charge * wave.frequency_hz * h * y


def supply_current_bound(wave: Trapezoid, frequency_hz, resistance_ohm: float | None, capacitance_f: float | None,
                         shape: str = "linear", rise: float | None = None, fastest: float | None = None) -> np.ndarray:
    """Upper bound (peak) of :func:`supply_current_phasors` at any frequency, with no nulls.

    ``fastest`` is the faster edge's parameter, which bounds the voltage (and so a resistor's current).
    """
    f = np.asarray(frequency_hz, dtype=float)
    if capacitance_f is None:
        return spectrum_envelope(wave, f, shape, fastest) / resistance_ohm
    y = 1.0 if not resistance_ohm else 1.0 / np.abs(1 + 2j * np.pi * f * resistance_ohm * capacitance_f)
    bound = edge_bound(f, shape, wave.rise_s if shape == "linear" else rise)
    return 2 * capacitance_f * wave.swing_v * wave.frequency_hz * bound * y


def triangle_pulse_envelope(peak_a, width_s, frequency_hz, f, per="cycle") -> np.ndarray:
    """Upper bound (peak) of :func:`triangle_pulse_amplitudes` at any frequency.

    One pulse per cycle: Paul's envelope of a trapezoid with tau = tr = tf = width/2.  One per edge: twice
    that, the largest |1 + exp(-j 2 pi n D)| over any placement of the falling-edge pulse.
    """
    half = 0.5 * width_s
    single = envelope(Trapezoid(frequency_hz, peak_a, half * frequency_hz, half, half), f)
    return single if per == "cycle" else 2 * single
