import numpy as np
import pytest

from emispec.receiver import BANDS, band_names, read_lines, resolution_bandwidth_hz


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


def test_cw_reads_its_rms_on_every_detector():
    # Source: CISPR 16-1-1: every detector is calibrated to read the RMS of an unmodulated sine
    level = np.array([1e-3, 2e-6])
    readings = read_lines(np.array([100e6, 200e6]), level, ("PK", "QP", "AV"))
    for det in ("PK", "QP", "AV"):
        np.testing.assert_array_equal(readings[det], level)
