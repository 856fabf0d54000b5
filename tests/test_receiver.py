"""The receiver against CISPR 16-1-1 and against an independent time-domain simulation."""

import numpy as np
import pytest

from bruteforce import peak_and_average
from emispec.receiver import BANDS, band_names, detect, detect_steps, filter_response, resolution_bandwidth_hz, sweep
from emispec.spread import Spread, harmonic_lines

BAND = {b.name: b for b in BANDS}


@pytest.mark.parametrize(
    "f_hz, band, rbw",
    [(10e3, "A", 200.0), (150e3, "A", 200.0), (151e3, "B", 9e3), (30e6, "B", 9e3), (100e6, "C/D", 120e3),
     (999e6, "C/D", 120e3), (2.4e9, "E", 1e6)],
)
def test_cispr_bands_and_bandwidths(f_hz, band, rbw):
    # Source: CISPR 16-1-1 band definitions and 6 dB bandwidths (200 Hz, 9 kHz, 120 kHz, 1 MHz);
    # 47 CFR 15.35(b) for 1 MHz above 1 GHz
    assert band_names([f_hz])[0] == band
    assert resolution_bandwidth_hz([f_hz])[0] == rbw


def test_quasi_peak_time_constants():
    # Source: CISPR 16-1-1 QP detector: charge/discharge/meter 45/500/160 ms (A), 1/160/160 ms (B), 1/550/100 ms (C/D)
    consts = {b.name: (b.qp_charge_s, b.qp_discharge_s, b.meter_s) for b in BANDS}
    assert consts["A"] == pytest.approx((45e-3, 500e-3, 160e-3))
    assert consts["B"] == pytest.approx((1e-3, 160e-3, 160e-3))
    assert consts["C/D"] == pytest.approx((1e-3, 550e-3, 100e-3))


def test_filter_is_6_db_down_at_half_the_bandwidth():
    # Source: CISPR 16-1-1 specifies the bandwidth at the 6 dB points
    assert 20 * np.log10(filter_response(60e3, 120e3)) == pytest.approx(-6.0206, abs=1e-4)
    assert filter_response(0.0, 120e3) == 1.0


@pytest.mark.parametrize("f_hz", [1e6, 100e6, 3e9])
def test_cw_reads_its_rms_on_every_detector(f_hz):
    # Source: CISPR 16-1-1: every detector is calibrated to read the RMS value of an unmodulated sine
    dets = ("PK", "QP", "AV", "RMS-AV")
    readings = sweep([f_hz], [2e-3], 1e3, [f_hz], dets)
    assert readings["PK"][0] == pytest.approx(2e-3, rel=1e-12)
    assert readings["AV"][0] == pytest.approx(2e-3, rel=1e-12)
    if f_hz < 1e9:
        assert readings["QP"][0] == pytest.approx(2e-3, rel=1e-12)
    else:
        assert np.isnan(readings["QP"][0])  # CISPR 16-1-1 defines no QP above 1 GHz
    # the detector code itself, stepped in time or solved in closed form
    flat = np.full((1, 64), 2e-3)
    for band in (BAND["B"], BAND["C/D"]):
        for result in (detect(flat, 1e-4, band, ("QP", "AV")), detect_steps(flat, np.full(64, 0.1 / 64), band,
                                                                             ("QP", "AV"))):
            assert result["QP"][0] == pytest.approx(2e-3, rel=1e-9)
            assert result["AV"][0] == pytest.approx(2e-3, rel=1e-9)


def test_a_line_outside_the_filter_reads_nothing():
    readings = sweep([100e6], [1.0], 1e3, [100e6 + 3 * 120e3, 100e6 - 1e6], ("PK", "QP", "AV"))
    for det in readings:
        assert np.all(readings[det] == 0.0)


def test_two_lines_in_the_filter_beat():
    # Source: two equal tones in the passband: envelope |1 + exp(j w t)|, peak 2a, mean 4a/pi (elementary)
    a = 1e-3
    r = sweep([100e6 - 20e3, 100e6 + 20e3], [a, a], 40e3, [100e6], ("PK", "AV"))
    h = filter_response(20e3, 120e3)
    assert r["PK"][0] == pytest.approx(2 * a * h, rel=1e-6)
    assert r["AV"][0] == pytest.approx(4 / np.pi * a * h, rel=1e-3)


# ------------------------------------------------------------ quasi-peak pulse response


def impulse_train_envelope(area_vs, prf_hz, band):
    """RMS-calibrated IF envelope of one period of an impulse train, with unequal time steps.

    An impulse of area alpha has a flat spectrum; its lines at k PRF carry RMS sqrt(2) alpha PRF each, so behind a
    Gaussian filter of standard deviation s the envelope is sqrt(2) alpha s sqrt(2 pi) exp(-2 pi^2 s^2 t^2).
    """
    sigma = band.rbw_hz / (2 * np.sqrt(2 * np.log(2)))
    width = 1.2 / sigma
    burst_edges = np.linspace(-width, width, 801)
    period = 1.0 / prf_hz
    quiet_edges = width + np.geomspace(width / 400, period - 2 * width, 400)
    edges = np.concatenate([burst_edges, quiet_edges])
    steps = np.diff(edges)
    mid = 0.5 * (edges[1:] + edges[:-1])
    env = np.sqrt(2) * area_vs * sigma * np.sqrt(2 * np.pi) * np.exp(-2 * np.pi**2 * sigma**2 * mid**2)
    return env[None, :], steps


def qp_of_pulses(area_vs, prf_hz, band):
    env, steps = impulse_train_envelope(area_vs, prf_hz, band)
    return detect_steps(env, steps, band, ("QP",))["QP"][0]


@pytest.mark.parametrize("band, area", [("C/D", 0.044e-6), ("B", 0.316e-6)])
def test_qp_reference_pulse_reads_like_its_cw(band, area):
    # Source: CISPR 16-1-1 QP calibration: impulses of 0.044 uVs (C/D) / 0.316 uVs (B) at 100 Hz read as a CW of
    # 66 dBuV (2 mV RMS). Areas recalled from memory (not confirmed in a seen copy).
    reading = qp_of_pulses(area, 100.0, BAND[band])
    assert 20 * np.log10(reading / 2e-3) == pytest.approx(0.0, abs=1.0)


# Relative pulse level for a constant QP reading, re 100 Hz (CISPR 16-1-1 pulse-response curve). Values recalled from
# memory (unconfirmed). Tolerances: 1.5 dB at 1 kHz; at 20 Hz and below 4 dB, because a plain physical model of
# the detector (Gaussian filter, ideal diode, critically damped meter) drifts 2-4 dB from the remembered table
# there, and we model the physics without correction factors.
PRF_CURVE = {
    "C/D": [(1000, -8.0, 1.5), (20, 9.0, 4.0), (10, 14.0, 4.0), (2, 26.0, 4.0), (1, 28.5, 4.0), (None, 31.5, 4.0)],
    "B": [(1000, -4.5, 1.5), (20, 6.5, 4.0), (10, 10.0, 4.0), (2, 20.5, 4.0), (1, 22.5, 4.0), (None, 23.5, 4.0)],
}


@pytest.mark.parametrize("band", ["C/D", "B"])
def test_qp_pulse_response_curve(band):
    # Source: CISPR 16-1-1 QP pulse-response curve (from memory, see PRF_CURVE)
    b = BAND[band]
    reference = qp_of_pulses(1e-6, 100.0, b)
    for prf, expected, tolerance in PRF_CURVE[band]:
        rate = prf if prf is not None else 1.0 / (30 * b.qp_discharge_s)  # isolated: the detector fully recovers
        relative = -20 * np.log10(qp_of_pulses(1e-6, rate, b) / reference)
        assert relative == pytest.approx(expected, abs=tolerance), (band, prf, relative)


def test_fast_and_stepped_qp_agree_for_a_spread_envelope():
    # The closed-form balance used for fast envelopes must match stepping the detector in time.
    s = Spread("down", 0.005, 30e3, "triangle")
    f, a, _ = harmonic_lines(s, 100e6, [3], [1.0])
    t = np.array([f.min() + 0.2e6, f.mean()])
    fast = sweep(f, a, 30e3, t, ("QP", "AV"))
    # rebuild the same envelope and step it
    from emispec import receiver

    band = BAND["C/D"]
    for k, ft in enumerate(t):
        near = np.abs(f - ft) < receiver.REACH_RBW * band.rbw_hz
        w = a[near] * filter_response(f[near] - ft, band.rbw_hz)
        bins = np.rint((f[near] - f[near][0]) / 30e3).astype(int)
        n = 1024
        z = np.zeros(n, complex)
        np.add.at(z, bins, w)
        env = np.abs(np.fft.ifft(z) * n)[None, :]
        stepped = detect_steps(env, np.full(n, 1 / 30e3 / n), band, ("QP", "AV"))
        assert 20 * np.log10(fast["QP"][k] / stepped["QP"][0]) == pytest.approx(0.0, abs=0.05)
        assert 20 * np.log10(fast["AV"][k] / stepped["AV"][0]) == pytest.approx(0.0, abs=0.05)


def test_a_point_reads_the_same_in_any_batch():
    # Property of the implementation, no outside source: each point's envelope follows from its own lines
    # only, so a memo of readings (emispec.pipeline.Reuse) may hand out a reading taken in another batch.
    s = Spread("down", 0.005, 31.5e3, "triangle")
    n = np.arange(1, 60)
    f, a, _ = harmonic_lines(s, 24e6, n, np.ones(n.size))
    order = np.argsort(f, kind="stable")
    f, a = f[order], a[order]
    t = np.sort(np.concatenate([np.linspace(30e6, 1.4e9, 3000), 24e6 * n[n > 1]]))
    whole = sweep(f, a, 31.5e3, t, ("PK", "QP", "AV"))
    for pick in (slice(None, None, 7), slice(1000, 1003), [5, 2999, 1500]):
        alone = sweep(f, a, 31.5e3, t[pick], ("PK", "QP", "AV"))
        for det in whole:
            np.testing.assert_array_equal(alone[det], whole[det][pick])


# ------------------------------------------------------------ spread harmonic against brute force


@pytest.mark.parametrize(
    "n, f0, fm, edge_fraction",
    [(1, 100e6, 30e3, 0.1), (3, 100e6, 30e3, 0.5), (5, 100e6, 30e3, 0.05), (7, 48e6, 31.5e3, 0.9),
     (2, 48e6, 200e3, 0.3), (12, 100e6, 30e3, 0.1)],
)
def test_spread_peak_and_average_match_time_domain_simulation(n, f0, fm, edge_fraction):
    # Source: independent brute-force time-domain receiver (tests/bruteforce.py: scipy triangle wave, numerical
    # phase integration, Gaussian FIR convolution)
    spread = Spread("down", 0.005, fm, "triangle")
    lines, amps, _ = harmonic_lines(spread, f0, [n], [1.0])
    lo, hi = lines.min(), lines.max()
    band_lo = n * f0 * (1 - 0.005)
    tuning = band_lo + edge_fraction * n * f0 * 0.005
    rbw = resolution_bandwidth_hz([tuning])[0]
    ours = sweep(lines, amps, fm, [tuning], ("PK", "AV"))
    pk, av = peak_and_average(n, f0, 0.005, fm, spread.centre_factor, tuning, rbw)
    assert 20 * np.log10(ours["PK"][0] / pk) == pytest.approx(0.0, abs=0.3)
    assert 20 * np.log10(ours["AV"][0] / av) == pytest.approx(0.0, abs=0.3)
    assert lo < tuning < hi
