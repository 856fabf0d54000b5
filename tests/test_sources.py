"""Sources behind one protocol: what the pipeline reads of a clock and of a pulse current."""

import re

import numpy as np
import pytest

from conftest import BASE_BOARD
from emispec.board import load_board
from emispec.schema import BoardError
from emispec.sources import EXTRAPOLATED, CapturedClock, Clock, Current
from emispec.spread import Spread
from emispec.waveform import Trapezoid, envelope, harmonic_amplitudes, harmonic_phasors, triangle_pulse_amplitudes
from test_capture import WAVE, capture  # Trapezoid(25 MHz, 3.3 V, 45 %, 1.5 ns, 2 ns)


def test_exact_clock_voltage_is_the_rms_trapezoid_series_and_its_bound_has_no_nulls():
    # Source: Paul 2006 sec. 3.2 (series and its envelope); receivers read RMS = peak / sqrt 2
    clock = Clock("c", WAVE, ("p",), load_capacitance_f=10e-12, mode="exact")
    n = np.arange(1, 200)
    exact = np.abs(clock.harmonics(n)["voltage"])
    np.testing.assert_allclose(exact, harmonic_amplitudes(WAVE, n) / np.sqrt(2), rtol=1e-12)
    bound = clock.bounds(n * 25e6)["voltage"]
    assert np.all(exact <= bound * (1 + 1e-9)) and np.all(bound > 0)
    enveloped = Clock("c", WAVE, ("p",), load_capacitance_f=10e-12)  # the default: margins use the bound
    np.testing.assert_allclose(np.abs(enveloped.harmonics(n)["voltage"]), bound, rtol=1e-12)


def test_clock_load_current_is_v_over_z():
    # Source: I = V / Z for Z = R + 1 / (j w C) (any circuit text)
    n = np.array([1, 3, 40])
    f = n * 25e6
    rc = Clock("c", WAVE, ("p",), 33.0, 10e-12, mode="exact").harmonics(n)
    np.testing.assert_allclose(np.abs(rc["current"]), np.abs(rc["voltage"]) / np.abs(33.0 + 1 / (2j * np.pi * f * 10e-12)),
                               rtol=1e-12)
    assert np.all(np.isnan(Clock("c", WAVE, ("p",)).harmonics(n)["current"]))  # no load, no current


def test_current_source_has_current_drawn_from_its_rail_and_no_voltage():
    # Source: triangular pulse train = trapezoid with tau = tr = tf = width / 2 (Paul 2006 sec. 3.2)
    current = Current("core", 24e6, 0.5, 0.3, 1.5e-9, "edge", "r", ("p",), mode="exact")
    n = np.arange(1, 50)
    q = current.harmonics(n)
    np.testing.assert_allclose(np.abs(q["current"]),
                               triangle_pulse_amplitudes(0.3, 1.5e-9, 24e6, n, "edge", 0.5) / np.sqrt(2), atol=1e-15)
    np.testing.assert_array_equal(q["rail"], q["current"])
    assert np.all(np.isnan(q["voltage"]))
    # its bound: the triangle's envelope, twice for two pulses per period (any placement of the second)
    bound = current.bounds(n * 24e6)["current"]
    assert np.all(np.abs(q["current"]) <= bound * (1 + 1e-9)) and np.all(bound[::2] > 0)


def test_a_current_following_a_clock_takes_its_frequency_duty_and_spread(write_board):
    text = BASE_BOARD.replace('swing = "3.3 V"', 'swing = "3.3 V"\nduty_cycle = "40 %"\nrail = "r"\n'
                              'spread = { mode = "down", deviation = "0.5 %", rate = "31 kHz" }')
    text = text.replace("cispr32-class-b-radiated-10m", "cispr32-class-b-radiated-3m") + """
[[rail]]
name = "r"
voltage = "1 V"
[[rail.part]]
kind = "regulator"
resistance = "10 mohm"

[[current]]
name = "core"
clock = "clk"
peak = "1 A"
width = "1 ns"
rail = "r"
paths = ["loop1"]
"""
    board = load_board(write_board(text))
    core = board.source("core")
    assert core.frequency_hz == 50e6 and core.duty == pytest.approx(0.4)
    assert core.spread == Spread("down", 0.005, 31e3) and core.spread is board.source("clk").spread


# ------------------------------------------------------------------ a clock read from a capture

CAPTURED_BOARD = """\
title = "Captured clock"
limit = "cispr32-class-b-radiated-3m"

[[clock]]
name = "cap"
waveform = "clk.csv"
load = { capacitance = "10 pF" }
paths = ["loop1"]
{extra}

[[path]]
name = "loop1"
kind = "loop"
area = "1 cm2"
"""


@pytest.fixture
def captured(tmp_path):
    """A board whose clock is a scope capture (test_capture's synthesized trapezoid) and that capture."""
    t, v = capture(WAVE, np.random.default_rng(11))
    (tmp_path / "clk.csv").write_text("Time (ns),CH1 (V)\n" + "".join(f"{a * 1e9:.5f},{b:.5f}\n" for a, b in zip(t, v)))

    def board(extra: str = ""):
        path = tmp_path / "board.toml"
        path.write_text(CAPTURED_BOARD.replace("{extra}", extra))
        return path

    return board


def test_captured_clock_is_the_capture_up_to_its_limit_and_the_trapezoid_envelope_above(captured):
    # Source: Paul, Introduction to EMC, 2nd ed., sec. 3.2: the exact series and the envelope of the trapezoid
    # the capture was synthesized from (within 0.2 dB of the series away from its nulls, as analyse promises)
    clock = load_board(captured('harmonics = "exact"')).source("cap")
    assert isinstance(clock, CapturedClock) and 20 <= clock.limit <= 40
    n = np.arange(1, 120)
    exact = np.abs(clock.harmonics(n)["voltage"]) * np.sqrt(2)
    inside = n <= clock.limit
    series = np.abs(harmonic_phasors(WAVE, n))
    clear = series > envelope(WAVE, n * WAVE.frequency_hz) / 10 ** (10 / 20)
    keep = inside & clear
    assert np.max(np.abs(20 * np.log10(exact[keep] / series[keep]))) < 0.2
    # above the limit no null is invented: the envelope of the true trapezoid within its fitted edges (3 %)
    above = 20 * np.log10(exact[~inside] / envelope(WAVE, n[~inside] * WAVE.frequency_hz))
    assert np.max(np.abs(above)) < 0.5
    assert np.array_equal(clock.row_flags(n)[EXTRAPOLATED], ~inside)
    # the load current is V / Z of the board's load
    f = n * clock.frequency_hz
    np.testing.assert_allclose(clock.harmonics(n)["current"], clock.harmonics(n)["voltage"] * 2j * np.pi * f * 10e-12)


def test_captured_clock_envelope_mode_bounds_the_capture_and_keeps_its_ringing(captured, tmp_path):
    # Source: Paul (2006), sec. 3.2 envelope; the ringing capture of test_capture (180 MHz bump)
    clock = load_board(captured()).source("cap")
    n = np.arange(1, 120)
    bound = np.abs(clock.harmonics(n)["voltage"])
    assert np.all(bound >= np.abs(clock.exact(n)["voltage"]) * (1 - 1e-12))
    # never under the fitted trapezoid's envelope; for a clean trapezoid, within 0.5 dB of the true one's
    assert np.all(bound * np.sqrt(2) >= envelope(clock.wave, n * WAVE.frequency_hz) * (1 - 1e-12))
    gap = 20 * np.log10(bound * np.sqrt(2) / envelope(WAVE, n * WAVE.frequency_hz))
    assert np.max(np.abs(gap)) < 0.5
    # a ringing clock: the bump stands over the fitted trapezoid's envelope near the ringing frequency
    f_ring, decay = 180e6, 10e-9
    wave = Trapezoid(20e6, 3.3, 0.5, 1.0e-9, 1.0e-9)

    def ringing(t):
        x = np.mod(t + wave.period_s / 4, wave.period_s) - wave.period_s / 4 - wave.rise_s / 2
        return np.where(x > 0, 0.6 * np.exp(-x / decay) * np.sin(2 * np.pi * f_ring * x), 0.0)

    t, v = capture(wave, np.random.default_rng(4), dt=0.1037e-9, span=4.1e-6, extra=ringing)
    (tmp_path / "clk.csv").write_text("t,v\n" + "".join(f"{a:.6e},{b:.5f}\n" for a, b in zip(t, v)))
    ringing_clock = load_board(captured()).source("cap")
    m = np.arange(1, 16)
    lift = 20 * np.log10(np.abs(ringing_clock.harmonics(m)["voltage"]) * np.sqrt(2)
                         / envelope(ringing_clock.wave, m * wave.frequency_hz))
    assert abs(m[np.argmax(lift)] * wave.frequency_hz - f_ring) <= 2 * wave.frequency_hz and lift.max() > 3.0


def test_captured_clock_frequency_and_bandwidth_keys(captured):
    base = load_board(captured()).source("cap")
    moved = load_board(captured('frequency = "33.333 MHz"')).source("cap")
    assert moved.frequency_hz == pytest.approx(33.333e6)
    np.testing.assert_array_equal(moved.measured, base.measured)  # the capture's shape per period is kept
    assert moved.wave.rise_s == pytest.approx(base.wave.rise_s * base.frequency_hz / 33.333e6)
    narrow = load_board(captured('bandwidth = "300 MHz"')).source("cap")
    assert narrow.limit == 12 and np.array_equal(narrow.measured, base.measured[:12])


@pytest.mark.parametrize("extra, key, words", [
    ('rise_time = "1 ns"', "clock[cap].rise_time", "comes from the capture"),
    ('swing = "3.3 V"', "clock[cap].swing", "comes from the capture"),
    ('bandwidth = "1 kHz"', "clock[cap].bandwidth", "no harmonic of the capture"),
])
def test_captured_clock_key_errors(captured, extra, key, words):
    with pytest.raises(BoardError, match=re.escape(key) + ".*" + words):
        load_board(captured(extra))


def test_captured_clock_file_errors_name_the_key(captured, tmp_path, write_board):
    (tmp_path / "clk.csv").write_text("t,v\n0,0\n1e-9,1\n2e-9,0\n")
    with pytest.raises(BoardError, match=r"clock\[cap\]\.waveform.*too few periods"):
        load_board(captured())
    (tmp_path / "clk.csv").unlink()
    with pytest.raises(BoardError, match=r"clock\[cap\]\.waveform.*cannot read"):
        load_board(captured())
    with pytest.raises(BoardError, match=r"clock\[clk\]\.bandwidth.*belongs to a clock read from a capture"):
        load_board(write_board(BASE_BOARD.replace('swing = "3.3 V"', 'swing = "3.3 V"\nbandwidth = "1 GHz"')))
    with pytest.raises(BoardError, match=r"clock\[clk\]\.frequency.*missing"):
        load_board(write_board(BASE_BOARD.replace('frequency = "50 MHz"\n', "")))


def test_rows_above_the_capture_limit_are_flagged_extrapolated(captured, runner):
    import json

    from emispec.cli import app

    result = runner.invoke(app, ["estimate", str(captured()), "--json", "-"])
    assert result.exit_code == 0, result.output
    rows = json.loads(result.stdout)["rows"]
    limit = load_board(captured()).source("cap").limit
    assert rows and all(("extrapolated" in r["flags"]) == (r["harmonic"] > limit) for r in rows)
