"""Trapezoid and triangle spectra against numpy's FFT of the sampled waveform."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from emispec.waveform import (
    Trapezoid,
    WaveformError,
    corner_frequencies,
    envelope,
    full_edge_time,
    harmonic_amplitudes,
    load_current,
    rms,
    triangle_pulse_amplitudes,
)


def sampled_trapezoid(wave: Trapezoid, samples: int = 2**18) -> np.ndarray:
    """One period of the waveform sampled on a fine grid, built from its corners.

    The rise is centred on t = 0 and the fall on t = tau (50 % crossings), as
    in the model; np.interp draws the straight segments between the corners.
    """
    t_period = wave.period_s
    tr, tf, tau, a = wave.rise_s, wave.fall_s, wave.width_s, wave.swing_v
    corners_t = [-tr / 2, tr / 2, tau - tf / 2, tau + tf / 2, t_period - tr / 2]
    corners_v = [0.0, a, a, 0.0, 0.0]
    t = np.arange(samples) * t_period / samples - tr / 2
    return np.interp(t, corners_t, corners_v)


def fft_amplitudes(samples: np.ndarray, n_max: int) -> np.ndarray:
    """One-sided peak amplitudes of harmonics 1..n_max from numpy's FFT."""
    spectrum = np.fft.rfft(samples) / len(samples)
    return 2 * np.abs(spectrum[1 : n_max + 1])


@pytest.mark.parametrize(
    "duty, rise, fall",
    [(0.5, 5e-9, 5e-9), (0.5, 2e-9, 6e-9), (0.3, 3e-9, 1e-9), (0.72, 10e-9, 4e-9), (0.1, 1e-9, 1e-9)],
)
def test_harmonics_equal_fft_of_sampled_waveform(duty, rise, fall):
    # Source: independent reference, numpy.fft of the finely sampled trapezoid
    wave = Trapezoid(10e6, 5.0, duty, rise, fall)
    n = np.arange(1, 61)
    reference = fft_amplitudes(sampled_trapezoid(wave), 60)
    assert np.max(np.abs(harmonic_amplitudes(wave, n) - reference)) < 1e-8 * wave.swing_v


@settings(max_examples=40, deadline=None)
@given(
    duty=st.floats(0.05, 0.95),
    rise_fraction=st.floats(0.001, 0.2),
    fall_fraction=st.floats(0.001, 0.2),
)
def test_harmonics_equal_fft_for_random_trapezoids(duty, rise_fraction, fall_fraction):
    # Source: independent reference, numpy.fft of the finely sampled trapezoid
    room = 2 * min(duty, 1 - duty)
    rise, fall = rise_fraction * room * 100e-9, fall_fraction * room * 100e-9
    wave = Trapezoid(10e6, 1.0, duty, rise, fall)
    reference = fft_amplitudes(sampled_trapezoid(wave, 2**16), 30)
    assert np.max(np.abs(harmonic_amplitudes(wave, np.arange(1, 31)) - reference)) < 1e-6


def test_ideal_square_wave_is_2a_over_n_pi():
    # Source: Fourier series of the square wave, c_n = 2A/(n pi) for odd n (Paul 2006, sec. 3.2)
    wave = Trapezoid(1e6, 1.0, 0.5, 0.0, 0.0)
    n = np.arange(1, 20)
    expected = np.where(n % 2 == 1, 2 / (n * np.pi), 0.0)
    np.testing.assert_allclose(harmonic_amplitudes(wave, n), expected, atol=1e-15)
    assert harmonic_amplitudes(wave, [1])[0] == pytest.approx(0.637, abs=5e-4)
    assert harmonic_amplitudes(wave, [3])[0] == pytest.approx(0.212, abs=5e-4)


def test_equal_edges_reduce_to_the_textbook_sinc_sinc_form():
    # Source: Paul 2006, sec. 3.2: c_n = 2 A (tau/T) |sinc(n tau/T)| |sinc(n tr/T)|
    wave = Trapezoid(10e6, 5.0, 0.5, 5e-9, 5e-9)
    n = np.arange(1, 40)
    textbook = 2 * 5.0 * 0.5 * np.abs(np.sinc(n * 0.5)) * np.abs(np.sinc(n * 0.05))
    np.testing.assert_allclose(harmonic_amplitudes(wave, n), textbook, rtol=1e-12, atol=1e-15)


def test_sinc_nulls_are_exact_zeros():
    # Source: Paul 2006, sec. 3.2: nulls at n tau/T and n tr/T integer
    even = harmonic_amplitudes(Trapezoid(10e6, 5.0, 0.5, 5e-9, 5e-9), np.arange(2, 40, 2))
    assert np.all(even == 0.0)
    edge_null = harmonic_amplitudes(Trapezoid(10e6, 5.0, 0.5, 20e-9, 20e-9), [5, 10])
    assert np.all(edge_null == 0.0)  # 5 * 20 ns / 100 ns = 1
    # unequal edges at 50 % duty: even harmonics appear
    assert harmonic_amplitudes(Trapezoid(10e6, 5.0, 0.5, 2e-9, 6e-9), [2])[0] > 0


def test_rms_is_peak_over_root_two():
    # Source: RMS of a sinusoid; CISPR 16-1-1 calibrates detectors with a CW sine's RMS
    assert 20 * np.log10(rms(1.0)) == pytest.approx(-3.0103, abs=1e-4)


@pytest.mark.parametrize("convention, fraction", [("10-90", 0.8), ("20-80", 0.6), ("0-100", 1.0)])
def test_edge_time_conventions_for_a_linear_ramp(convention, fraction):
    # Source: geometry of a linear ramp: t(10-90) = 0.8 t(0-100), t(20-80) = 0.6 t(0-100)
    assert full_edge_time(1e-9, convention) == pytest.approx(1e-9 / fraction)


def test_envelope_corners():
    # Source: Paul 2006, sec. 3.2: f1 = 1/(pi tau), f2 = 1/(pi tr)
    wave = Trapezoid(10e6, 5.0, 0.5, 5e-9, 5e-9)
    f1, f2 = corner_frequencies(wave)
    assert f1 == pytest.approx(1 / (np.pi * 50e-9))
    assert f2 == pytest.approx(1 / (np.pi * 5e-9))
    # slopes: 0 below f1, -20 dB/decade between, -40 dB/decade above f2
    level = 20 * np.log10(envelope(wave, np.array([f1 / 100, f1 / 10, 1.2 * f1, 8 * f1, 2 * f2, 20 * f2])))
    assert level[0] == pytest.approx(level[1])
    assert level[2] - level[3] == pytest.approx(20 * np.log10(8 / 1.2))
    assert level[4] - level[5] == pytest.approx(40.0)
    assert level[0] == pytest.approx(20 * np.log10(2 * 5.0 * 0.5))  # 2 A tau / T


def test_envelope_bounds_every_harmonic():
    # Source: Paul 2006, sec. 3.2 (the envelope is an upper bound)
    wave = Trapezoid(33e6, 3.3, 0.37, 1.1e-9, 2.3e-9)
    n = np.arange(1, 400)
    assert np.all(harmonic_amplitudes(wave, n) <= envelope(wave, n * 33e6) * (1 + 1e-12))


def test_faster_edge_sets_the_second_corner():
    # Source: Paul 2006, sec. 3.2 (bound with the faster edge)
    assert corner_frequencies(Trapezoid(10e6, 1, 0.5, 2e-9, 6e-9))[1] == pytest.approx(1 / (np.pi * 2e-9))


@pytest.mark.parametrize(
    "kwargs",
    [dict(duty=0.0), dict(duty=1.0), dict(rise_s=60e-9, fall_s=60e-9), dict(duty=0.2, rise_s=25e-9, fall_s=20e-9),
     dict(frequency_hz=0.0), dict(rise_s=-1e-9)],
)
def test_invalid_trapezoids_are_refused(kwargs):
    base = dict(frequency_hz=10e6, swing_v=1.0, duty=0.5, rise_s=1e-9, fall_s=1e-9)
    with pytest.raises(WaveformError):
        Trapezoid(**{**base, **kwargs})


def test_edges_exactly_filling_the_high_time_are_allowed():
    # a triangle wave: (tr + tf) / 2 equals the high time
    Trapezoid(10e6, 1.0, 0.5, 50e-9, 50e-9)


def test_load_currents_match_scipy_frequency_response():
    # Source: independent reference, scipy.signal.freqs of the load admittance
    f = np.geomspace(1e6, 1e9, 50)
    w = 2 * np.pi * f
    v = np.ones_like(f)
    r, c = 33.0, 10e-12
    _, series = signal.freqs([c, 0.0], [r * c, 1.0], worN=w)  # Y = sC / (1 + sRC)
    np.testing.assert_allclose(load_current(v, f, r, c), np.abs(series), rtol=1e-10)
    _, cap = signal.freqs([c, 0.0], [1.0], worN=w)  # Y = sC
    np.testing.assert_allclose(load_current(v, f, capacitance_f=c), np.abs(cap), rtol=1e-10)
    np.testing.assert_allclose(load_current(v, f, resistance_ohm=50.0), v / 50.0)
    with pytest.raises(ValueError):
        load_current(v, f)


def sampled_pulses(peak, width, f0, duty, per, samples=2**18):
    t = np.arange(samples) / samples / f0
    centres = [width / 2] + ([duty / f0 + width / 2] if per == "edge" else [])
    wave = np.zeros(samples)
    for c in centres:
        wave += np.interp(t, [c - width / 2, c, c + width / 2], [0.0, peak, 0.0], left=0.0, right=0.0)
    return wave


@pytest.mark.parametrize("per, duty", [("cycle", 0.5), ("edge", 0.5), ("edge", 0.4)])
def test_triangle_pulses_equal_fft(per, duty):
    # Source: independent reference, numpy.fft of the sampled pulse train
    f0, peak, width = 50e6, 1.5, 0.8e-9
    n = np.arange(1, 81)
    reference = fft_amplitudes(sampled_pulses(peak, width, f0, duty, per), 80)
    ours = triangle_pulse_amplitudes(peak, width, f0, n, per=per, duty=duty)
    assert np.max(np.abs(ours - reference)) < 1e-8


def test_triangle_pulses_per_edge_at_half_duty_have_only_even_harmonics():
    # Source: two equal pulses half a period apart repeat at 2 f0
    odd = triangle_pulse_amplitudes(1.0, 1e-9, 50e6, np.arange(1, 40, 2), per="edge")
    assert np.all(odd == 0.0)


def test_triangle_pulse_dc_limit():
    # Source: the mean of a triangle train is Ip w / (2T); low harmonics tend to twice that
    c1 = triangle_pulse_amplitudes(2.0, 1e-9, 1e6, [1])[0]
    assert c1 == pytest.approx(2 * 2.0 * 1e-9 / 2 * 1e6, rel=1e-6)


def test_triangle_pulse_too_wide_is_refused():
    with pytest.raises(WaveformError):
        triangle_pulse_amplitudes(1.0, 30e-9, 50e6, [1])
    with pytest.raises(WaveformError):
        triangle_pulse_amplitudes(1.0, 12e-9, 50e6, [1], per="edge")


def test_many_harmonics_through_the_periodic_sine_table():
    # Source: independent reference, numpy.fft of the finely sampled trapezoid (2^20 samples); with 4096 harmonics
    # and rational duty and edges the kernel takes its periodic-table path
    wave = Trapezoid(10e6, 5.0, 0.45, 2e-9, 3e-9)
    n = np.arange(1, 4097)
    reference = fft_amplitudes(sampled_trapezoid(wave, 2**20), 4096)
    assert np.max(np.abs(harmonic_amplitudes(wave, n) - reference)) < 1e-8 * wave.swing_v
    # the same harmonics with an irrational duty take the direct path and still match
    odd = Trapezoid(10e6, 5.0, 1 / np.pi, 2e-9, 3e-9)
    reference = fft_amplitudes(sampled_trapezoid(odd, 2**20), 4096)
    assert np.max(np.abs(harmonic_amplitudes(odd, n) - reference)) < 1e-8 * odd.swing_v


# ---------------------------------------------------------------- edge shapes, envelopes, supply current


def sampled_shaped(wave: Trapezoid, shape: str, rise: float, fall: float, samples: int = 2**16) -> np.ndarray:
    """One period built in the time domain from step responses: a rise crossing 50 % at t = 0, a fall at D T.

    RC: 1 - exp(-(t - t0) / tau) from t0 = -tau ln 2; Gaussian: Phi(t / sigma) (scipy.special.ndtr).  Steps of
    the neighbouring periods are added too, so unsettled tails are included.
    """
    from scipy.special import ndtr

    t = np.arange(samples) * wave.period_s / samples

    def step(x, p):
        if shape == "rc":
            start = -p * np.log(2.0)
            return np.where(x >= start, 1 - np.exp(-np.clip(x - start, 0, None) / p), 0.0)
        return ndtr(x / p)

    v = np.zeros(samples)
    for k in range(-3, 4):
        shift = k * wave.period_s
        v += step(t - shift, rise) - step(t - shift - wave.width_s, fall)
    return wave.swing_v * v


@pytest.mark.parametrize("shape, duty, t_rise, t_fall", [("rc", 0.5, 1e-9, 1e-9), ("rc", 0.4, 0.8e-9, 2e-9),
                                                         ("gaussian", 0.5, 1e-9, 1e-9), ("gaussian", 0.3, 2e-9, 1e-9)])
def test_shaped_edges_equal_fft_of_the_time_domain_waveform(shape, duty, t_rise, t_fall):
    # Source: independent reference, numpy.fft of the waveform built from RC / Gaussian step responses
    from emispec.waveform import edge_parameter, shaped_phasors

    rise, fall = edge_parameter(t_rise, "10-90", shape), edge_parameter(t_fall, "10-90", shape)
    wave = Trapezoid(10e6, 3.3, duty, t_rise / 0.8, t_fall / 0.8)
    n = np.arange(1, 61)
    ours = np.abs(shaped_phasors(wave, n, shape, rise, fall))
    reference = fft_amplitudes(sampled_shaped(wave, shape, rise, fall), 60)
    assert np.max(np.abs(ours - reference)) < 1e-6 * wave.swing_v


def test_edge_parameters_from_10_90_and_20_80_times():
    # Source: single-pole step 1 - exp(-t/tau): t(10-90) = tau ln 9, t(20-80) = tau ln 4; Gaussian step Phi(t/sigma):
    # t(p1-p2) = sigma (Phi^-1(p2) - Phi^-1(p1)), Phi^-1 from scipy.stats.norm.ppf (2.563 sigma for 10-90 %)
    from scipy.stats import norm

    from emispec.waveform import edge_parameter

    assert edge_parameter(2.197e-9, "10-90", "rc") == pytest.approx(2.197e-9 / np.log(9))
    assert edge_parameter(1e-9, "20-80", "rc") == pytest.approx(1e-9 / np.log(4))
    assert edge_parameter(1e-9, "10-90", "gaussian") == pytest.approx(1e-9 / (2 * norm.ppf(0.9)), rel=1e-12)
    assert edge_parameter(1e-9, "20-80", "gaussian") == pytest.approx(1e-9 / (2 * norm.ppf(0.8)), rel=1e-12)
    assert 2 * norm.ppf(0.9) == pytest.approx(2.563, abs=5e-4)
    assert edge_parameter(1e-9, "10-90", "linear") == pytest.approx(1.25e-9)
    with pytest.raises(WaveformError, match="never reaches"):
        edge_parameter(1e-9, "0-100", "rc")


@pytest.mark.parametrize("shape", ["linear", "rc", "gaussian"])
def test_the_envelope_bounds_every_harmonic_and_has_no_nulls(shape):
    # Source: Paul 2006 sec. 3.2: |c_n| <= 2 A min(D', 1/(pi n)) min(1, bound of the faster edge's spectrum)
    from emispec.waveform import edge_parameter, shaped_phasors, spectrum_envelope

    for duty, t_r, t_f in ((0.5, 1e-9, 1e-9), (0.35, 0.7e-9, 1.6e-9)):
        rise, fall = (edge_parameter(t, "10-90", shape) for t in (t_r, t_f))
        wave = Trapezoid(24e6, 3.3, duty, t_r / 0.8, t_f / 0.8)
        n = np.arange(1, 400)
        bound = spectrum_envelope(wave, n * 24e6, shape, min(rise, fall))
        assert np.all(np.abs(shaped_phasors(wave, n, shape, rise, fall)) <= bound * (1 + 1e-9))
        assert np.all(bound > 0)


def test_paul_envelope_figures():
    # Source: Paul 2006 sec. 3.2 envelope, A = 5 V, T = 100 ns, tau = 50 ns, tr = 5 ns: flat 2 A tau/T = 5 V to
    # 1/(pi tau) = 6.366 MHz, then 2A/(pi T f), then x 1/(pi tr f) above 63.66 MHz; evaluated by hand (peak dBuV):
    # 10 MHz 130.06, 100 MHz 106.13, 1 GHz 66.13
    wave = Trapezoid(10e6, 5.0, 0.5, 5e-9, 5e-9)
    level = 20 * np.log10(envelope(wave, [10e6, 100e6, 1e9]) / 1e-6)
    np.testing.assert_allclose(level, [130.06, 106.13, 66.13], atol=0.01)


def sampled_supply_current(wave: Trapezoid, resistance, capacitance, periods: int = 40, per_period: int = 2**14):
    """The positive part of the load current, from the load's ODE integrated in time (scipy.integrate.solve_ivp)."""
    from scipy.integrate import solve_ivp

    t_end = periods * wave.period_s
    tr, tf, tau, a, t_period = wave.rise_s, wave.fall_s, wave.width_s, wave.swing_v, wave.period_s
    corners_t = np.array([-tr / 2, tr / 2, tau - tf / 2, tau + tf / 2, t_period - tr / 2])

    def v(t):
        return np.interp(np.mod(t + tr / 2, t_period) - tr / 2, corners_t, [0.0, a, a, 0.0, 0.0])

    def dvc(t, vc):
        return (v(t) - vc) / (resistance * capacitance)

    t = (periods - 1) * t_period + np.arange(per_period) * t_period / per_period
    sol = solve_ivp(dvc, (0, t_end), [0.0], t_eval=t, max_step=tr / 20, rtol=1e-10, atol=1e-13,
                    first_step=tr / 100)
    assert sol.success
    current = (v(t) - sol.y[0]) / resistance
    return np.maximum(current, 0.0)


@pytest.mark.parametrize("resistance, capacitance", [(33.0, 10e-12), (100.0, 22e-12)])
def test_supply_current_of_a_capacitive_load_is_the_positive_part(resistance, capacitance):
    # Source: independent time-domain reference: the R-C load's ODE integrated by scipy (solve_ivp) under the
    # trapezoid, the positive part taken, and numpy's FFT of it
    from emispec.waveform import supply_current_phasors

    wave = Trapezoid(24e6, 3.3, 0.5, 1.5e-9 / 0.8, 1.5e-9 / 0.8)
    n = np.arange(1, 21)
    reference = fft_amplitudes(sampled_supply_current(wave, resistance, capacitance), 20)
    ours = np.abs(supply_current_phasors(wave, n, resistance, capacitance))
    # within 0.5 % (0.04 dB): the closed form takes the charging current as settled before the falling edge
    np.testing.assert_allclose(ours, reference, rtol=5e-3)
    # odd harmonics 6 dB below the load current of a 50 % clock, even ones present (the load current has none)
    load = load_current(harmonic_amplitudes(wave, n), n * 24e6, resistance, capacitance)
    np.testing.assert_allclose(ours[::2], load[::2] / 2, rtol=0.02)
    assert np.all(ours[1::2] > 0.5 * ours[::2]) and np.all(load[1::2] < 1e-9 * load[0])


def test_supply_current_of_a_resistor_is_the_load_current_and_the_bound_holds():
    # Source: a resistor to ground draws v / R from the supply only while the output is high (never negative)
    from emispec.waveform import supply_current_bound, supply_current_phasors

    wave = Trapezoid(25e6, 2.5, 0.45, 2e-9, 3e-9)
    n = np.arange(1, 200)
    np.testing.assert_allclose(np.abs(supply_current_phasors(wave, n, 50.0, None)),
                               harmonic_amplitudes(wave, n) / 50.0, rtol=1e-12)
    for r, c in ((50.0, None), (None, 10e-12), (33.0, 10e-12)):
        exact = np.abs(supply_current_phasors(wave, n, r, c))
        bound = supply_current_bound(wave, n * 25e6, r, c, fastest=min(wave.rise_s, wave.fall_s))
        assert np.all(exact <= bound * (1 + 1e-9)) and np.all(bound > 0)


NGSPICE = __import__("shutil").which("ngspice")


@pytest.mark.skipif(NGSPICE is None, reason="ngspice not found (Debian package ngspice)")
def test_supply_current_matches_ngspice_switch_model(tmp_path):
    # Source: ngspice transient of a CMOS-like output, complementary switches (R_on = 50 ohm) from a 3.3 V supply
    # into 10 pF: its edges are RC with tau = R_on C, and the supply current flows only while the high side
    # conducts.  numpy's FFT of ngspice's supply current (4 periods, uniform samples) against emispec's rail
    # current of an RC-edged clock into 10 pF, 30 harmonics.
    import subprocess

    from emispec.waveform import edge_parameter, supply_current_phasors

    netlist = tmp_path / "driver.cir"
    out = tmp_path / "supply.txt"
    netlist.write_text(f"""* CMOS-like output
Vdd vdd 0 DC 3.3
Vctl ctl 0 PULSE(0 1 0 1p 1p 20n 40n)
S1 vdd out ctl 0 swon
S2 out 0 0 ctl swneg
.model swon sw vt=0.5 vh=0 ron=50 roff=1e12
.model swneg sw vt=-0.5 vh=0 ron=50 roff=1e12
C1 out 0 10p
.options reltol=1e-7 abstol=1e-16 chgtol=1e-18
.control
set wr_singlescale
tran 2p 240n 0 2p
linearize
wrdata {out} -i(vdd)
quit
.endc
.end
""", encoding="utf-8")
    done = subprocess.run([NGSPICE, "-b", str(netlist)], capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    data = np.loadtxt(out)
    per_period = int(round(40e-9 / (data[1, 0] - data[0, 0])))
    current = data[-4 * per_period - 1:-1, 1]
    n = np.arange(1, 31)
    reference = 2 * np.abs(np.fft.rfft(current))[4 * n] / current.size
    tau = 50 * 10e-12
    t1090 = tau * np.log(9)
    wave = Trapezoid(25e6, 3.3, 0.5, t1090 / 0.8, t1090 / 0.8)
    ours = np.abs(supply_current_phasors(wave, n, None, 10e-12, "rc", edge_parameter(t1090, "10-90", "rc")))
    assert np.max(np.abs(20 * np.log10(ours / reference))) < 0.05
