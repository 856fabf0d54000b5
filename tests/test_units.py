import math

import numpy as np
import pytest

from emispec.units import QuantityError, db_micro, format_quantity, from_db, parse_quantity, to_db


@pytest.mark.parametrize(
    "text, dimension, expected",
    [
        ("25 MHz", "frequency", 25e6),
        ("1.2 ns", "time", 1.2e-9),
        ("100 nF", "capacitance", 100e-9),
        ("20 mohm", "resistance", 20e-3),
        ("1 Mohm", "resistance", 1e6),
        ("4 cm2", "area", 4e-4),
        ("3 mm^2", "area", 3e-6),
        ("0.5 %", "ratio", 0.005),
        ("-30 dB", "decibel", -30.0),
        ("3 m", "length", 3.0),
        ("1.5 mm", "length", 1.5e-3),
        ("50 uH", "inductance", 50e-6),
        ("2 \u00b5H", "inductance", 2e-6),
        ("3.3 V", "voltage", 3.3),
        ("1.5 A", "current", 1.5),
        ("1e3 Hz", "frequency", 1e3),
        (".5 GHz", "frequency", 0.5e9),
        (12e-12, "capacitance", 12e-12),
        (0.5, "ratio", 0.5),
    ],
)
def test_parse_quantity_reads_si_prefixes(text, dimension, expected):
    # Source: SI prefixes, BIPM SI Brochure, 9th ed., Table 7
    assert parse_quantity(text, dimension) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    "text, dimension",
    [("1.2 MHz", "time"), ("3 cm2", "length"), ("abc", "frequency"), ("5 furlongs", "length"),
     (True, "ratio"), ("nan", "time"), (float("inf"), "frequency"), ([1], "time"), ("1 xHz", "frequency")],
)
def test_parse_quantity_refuses_wrong_dimension_and_junk(text, dimension):
    with pytest.raises(QuantityError):
        parse_quantity(text, dimension)


def test_decibel_conversions():
    # Source: definition dBuV = 20 log10(V / 1 uV)
    assert db_micro(1.0) == pytest.approx(120.0)
    assert db_micro(1e-6) == pytest.approx(0.0)
    assert to_db(2.0) == pytest.approx(20 * math.log10(2))
    assert from_db(-30.0) == pytest.approx(10 ** -1.5)
    assert np.isnan(db_micro(0.0))  # a null is NaN (-> null), never -inf


def test_format_quantity():
    assert format_quantity(48e6, "Hz") == "48 MHz"
    assert format_quantity(1.2e-9, "s") == "1.2 ns"


def test_physical_constants_equal_scipy():
    # Source: scipy.constants (CODATA 2022), the independent reference for the values emispec keeps itself
    from scipy import constants

    from emispec.constants import C, EPSILON_0, MU_0

    assert C == constants.c and MU_0 == constants.mu_0 and EPSILON_0 == constants.epsilon_0
