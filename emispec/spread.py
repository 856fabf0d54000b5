"""Spread-spectrum clocking: the line spectrum of each frequency-modulated harmonic.

A spread clock's instantaneous frequency is f0 (1 + c + (delta/2) s(t)), where
delta is the total (peak-to-peak) deviation as a fraction of f0, c places the
band (down: -delta/2, centre: 0, up: +delta/2) and s(t) in [-1, 1] is the
zero-mean modulation profile of period 1/fm.  Harmonic n carries n times the
deviation, so its phase modulation is phi_n(t) = 2 pi beta_n Phi(fm t) with
beta_n = n (delta f0 / 2) / fm and Phi the integral of s over one period.
Its lines sit at n f0 (1 + c) + k fm with complex amplitudes C_k, the Fourier
series of exp(j phi_n(t)) over one modulation period, computed by FFT.

Profiles
--------
``triangle``
    Linear sweep up over half the period and down over the other half.
``sine``
    s = sin(2 pi fm t); its lines are the Bessel functions J_k(beta).
``skew-cubic`` (emispec's own flattened profile)
    The sweep is warped by g(x) = (x + b x^3) / (1 + b) with b = 0.1, so that
    the frequency moves 30 % faster near the turning points than in the middle
    (less time spent there), and the upward sweep takes r = 90 % of the period,
    the return 10 %.  The unequal sweep rates make the up- and down-sweep
    contributions to each line unequal, so they cannot add up to twice the
    amplitude as they do with the symmetric triangle; the largest line falls by
    about 0.7 to 1.2 dB at equal deviation (tests/test_spread.py).

References
----------
Standard FM theory: exp(j beta sin w t) = sum_k J_k(beta) exp(j k w t)
(Carson; any communications text).  K. B. Hardin, J. T. Fessler, D. R. Bush,
"Spread spectrum clock generation for the reduction of radiated emissions",
IEEE Int. Symp. EMC, 1994 (profiles that dwell less at the turning points).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .schema import Key, TableReader

__all__ = ["MODES", "PROFILES", "Spread", "profile_phase", "harmonic_lines", "occupied_band_hz"]

MODES = ("down", "centre", "up")
PROFILES = ("triangle", "sine", "skew-cubic")

# (fraction of the period spent sweeping up, cubic warp b) of the piecewise profiles
_SHAPES = {"triangle": (0.5, 0.0), "skew-cubic": (0.9, 0.1)}


@dataclass(frozen=True)
class Spread:
    """Spread-spectrum modulation of a clock.

    Parameters
    ----------
    mode : {"down", "centre", "up"}
    deviation : float
        Total (peak-to-peak) frequency deviation as a fraction of f0, e.g. 0.005.
    rate_hz : float
        Modulation rate fm [Hz].
    profile : {"triangle", "sine", "skew-cubic"}
    """

    mode: str
    deviation: float
    rate_hz: float
    profile: str = "triangle"

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"mode must be one of {MODES}")
        if self.profile not in PROFILES:
            raise ValueError(f"profile must be one of {PROFILES}")
        if not (0 < self.deviation <= 0.1 and self.rate_hz > 0):
            raise ValueError("deviation must be in (0, 10 %] and rate > 0 Hz")

    KEYS = (
        Key("mode", "choice", choices=MODES + ("center",)),  # both spellings are in use in the trade
        Key("deviation", "ratio", low=0.0, high=0.1),
        Key("rate", "frequency", low=0.0),
        Key("profile", "choice", default="triangle", choices=PROFILES),
    )

    @classmethod
    def from_table(cls, r: TableReader, frequency_hz: float) -> Spread:
        """Read a ``spread = {...}`` table of a source at ``frequency_hz`` (the rate must stay below f0 / 100)."""
        for key in ("mode", "deviation", "rate"):
            if not r.has(key):
                raise r.error(key, "missing; a spread needs mode, deviation and rate (profile defaults to triangle)")
        mode = {"center": "centre"}.get(r.get("mode"), r.get("mode"))
        return cls(mode=mode, deviation=r.get("deviation"), rate_hz=r.get("rate", high=frequency_hz / 100),
                   profile=r.get("profile"))

    @property
    def centre_factor(self) -> float:
        """Mean frequency over f0: 1 - delta/2 (down), 1 (centre), 1 + delta/2 (up)."""
        return 1.0 + {"down": -0.5, "centre": 0.0, "up": 0.5}[self.mode] * self.deviation

    def beta(self, frequency_hz: float, n) -> np.ndarray:
        """Modulation index of harmonic n: n times the peak deviation over the rate."""
        return np.asarray(n, dtype=float) * (0.5 * self.deviation * frequency_hz) / self.rate_hz


def profile_phase(profile: str, u: np.ndarray) -> np.ndarray:
    """Phi(u): integral over one period (u = fm t in [0, 1)) of the profile s in [-1, 1].

    Closed forms; the phase of harmonic n is 2 pi beta_n Phi(u).
    """
    u = np.asarray(u, dtype=float)
    if profile == "sine":
        return (1.0 - np.cos(2 * np.pi * u)) / (2 * np.pi)
    r, b = _SHAPES[profile]
    rising = u < r
    x = np.where(rising, -1.0 + 2.0 * u / r, 1.0 - 2.0 * (u - r) / (1.0 - r))

    def g_integral(x):  # antiderivative of g(x) = (x + b x^3) / (1 + b), even in x
        return (x**2 / 2 + b * x**4 / 4) / (1 + b)

    # dx/du = 2/r rising, -2/(1-r) falling; both pieces start from Phi = 0 at x = -1 and x = +1
    return np.where(rising, r / 2, -(1.0 - r) / 2) * (g_integral(x) - g_integral(1.0))


def _fft_size(beta: np.ndarray) -> np.ndarray:
    """FFT points for one modulation period: the spectrum spans about +-beta lines,
    with a transition region of order beta^(1/3) lines at the edges (stationary phase)."""
    need = 2.0 * (beta + 8.0 * np.cbrt(beta) + 32.0)
    return (2 ** np.ceil(np.log2(need))).astype(np.int64)


def harmonic_lines(spread: Spread, frequency_hz: float, n: np.ndarray, amplitude: np.ndarray, floor: float = 1e-7):
    """Line spectrum of spread harmonics.

    Parameters
    ----------
    spread : Spread
    frequency_hz : float
        Nominal clock frequency f0 [Hz].
    n : array_like of int
        Harmonic numbers.
    amplitude : array_like of complex
        Each harmonic's unmodulated amplitude (RMS, any unit, complex phase kept).
    floor : float
        Lines weaker than ``floor`` times their harmonic's amplitude are dropped
        (1e-7 is -140 dB: far below any receiver reading that matters).

    Returns
    -------
    line_hz, line_amplitude, owner : numpy.ndarray
        Line frequencies [Hz] (ascending within each harmonic), complex
        amplitudes, and the index into ``n`` of the harmonic each line belongs to.
        The power of each harmonic is preserved: sum |C_k|^2 = 1 (Parseval).
    """
    n = np.asarray(n, dtype=np.int64)
    amplitude = np.asarray(amplitude, dtype=complex)
    beta = spread.beta(frequency_hz, n)
    sizes = _fft_size(beta)
    freqs, amps, owners = [], [], []
    for size in np.unique(sizes):  # one batched FFT per size: a handful of sizes in all
        pick = np.flatnonzero(sizes == size)
        u = np.arange(size) / size
        phase = 2 * np.pi * np.outer(beta[pick], profile_phase(spread.profile, u))
        coeff = np.fft.fftshift(np.fft.fft(np.exp(1j * phase), axis=1), axes=1) / size
        k = np.arange(-size // 2, size // 2)
        keep = np.abs(coeff) >= floor
        rows, cols = np.nonzero(keep)
        centre = n[pick] * frequency_hz * spread.centre_factor
        freqs.append(centre[rows] + k[cols] * spread.rate_hz)
        amps.append(coeff[rows, cols] * amplitude[pick][rows])
        owners.append(pick[rows])
    if not freqs:
        return np.array([]), np.array([], dtype=complex), np.array([], dtype=np.int64)
    return np.concatenate(freqs), np.concatenate(amps), np.concatenate(owners)


def occupied_band_hz(spread: Spread, frequency_hz: float, n) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest instantaneous frequency of harmonic n [Hz]."""
    n = np.asarray(n, dtype=float)
    centre = n * frequency_hz * spread.centre_factor
    half = n * frequency_hz * spread.deviation / 2
    return centre - half, centre + half
