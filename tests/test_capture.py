"""Measured waveforms: synthesized captures with known parameters, and ngspice as an independent simulator."""

import json
import shutil
import subprocess

import numpy as np
import pytest
from typer.testing import CliRunner

from emispec.capture import NYQUIST_FRACTION, CaptureError, analyse
from emispec.cli import app
from emispec.readers import FileError, read_capture
from emispec.waveform import Trapezoid, envelope, harmonic_phasors


def trapezoid_samples(wave: Trapezoid, t: np.ndarray) -> np.ndarray:
    """The linear-ramp trapezoid at times t: rising ramp centred on t = 0, falling ramp centred on t = tau."""
    period = wave.period_s
    x = np.mod(t + period / 4, period) - period / 4  # phase in [-T/4, 3T/4): the rising edge whole
    up = np.clip((x + wave.rise_s / 2) / wave.rise_s, 0, 1)
    down = np.clip((x - wave.width_s + wave.fall_s / 2) / wave.fall_s, 0, 1)
    return wave.swing_v * (up - down)


def capture(wave, rng, dt=0.2137e-9, span=5.37e-6, noise=0.01, bits=8, full_scale=4.0, extra=None):
    """A scope-like record: a random start, a non-integer number of samples per period, noise, quantization."""
    t = np.arange(int(span / dt)) * dt
    start = rng.uniform(0, wave.period_s)
    v = trapezoid_samples(wave, t + start)
    if extra is not None:
        v = v + extra(t + start)
    v = v + rng.normal(0, noise, t.shape)
    step = full_scale / 2**bits
    return t, np.round(v / step) * step


WAVE = Trapezoid(25e6, 3.3, 0.45, 1.5e-9, 2.0e-9)


def test_fitted_parameters_within_3_percent():
    # Source: synthesized capture of a known trapezoid (the check: parameters within 3 %)
    a = analyse(*capture(WAVE, np.random.default_rng(1)))
    assert a.frequency_hz == pytest.approx(25e6, rel=1e-4)
    assert a.duty == pytest.approx(0.45, rel=0.03)
    assert a.rise_s == pytest.approx(0.8 * 1.5e-9, rel=0.03)  # 10-90 of a linear ramp is 0.8 of it
    assert a.fall_s == pytest.approx(0.8 * 2.0e-9, rel=0.03)
    assert a.rise_2080_s == pytest.approx(0.6 * 1.5e-9, rel=0.03)
    assert a.fall_2080_s == pytest.approx(0.6 * 2.0e-9, rel=0.03)
    assert a.swing_v == pytest.approx(3.3, rel=0.03)
    assert a.overshoot < 0.01 and a.undershoot < 0.01
    assert a.ringing_hz is None


def test_harmonics_equal_the_exact_series_up_to_the_limit():
    # Source: Paul, Introduction to EMC, 2nd ed., sec. 3.2 (exact trapezoid series), within 0.2 dB
    dt = 0.2137e-9
    a = analyse(*capture(WAVE, np.random.default_rng(2), dt=dt))
    assert 20 <= a.limit and a.limit * WAVE.frequency_hz <= NYQUIST_FRACTION * 0.5 / dt
    n = np.arange(1, a.limit + 1)
    exact = np.abs(harmonic_phasors(WAVE, n))
    clear = exact > envelope(WAVE, n * WAVE.frequency_hz) / 10 ** (10 / 20)  # away from the sinc nulls
    assert np.count_nonzero(clear) > 0.6 * a.limit
    error = 20 * np.log10(np.abs(a.harmonics[: a.limit]) / exact)
    assert np.max(np.abs(error[clear])) < 0.2


def test_phase_is_referred_to_the_rising_crossing():
    # Source: numpy as the reference: the phasors of the same series (emispec.waveform) for a noise-free record
    a = analyse(*capture(WAVE, np.random.default_rng(3), noise=0.0, bits=16))
    n = np.arange(1, 6)
    assert np.allclose(a.harmonics[:5], harmonic_phasors(WAVE, n), rtol=0.01, atol=1e-3)


def test_ringing_frequency_and_its_bump():
    # Source: synthesized damped ringing after each rising edge, 180 MHz, decay time 10 ns (the check)
    f_ring, decay = 180e6, 10e-9
    wave = Trapezoid(20e6, 3.3, 0.5, 1.0e-9, 1.0e-9)

    def ringing(t):
        x = np.mod(t + wave.period_s / 4, wave.period_s) - wave.period_s / 4 - wave.rise_s / 2
        return np.where(x > 0, 0.6 * np.exp(-x / decay) * np.sin(2 * np.pi * f_ring * x), 0.0)

    a = analyse(*capture(wave, np.random.default_rng(4), dt=0.1037e-9, span=4.1e-6, extra=ringing))
    assert a.ringing_hz == pytest.approx(f_ring, rel=0.03)
    omega = 2 * np.pi * f_ring
    assert a.ringing_damping == pytest.approx((1 / decay) / np.hypot(1 / decay, omega), rel=0.1)
    assert a.overshoot > 0.05
    n = np.arange(1, min(a.limit, 25) + 1, 2)  # odd harmonics (the even ones are nulls), below the edges' null
    gain = 20 * np.log10(np.abs(a.harmonics[n - 1]) / np.abs(harmonic_phasors(a.trapezoid(), n)))
    peak = n[np.argmax(gain)] * wave.frequency_hz
    assert abs(peak - f_ring) <= wave.frequency_hz  # the bump over the trapezoid sits at the ringing frequency
    assert gain.max() > 3.0

def test_too_few_periods_and_clipping_are_refused():
    rng = np.random.default_rng(5)
    t, v = capture(WAVE, rng, span=90e-9)
    with pytest.raises(CaptureError, match="too few periods"):
        analyse(t, v)
    t, v = capture(WAVE, rng)
    with pytest.raises(CaptureError, match="clipped at its top"):
        analyse(t, np.minimum(v, 3.0))


@pytest.fixture
def written(tmp_path):
    rng = np.random.default_rng(6)
    t, v = capture(WAVE, rng, span=1.2e-6)
    return tmp_path, t, v


def test_csv_with_metadata_units_and_two_columns(written):
    folder, t, v = written
    lines = ["Model,Example scope", "Sample interval,213.7 ps", "", "Time (ns),CH1 (mV),CH2 (V)"]
    lines += [f"{a * 1e9:.6f},{b * 1e3:.3f},{0.5 * b:.5f}" for a, b in zip(t, v)]
    path = folder / "scope.csv"
    path.write_text("\n".join(lines) + "\n")
    data = read_capture(path, "CH1")
    assert data.column == "CH1 (mV)"
    assert np.allclose(data.time_s, t, atol=1e-15) and np.allclose(data.voltage_v, v, atol=1e-6)
    with pytest.raises(FileError, match="2 voltage columns"):
        read_capture(path)


def test_semicolon_with_decimal_comma_and_tsv(written):
    folder, t, v = written
    semi = folder / "scan.csv"
    semi.write_text("Time [s];Voltage [V]\n" + "".join(f"{a:.6e};{b:.5f}\n".replace(".", ",") for a, b in zip(t, v)))
    tab = folder / "scan.tsv"
    tab.write_text("# exported\ntime\tv\n" + "".join(f"{a:.6e}\t{b:.5f}\n" for a, b in zip(t, v)))
    for path in (semi, tab):
        data = read_capture(path)
        assert np.allclose(data.voltage_v, v, atol=1e-5)


def test_time_must_increase(written):
    folder, t, v = written
    path = folder / "bad.csv"
    rows = [f"{a:.6e},{b:.5f}" for a, b in zip(t, v)]
    rows[10], rows[11] = rows[11], rows[10]
    path.write_text("\n".join(rows) + "\n")
    with pytest.raises(FileError, match="sample 12: time does not increase"):
        read_capture(path)


NETLIST = """* 33 ohm driver into a 50 ohm line and a 5 pF load
V1 in 0 PULSE(0 3.3 0 1n 1.4n 18.8n 40n)
R1 in a 33
T1 a 0 b 0 Z0=50 TD=0.5n
C1 b 0 5p
.control
set wr_vecnames
set wr_singlescale
set filetype=ascii
tran 0.025n 480n 0 0.025n
linearize v(b)
wrdata {out} v(b)
write {raw} v(b)
meas tran trise TRIG v(b) VAL=0.33 RISE=6 TARG v(b) VAL=2.97 RISE=6
meas tran tfall TRIG v(b) VAL=2.97 FALL=6 TARG v(b) VAL=0.33 FALL=6
quit
.endc
.end
"""


@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice not installed (apt-get install ngspice)")
def test_ngspice_output_against_numpy_fft_and_meas(tmp_path):
    # Source: ngspice (independent circuit simulator) for the samples and its own `meas` of the 10-90 times;
    # numpy's FFT of exactly 10 periods of the same samples as the reference spectrum.
    out, raw = tmp_path / "out.txt", tmp_path / "out.raw"
    deck = tmp_path / "line.cir"
    deck.write_text(NETLIST.format(out=out, raw=raw))
    log = subprocess.run(["ngspice", "-b", str(deck)], capture_output=True, text=True, timeout=120).stdout
    meas = {k: float(line.split("=")[1].split()[0]) for line in log.splitlines()
            for k in ("trise", "tfall") if line.strip().startswith(k)}
    for path in (out, raw):
        data = read_capture(path, "v(b)")
        steady = data.time_s >= 80e-9  # past the line's start-up
        t, v = data.time_s[steady], data.voltage_v[steady]
        a = analyse(t, v)
        assert a.rise_s == pytest.approx(meas["trise"], rel=0.01)
        assert a.fall_s == pytest.approx(meas["tfall"], rel=0.01)
        samples = int(round(40e-9 / 0.025e-9))
        reference = 2 * np.fft.rfft(v[: 10 * samples]) / (10 * samples)
        n = np.arange(1, a.limit + 1)
        ref = np.abs(reference[10 * n])
        strong = ref > ref[0] / 1000  # 60 dB under the fundamental: ngspice's numeric floor is lower
        err = 20 * np.log10(np.abs(a.harmonics[: a.limit][strong]) / ref[strong])
        assert np.max(np.abs(err)) < 0.05


def test_waveform_command_json_and_outputs(written):
    folder, t, v = written
    path = folder / "clk.csv"
    path.write_text("time,v\n" + "".join(f"{a:.6e},{b:.5f}\n" for a, b in zip(t, v)))
    result = CliRunner().invoke(app, ["waveform", str(path), "--json", "-", "--out", str(folder / "o")])
    assert result.exit_code == 0, result.output
    s = json.loads(result.stdout)
    assert s["schema"] == "emispec.waveform/1"
    for key in ("frequency_hz", "duty_cycle", "rise_time_s", "fall_time_s", "rise_time_2080_s",
                "fall_time_2080_s", "swing_v", "overshoot", "undershoot", "ringing_hz", "harmonics"):
        assert key in s
    assert s["ringing_hz"] is None
    assert s["frequency_hz"] == pytest.approx(25e6, rel=1e-3)
    h = s["harmonics"][0]
    assert h["n"] == 1 and h["level_dbuv"] == pytest.approx(h["trapezoid_dbuv"], abs=0.1)
    assert sorted(p.name for p in (folder / "o").iterdir()) == [
        "waveform-clock.toml", "waveform-harmonics.csv", "waveform.json", "waveform.png"]
    snippet = (folder / "o" / "waveform-clock.toml").read_text()
    assert 'edge = "10-90"' in snippet and "[[clock]]" in snippet


def test_waveform_command_errors_are_one_line(written):
    folder, t, v = written
    path = folder / "short.csv"
    path.write_text("".join(f"{a:.6e},{b:.5f}\n" for a, b in zip(t[:300], v[:300])))
    result = CliRunner().invoke(app, ["waveform", str(path)])
    assert result.exit_code == 2
    assert "too few periods" in result.stderr and len(result.stderr.strip().splitlines()) == 1
    result = CliRunner().invoke(app, ["waveform", str(path), "--bandwidth", "fast"])
    assert result.exit_code == 2 and "--bandwidth" in result.stderr


def test_the_demo_capture_tells_its_story():
    # demo data consistency, no outside source: samples/make_capture.py drew these invented values
    from conftest import REPO

    data = read_capture(REPO / "samples" / "sdram-clk-capture.csv")
    a = analyse(data.time_s, data.voltage_v, data.file)
    assert a.frequency_hz == pytest.approx(100e6, rel=1e-4) and a.duty == pytest.approx(0.48, rel=0.01)
    assert a.rise_s == pytest.approx(0.42e-9, rel=0.03) and a.fall_s == pytest.approx(0.5e-9, rel=0.03)
    assert a.ringing_hz == pytest.approx(1.1e9, rel=0.03)
