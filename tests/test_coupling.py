"""Radiation formulas against the published constants and worked figures."""

import numpy as np
import pytest
from scipy import constants

from emispec.coupling import (
    LOOP_CONSTANT,
    CablePath,
    ConductedPath,
    LoopPath,
    TransferPath,
    cable_field,
    interpolate_db_log_f,
    loop_field,
    near_field,
)
from emispec.trace import Trace
from emispec.units import db_micro


def test_loop_constant_is_pauls_1_316e_minus_14():
    # Source: Paul, Introduction to EMC, 2nd ed. (2006), sec. 8.1.2: |E| = 1.316e-14 f^2 A I / r
    assert LOOP_CONSTANT == pytest.approx(1.316e-14, rel=1e-3)


def test_loop_free_space_example():
    # Source: Paul 2006 sec. 8.1.2 formula, evaluated: 100 MHz, 10 cm2, 10 mA, 3 m -> 438.7 uV/m
    e = loop_field(100e6, 10e-3, 10e-4, 3.0, ground_reflection=False)
    assert e == pytest.approx(438.7e-6, rel=2e-3)
    assert db_micro(e) == pytest.approx(52.84, abs=0.02)


def test_loop_with_ground_reflection_matches_otts_area_rule():
    # Source: Ott, Noise Reduction Techniques in Electronic Systems, 2nd ed., p. 301:
    # A_max[cm2] = 380 E[uV/m] r[m] / (f[MHz]^2 I[mA]), including the +6 dB ground reflection
    f_mhz, i_ma, r = 100.0, 10.0, 3.0
    e = loop_field(f_mhz * 1e6, i_ma * 1e-3, 10e-4, r, ground_reflection=True)
    area_cm2 = 380 * (e * 1e6) * r / (f_mhz**2 * i_ma)
    assert area_cm2 == pytest.approx(10.0, rel=2e-3)
    assert db_micro(e) == pytest.approx(58.86, abs=0.02)


def test_loop_small_example_at_10m():
    # Source: Paul 2006 sec. 8.1.2 formula: 30 MHz, 1 cm2, 1 mA, 10 m, free space -> -18.53 dBuV/m
    assert db_micro(loop_field(30e6, 1e-3, 1e-4, 10.0, False)) == pytest.approx(-18.53, abs=0.02)


def test_cable_common_mode_example():
    # Source: Paul 2006 sec. 8.1.3: |E| = 1.257e-6 f L I / r; 100 MHz, 1 m, 5 uA, 3 m -> 46.42 dBuV/m
    e = cable_field(100e6, 5e-6, 1.0, 3.0)
    assert db_micro(e) == pytest.approx(46.42, abs=0.02)
    assert e / (100e6 * 1.0 * 5e-6 / 3.0) == pytest.approx(1.257e-6, rel=1e-3)


def test_cable_current_for_class_b_at_30_mhz():
    # Source: Paul 2006 sec. 8.1.3: a few uA of common-mode current reach 100 uV/m (FCC Class B, 47 CFR 15.109(a))
    current = 100e-6 / cable_field(30e6, 1.0, 1.0, 3.0)
    assert current == pytest.approx(7.96e-6, rel=2e-3)


def test_cable_without_ground_is_a_hertzian_dipole():
    # Source: Hertzian dipole broadside far field, |E| = eta0 k I L / (4 pi r) = mu0 f I L / (2 r)
    e = cable_field(50e6, 1e-3, 0.2, 10.0, ground_reflection=False)
    k = 2 * np.pi * 50e6 / constants.c
    eta0 = constants.mu_0 * constants.c
    assert e == pytest.approx(eta0 * k * 1e-3 * 0.2 / (4 * np.pi * 10.0), rel=1e-12)


def test_electrically_long_cable_is_capped_at_half_a_wavelength():
    # Source: Paul 2006 sec. 8.1.3 (valid for electrically short wires); lambda/2 cap as README states
    f = 300e6  # lambda = 1 m
    assert cable_field(f, 1e-6, 5.0, 3.0) == pytest.approx(cable_field(f, 1e-6, 0.5 * constants.c / f, 3.0))
    assert cable_field(10e6, 1e-6, 5.0, 3.0) > cable_field(10e6, 1e-6, 2.0, 3.0)


def test_inverse_distance_scaling():
    # Source: 47 CFR 15.31(f)(1): extrapolate with an inverse linear-distance factor (20 dB/decade)
    e3 = db_micro(loop_field(100e6, 1e-3, 1e-4, 3.0))
    e10 = db_micro(loop_field(100e6, 1e-3, 1e-4, 10.0))
    assert e3 - e10 == pytest.approx(20 * np.log10(10 / 3), abs=1e-9)
    assert e3 - e10 == pytest.approx(10.457, abs=1e-3)


def test_transfer_table_measured_at_another_distance_is_referred_to_the_limit_distance():
    # Source: 47 CFR 15.31(f)(1) inverse-distance extrapolation
    path = TransferPath("probe", "voltage", Trace(np.array([1e6, 1e9]), np.array([-20.0, -20.0]), outside="hold"),
                        distance_m=1.0)
    at_3m = path.reading(np.array([1e8]), {"voltage": np.array([1.0])}, 3.0)
    assert db_micro(at_3m)[0] == pytest.approx(120 - 20 - 20 * np.log10(3.0))


def test_near_field_boundary_is_lambda_over_two_pi():
    # Source: Paul 2006 sec. 8.1 (far field for r > lambda / 2 pi); 1.59 m at 30 MHz
    boundary = constants.c / (2 * np.pi * 30e6)
    assert boundary == pytest.approx(1.59, abs=0.01)
    assert near_field(30e6, 1.5) and not near_field(30e6, 1.7)


def test_transfer_table_interpolates_linearly_in_db_over_log_f():
    # Source: the README's interpolation rule, checked against numpy.interp on log10 frequencies computed by hand
    table_hz, table_db = np.array([1e6, 100e6]), np.array([-40.0, 0.0])
    assert interpolate_db_log_f(10e6, table_hz, table_db) == pytest.approx(-20.0)
    assert interpolate_db_log_f(np.sqrt(10) * 1e6, table_hz, table_db) == pytest.approx(-30.0)
    assert interpolate_db_log_f(1e9, table_hz, table_db) == pytest.approx(0.0)  # held beyond the end


def test_paths_use_the_right_source_quantity():
    f, i, escape = np.array([100e6]), np.array([0.02]), np.array([1e-4])
    source = {"voltage": np.array([1.0]), "current": i, "escape": escape}
    loop = LoopPath("l", 1e-4)
    assert loop.reading(f, source, 3.0) == pytest.approx(loop_field(f, i, 1e-4, 3.0))
    cable = CablePath("c", 1.0, ratio=1e-3)
    assert cable.input == "current" and cable.reading(f, source, 3.0) == pytest.approx(cable_field(f, 2e-5, 1.0, 3.0))
    harness = CablePath("h", 1.0, drive="escape")
    assert harness.input == "escape" and harness.reading(f, source, 3.0) == pytest.approx(
        cable_field(f, escape, 1.0, 3.0))
    assert harness.termination(f)[0] == 150.0  # CISPR 16-1-2 / IEC 61000-4-6 common-mode impedance
    current = TransferPath("t", "current", Trace(np.array([1e6, 1e9]), np.array([6.0, 6.0]), outside="hold"))
    assert current.reading(f, source, None) == pytest.approx(i * 10 ** (6 / 20))
    mains = ConductedPath("m")
    assert mains.reading(f, source, None) == pytest.approx(escape * np.abs(mains.termination(f)))
    assert ConductedPath("m", measure="current").reading(f, source, None) == pytest.approx(escape)


def test_ground_reflection_up_to_1_ghz_only():
    # Source: CISPR 16-1-4 and ANSI C63.4: below 1 GHz the site has a reflecting ground plane (+6 dB in phase,
    # Ott 2009 ch. 12); above 1 GHz the floor between antenna and EUT is covered with absorber (no reflection)
    from emispec.coupling import reflection_factor

    f = np.array([30e6, 999e6, 1e9, 1.01e9, 6e9])
    np.testing.assert_array_equal(reflection_factor(f), [2, 2, 2, 1, 1])
    np.testing.assert_array_equal(reflection_factor(f, True), [2] * 5)
    np.testing.assert_array_equal(reflection_factor(f, False), [1] * 5)
    assert loop_field(2e9, 1e-3, 1e-4, 3.0) == pytest.approx(loop_field(2e9, 1e-3, 1e-4, 3.0, ground_reflection=False))
    assert cable_field(500e6, 1e-6, 0.1, 3.0) == pytest.approx(2 * cable_field(500e6, 1e-6, 0.1, 3.0, False))


def test_a_transfer_table_taken_in_the_near_field_is_flagged():
    # Source: Paul 2006 sec. 8.1: the field falls as 1/r only beyond lambda / 2 pi (0.48 m at 100 MHz), so a
    # probe table taken at 10 cm is not scaled to 3 m by inverse distance there without a flag
    path = TransferPath("probe", "voltage", Trace(np.array([1e6, 6e9]), np.array([-60.0, -60.0]), outside="hold"),
                        distance_m=0.1)
    flags = path.flags(np.array([100e6, 1e9]), 3.0)["near-field"]
    assert flags.tolist() == [True, False]
    at_limit = TransferPath("probe", "voltage", path.gain)  # taken at the limit's distance
    assert at_limit.flags(np.array([10e6, 100e6]), 3.0)["near-field"].tolist() == [True, False]


def test_cable_common_mode_current_is_the_ratio_times_its_drive():
    # Source: the cable model's definition (Ott 2009 ch. 12, I_cm the total common-mode current)
    cable = CablePath("c", 1.0, ratio=1e-3)
    assert cable.common_mode_current([1e8], {"current": np.array([0.02])})[0] == pytest.approx(2e-5)
