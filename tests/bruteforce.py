"""Brute-force receiver for a spread clock harmonic, in the time domain.

Written independently of emispec's frequency-domain receiver: the modulated
harmonic is synthesised from its instantaneous frequency (scipy's triangle
wave, numerically integrated), shifted to the tuning frequency, filtered by
convolution with the Gaussian impulse response of the resolution filter, and
its envelope read directly: peak = maximum, average = mean over whole
modulation periods.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, signal


def spread_harmonic_envelope(n, f0, deviation, rate_hz, centre_factor, tuning_hz, rbw_hz, periods=6,
                             samples_per_hz=8.0):
    """Envelope |y(t)| of harmonic n of a triangle-spread clock (amplitude 1 RMS) at one tuning frequency.

    Returns the envelope over whole modulation periods (filter transients cut off) and the time step.
    """
    band = n * f0 * deviation
    offset = abs(n * f0 * centre_factor - tuning_hz) + band / 2
    fs = samples_per_hz * (offset + 2 * rbw_hz)
    dt = 1.0 / fs
    sigma_f = rbw_hz / (2 * np.sqrt(2 * np.log(2)))  # |H| = exp(-f^2 / (2 sigma^2)), -6 dB at rbw/2
    sigma_t = 1.0 / (2 * np.pi * sigma_f)
    guard = 6 * sigma_t
    per_period = int(np.ceil(1.0 / (rate_hz * dt)))
    dt = 1.0 / (rate_hz * per_period)
    guard_n = int(np.ceil(guard / dt))
    t = np.arange(-guard_n, periods * per_period + guard_n) * dt
    # triangle from -1 to +1 with its minimum at t = 0 (same start as a rising sweep)
    tri = signal.sawtooth(2 * np.pi * rate_hz * t + np.pi, width=0.5)
    f_inst = n * f0 * (centre_factor + 0.5 * deviation * tri) - tuning_hz
    phase = 2 * np.pi * integrate.cumulative_trapezoid(f_inst, t, initial=0.0)
    x = np.exp(1j * phase)
    k = np.arange(-guard_n, guard_n + 1) * dt
    kernel = np.exp(-(k**2) / (2 * sigma_t**2))
    kernel /= kernel.sum()  # unity gain at the tuning frequency: a CW reads its RMS
    y = signal.fftconvolve(x, kernel, mode="same")
    return np.abs(y[guard_n: guard_n + periods * per_period]), dt


def peak_and_average(*args, **kwargs):
    env, _ = spread_harmonic_envelope(*args, **kwargs)
    return env.max(), env.mean()
