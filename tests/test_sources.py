"""Sources behind one protocol: what the pipeline reads of a clock and of a pulse current."""

import numpy as np
import pytest

from conftest import BASE_BOARD
from emispec.board import load_board
from emispec.sources import Clock, Current
from emispec.spread import Spread
from emispec.waveform import Trapezoid, harmonic_amplitudes, triangle_pulse_amplitudes

WAVE = Trapezoid(25e6, 3.3, 0.45, 1.5e-9, 2e-9)


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
