"""Sources behind one protocol: what the pipeline reads of a clock and of a pulse current."""

import numpy as np
import pytest

from conftest import BASE_BOARD
from emispec.board import load_board
from emispec.sources import Clock, Current
from emispec.spread import Spread
from emispec.waveform import Trapezoid, harmonic_amplitudes, triangle_pulse_amplitudes

WAVE = Trapezoid(25e6, 3.3, 0.45, 1.5e-9, 2e-9)


def test_clock_phasors_are_the_rms_trapezoid_harmonics_and_bounded_by_the_envelope():
    # Source: Paul 2006 sec. 3.2 (series and its envelope); receivers read RMS = peak / sqrt 2
    clock = Clock("c", WAVE, ("p",), load_capacitance_f=10e-12)
    n = np.arange(1, 200)
    np.testing.assert_allclose(np.abs(clock.phasors(n)), harmonic_amplitudes(WAVE, n) / np.sqrt(2), rtol=1e-12)
    assert np.all(np.abs(clock.phasors(n)) <= clock.envelope(n * 25e6) * (1 + 1e-9))


def test_clock_load_current_per_volt():
    # Source: I = V / Z for Z = R + 1 / (j w C) (any circuit text)
    f = np.array([1e6, 1e8])
    rc = Clock("c", WAVE, ("p",), 33.0, 10e-12).per_unit(f)
    np.testing.assert_allclose(rc["current"], 1 / np.abs(33.0 + 1 / (2j * np.pi * f * 10e-12)), rtol=1e-12)
    assert np.all(rc["voltage"] == 1.0)
    assert np.all(np.isnan(Clock("c", WAVE, ("p",)).per_unit(f)["current"]))  # no load, no current


def test_current_source_has_current_and_no_voltage():
    # Source: triangular pulse train = trapezoid with tau = tr = tf = width / 2 (Paul 2006 sec. 3.2)
    current = Current("core", 24e6, 0.5, 0.3, 1.5e-9, "edge", "r", ("p",))
    n = np.arange(1, 50)
    np.testing.assert_allclose(np.abs(current.phasors(n)),
                               triangle_pulse_amplitudes(0.3, 1.5e-9, 24e6, n, "edge", 0.5) / np.sqrt(2), atol=1e-15)
    per_unit = current.per_unit(np.array([1e8]))
    assert np.isnan(per_unit["voltage"][0]) and per_unit["current"][0] == 1.0
    assert current.envelope(np.array([1e8])) is None


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
