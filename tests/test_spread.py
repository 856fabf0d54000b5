"""Spread-spectrum line spectra against FM theory (scipy's Bessel functions) and Parseval."""

import numpy as np
import pytest
from scipy.special import jv

from emispec.spread import PROFILES, Spread, harmonic_lines, occupied_band_hz, profile_phase


@pytest.mark.parametrize("n", [1, 2, 7, 40])
def test_sine_profile_lines_are_bessel_functions(n):
    # Source: standard FM theory, exp(j beta sin wt) = sum J_k(beta) exp(j k wt); checked with scipy.special.jv
    spread = Spread("centre", 0.005, 30e3, "sine")
    f, a, _ = harmonic_lines(spread, 100e6, [n], [1.0])
    beta = n * (0.005 * 100e6 / 2) / 30e3
    k = np.rint((f - n * 100e6) / 30e3).astype(int)
    np.testing.assert_allclose(np.abs(a), np.abs(jv(k, beta)), atol=1e-12)


def test_bessel_check_values():
    # Source: scipy.special.jv at beta = 1, 2 (standard FM tables)
    for beta, expected in [(1.0, [0.76520, 0.44005, 0.11490]), (2.0, [0.22389, 0.57672, 0.35283])]:
        spread = Spread("centre", 2 * beta * 30e3 / 100e6, 30e3, "sine")
        f, a, _ = harmonic_lines(spread, 100e6, [1], [1.0])
        k = np.rint((f - 100e6) / 30e3).astype(int)
        for order, value in enumerate(expected):
            assert np.abs(a[k == order][0]) == pytest.approx(value, abs=5e-6)


@pytest.mark.parametrize("profile", PROFILES)
@pytest.mark.parametrize("mode", ["down", "centre", "up"])
def test_parseval_total_power_is_unchanged(profile, mode):
    # Source: Parseval's theorem: frequency modulation only redistributes the carrier's power
    spread = Spread(mode, 0.006, 33e3, profile)
    n = np.array([1, 3, 10, 60])
    amplitude = np.array([2.0, 0.5j, 0.1, 1e-3])
    _, a, owner = harmonic_lines(spread, 66.6e6, n, amplitude)
    power = np.bincount(owner, weights=np.abs(a) ** 2)
    np.testing.assert_allclose(power, np.abs(amplitude) ** 2, rtol=1e-9)


def test_largest_line_of_triangle_and_sine_at_250_khz_peak_deviation():
    # Source: FM theory; sine: max |J_k(8.333)| = 0.3347 (scipy.special.jv); triangle: FFT of the
    # phase-modulated carrier computed independently here from scipy.signal.sawtooth
    from scipy import integrate, signal

    sine = Spread("centre", 0.005, 30e3, "sine")
    _, a, _ = harmonic_lines(sine, 100e6, [1], [1.0])
    assert np.abs(a).max() == pytest.approx(np.abs(jv(np.arange(-20, 21), 250e3 / 30e3)).max(), abs=1e-9)
    tri = Spread("centre", 0.005, 30e3, "triangle")
    _, a, _ = harmonic_lines(tri, 100e6, [1], [1.0])
    m = 1 << 16
    t = np.arange(m) / m / 30e3
    freq = 250e3 * signal.sawtooth(2 * np.pi * 30e3 * t + np.pi, width=0.5)
    phase = 2 * np.pi * integrate.cumulative_trapezoid(freq, t, initial=0)
    reference = np.abs(np.fft.fft(np.exp(1j * phase)) / m).max()
    assert np.abs(a).max() == pytest.approx(reference, rel=1e-3)
    assert 20 * np.log10(np.abs(a).max()) == pytest.approx(-9.12, abs=0.02)


@pytest.mark.parametrize("beta", [8.33, 20, 50, 200, 1000])
def test_skew_cubic_profile_lowers_the_largest_line(beta):
    # The profile of our own design must beat the triangle at equal deviation (its reason to exist)
    def largest(profile):
        spread = Spread("centre", 2 * beta * 30e3 / 1e9, 30e3, profile)
        _, a, _ = harmonic_lines(spread, 1e9, [1], [1.0])
        return 20 * np.log10(np.abs(a).max())

    assert largest("skew-cubic") < largest("triangle") - 0.5


def test_profiles_are_zero_mean_and_span_plus_minus_one():
    # Phi is the integral of s: zero mean means Phi(0) = Phi(1); the slope of Phi is s, within [-1, 1]
    u = np.linspace(0, 1, 200001)
    for profile in PROFILES:
        phi = profile_phase(profile, u)
        slope = np.gradient(phi, u)
        assert phi[0] == pytest.approx(phi[-1], abs=1e-12)
        assert slope.min() == pytest.approx(-1.0, abs=2e-3) and slope.max() == pytest.approx(1.0, abs=2e-3)


@pytest.mark.parametrize("mode, lo, hi", [("down", 99.5e6, 100e6), ("centre", 99.75e6, 100.25e6),
                                          ("up", 100e6, 100.5e6)])
def test_modes_place_the_band(mode, lo, hi):
    # Source: spread types down / centre / up (SSC clock-generator literature); 0.5 % total deviation
    spread = Spread(mode, 0.005, 30e3)
    band = occupied_band_hz(spread, 100e6, [1])
    assert band[0][0] == pytest.approx(lo) and band[1][0] == pytest.approx(hi)
    f, a, _ = harmonic_lines(spread, 100e6, [1], [1.0])
    strong = f[np.abs(a) > 0.01]
    assert strong.min() > lo - 5 * 30e3 and strong.max() < hi + 5 * 30e3
    assert np.allclose(np.diff(np.sort(f)), 30e3)


@pytest.mark.parametrize("kwargs", [dict(mode="sideways"), dict(profile="square"), dict(deviation=0.2),
                                    dict(deviation=0.0), dict(rate_hz=0.0)])
def test_invalid_spreads(kwargs):
    base = dict(mode="down", deviation=0.005, rate_hz=30e3, profile="triangle")
    with pytest.raises(ValueError):
        Spread(**{**base, **kwargs})
