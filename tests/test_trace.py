"""Frequency-level traces: interpolation linear in dB over log f, steps, and what lies beyond the ends."""

import numpy as np

from emispec.trace import Trace, interp_log_f


def test_interpolation_is_linear_in_db_over_log_frequency():
    # Source: numpy.interp on log10 frequencies, an independent implementation of the same rule
    table_hz, table_db = np.array([1e6, 1e7, 3e8]), np.array([-40.0, -20.0, -25.0])
    f = np.geomspace(1e6, 3e8, 97)
    expected = np.interp(np.log10(f), np.log10(table_hz), table_db)
    np.testing.assert_allclose(interp_log_f(f, table_hz, table_db), expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(Trace(table_hz, table_db, outside="nan").at(f), expected, rtol=0, atol=1e-12)


def test_a_step_takes_the_lower_level_at_its_frequency():
    # Source: 47 CFR 15.109(c) and 15.107(a): the tighter (lower) limit applies at a band edge
    line = Trace(np.array([30e6, 88e6, 88e6, 216e6]), np.array([40.0, 40.0, 43.5, 43.5]), "dBuV/m", "QP")
    assert line.at([88e6])[0] == 40.0
    assert line.at([87.9e6])[0] == 40.0 and line.at([88.1e6])[0] == 43.5
    rising = Trace(np.array([1e6, 2e6, 2e6, 3e6]), np.array([50.0, 50.0, 40.0, 40.0]))
    assert rising.at([2e6])[0] == 40.0


def test_beyond_the_ends_a_limit_is_absent_and_a_table_holds():
    f = np.array([10e6, 50e6, 2e9])
    limit = Trace(np.array([30e6, 1e9]), np.array([40.0, 47.0]), "dBuV/m", "QP", outside="nan")
    table = Trace(np.array([30e6, 1e9]), np.array([-40.0, -47.0]), "dB", outside="hold")
    assert np.isnan(limit.at(f)[[0, 2]]).all() and np.isfinite(limit.at(f)[1])
    np.testing.assert_allclose(table.at(f)[[0, 2]], [-40.0, -47.0])
    assert limit.span_hz == (30e6, 1e9)
