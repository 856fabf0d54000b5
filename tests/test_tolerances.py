"""Tolerances: the [[tolerance]] entries of a board, their distributions and their reproducible draws."""

import math

import numpy as np
import pytest
from scipy import stats

from conftest import BASE_BOARD
from emispec.cli import app
from emispec.parameters import Template
from emispec.tolerances import CHUNK, draw, read_tolerances


def tolerances_of(write_board, entries: str):
    return read_tolerances(Template.load(write_board(BASE_BOARD + entries)))


def test_each_distribution_is_read_in_si(write_board):
    t = tolerances_of(write_board, """
[[tolerance]]
key = "clock[clk].rise_time"
distribution = "uniform"
low = "0.8 ns"
high = "1.3 ns"

[[tolerance]]
key = "clock[clk].swing"
distribution = "normal"
sigma = "10 %"

[[tolerance]]
key = "path[loop1].area"
distribution = "lognormal"
sigma = "20 %"
truncate = 2

[[tolerance]]
key = "clock[clk].duty_cycle"
distribution = "triangular"
low = 0.45
high = 0.52
""")
    assert [x.distribution for x in t] == ["uniform", "normal", "lognormal", "triangular"]
    assert t[0].support == pytest.approx((0.8e-9, 1.3e-9))
    assert t[1].nominal == pytest.approx(3.3) and t[1].sigma == pytest.approx(0.33)
    assert t[1].support == pytest.approx((3.3 - 0.99, 3.3 + 0.99))
    # one sigma of the lognormal multiplies the value by 1.2: sigma of ln(x) = ln(1.2)
    assert t[2].sigma == pytest.approx(math.log(1.2)) and t[2].support == pytest.approx((1e-4 / 1.44, 1.44e-4))
    assert t[3].mode == pytest.approx(0.5)  # the nominal duty cycle (the default)
    assert "0.8 ns..1.3 ns" in t[0].text().replace("800 ps", "0.8 ns") and "cm2" in t[2].text()


def test_quantiles_match_scipys_truncated_distributions(write_board):
    # Source: scipy.stats.truncnorm and scipy.stats.triang, independent implementations of the truncated normal
    # and the triangular inverse distribution functions
    normal, tri = tolerances_of(write_board, """
[[tolerance]]
key = "clock[clk].swing"
distribution = "normal"
sigma = "0.4 V"
truncate = 2.5

[[tolerance]]
key = "clock[clk].duty_cycle"
distribution = "triangular"
low = 0.4
high = 0.6
mode = 0.45
""")
    u = np.linspace(0.001, 0.999, 41)
    expected = stats.truncnorm(-2.5, 2.5, loc=3.3, scale=0.4).ppf(u)
    assert normal.quantile(u) == pytest.approx(expected, rel=1e-9)
    assert tri.quantile(u) == pytest.approx(stats.triang(0.25, loc=0.4, scale=0.2).ppf(u), rel=1e-9)
    assert normal.truncated == 0.0


def test_a_distribution_reaching_past_the_allowed_range_is_truncated_and_says_how_much(write_board):
    # Source: scipy.stats.norm: the mass of N(1, 0.5) within 3 sigma that lies below 0 (a loop area must be
    # above 0), as a share of the mass within 3 sigma
    (t,) = tolerances_of(write_board, """
[[tolerance]]
key = "path[loop1].area"
distribution = "normal"
sigma = "0.5 cm2"
""")
    assert t.support[0] == pytest.approx(0.0, abs=1e-12) and t.support[1] == pytest.approx(2.5e-4)
    z = stats.norm
    cut = (z.cdf(-2) - z.cdf(-3)) / (z.cdf(3) - z.cdf(-3))
    assert t.truncated == pytest.approx(cut, rel=1e-6)
    assert "cuts 2.1%" in t.text()
    assert t.quantile(np.array([0.0, 1e-9])).min() >= 0.0


def test_draws_are_the_same_however_they_are_chunked(write_board):
    t = tolerances_of(write_board, """
[[tolerance]]
key = "clock[clk].rise_time"
distribution = "uniform"
low = "0.8 ns"
high = "1.3 ns"
""")
    many = draw(t, 3 * CHUNK + 7, seed=42)
    assert np.array_equal(draw(t, CHUNK, seed=42), many[:CHUNK])  # chunk k draws from the k-th child stream
    assert not np.array_equal(draw(t, CHUNK, seed=43), many[:CHUNK])
    assert many.min() >= 0.8e-9 and many.max() <= 1.3e-9
    # the draws are uniform: Kolmogorov-Smirnov against scipy.stats.uniform
    assert stats.kstest(many[:, 0], stats.uniform(0.8e-9, 0.5e-9).cdf).pvalue > 1e-3


def test_a_group_shares_one_draw(write_board):
    a, b = tolerances_of(write_board, """
[[tolerance]]
key = "clock[clk].rise_time"
distribution = "uniform"
low = "0.8 ns"
high = "1.3 ns"
group = "lot"

[[tolerance]]
key = "path[loop1].area"
distribution = "normal"
sigma = "10 %"
group = "lot"
""")
    values = draw((a, b), 500, seed=7)
    assert a.cdf(values[:, 0]) == pytest.approx(b.cdf(values[:, 1]), abs=1e-9)  # the same quantile
    assert stats.spearmanr(values[:, 0], values[:, 1]).statistic == pytest.approx(1.0)


BAD = {
    "unknown key": ('key = "clock[clk].rise"\ndistribution = "uniform"\nlow = "1 ns"\nhigh = "2 ns"', "tolerance[0].key"),
    "no such clock": ('key = "clock[cpu].rise_time"\ndistribution = "uniform"\nlow = "1 ns"\nhigh = "2 ns"',
                      "tolerance[0].key"),
    "wrong unit": ('key = "clock[clk].rise_time"\ndistribution = "uniform"\nlow = "1 V"\nhigh = "2 ns"',
                   "tolerance[0].low"),
    "low above high": ('key = "clock[clk].rise_time"\ndistribution = "uniform"\nlow = "1.3 ns"\nhigh = "0.8 ns"',
                       "tolerance[0].high"),
    "sigma zero": ('key = "clock[clk].swing"\ndistribution = "normal"\nsigma = "0 V"', "tolerance[0].sigma"),
    "sigma negative": ('key = "clock[clk].swing"\ndistribution = "normal"\nsigma = "-5 %"', "tolerance[0].sigma"),
    "unknown distribution": ('key = "clock[clk].swing"\ndistribution = "gauss"\nsigma = "5 %"',
                             "tolerance[0].distribution"),
    "sigma for uniform": ('key = "clock[clk].swing"\ndistribution = "uniform"\nlow = "3 V"\nhigh = "3.6 V"\n'
                          'sigma = "1 V"', "tolerance[0].sigma"),
    "missing high": ('key = "clock[clk].swing"\ndistribution = "uniform"\nlow = "3 V"', "tolerance[0].high"),
    "outside the allowed range": ('key = "clock[clk].duty_cycle"\ndistribution = "uniform"\nlow = 0.4\nhigh = 1.2',
                                  "tolerance[0].high"),
    "mode outside": ('key = "clock[clk].duty_cycle"\ndistribution = "triangular"\nlow = 0.4\nhigh = 0.45',
                     "tolerance[0].key"),
    "edge that does not fit": ('key = "clock[clk].rise_time"\ndistribution = "uniform"\nlow = "1 ns"\nhigh = "12 ns"',
                               "tolerance[0].high"),
    "dB sigma in percent": ('key = "path[c].ratio"\ndistribution = "normal"\nsigma = "10 %"', "tolerance[0].sigma"),
    "lognormal dB": ('key = "path[c].ratio"\ndistribution = "lognormal"\nsigma = "3 dB"',
                     "tolerance[0].distribution"),
    "not an uncertain input": ('key = "guard_band"\ndistribution = "uniform"\nlow = "3 dB"\nhigh = "6 dB"',
                               "tolerance[0].key"),
    "bad group": ('key = "clock[clk].swing"\ndistribution = "normal"\nsigma = "5 %"\ngroup = "a b"',
                  "tolerance[0].group"),
    "truncate too small": ('key = "clock[clk].swing"\ndistribution = "normal"\nsigma = "5 %"\ntruncate = 0.1',
                           "tolerance[0].truncate"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_tolerances_get_one_line_and_exit_2(runner, write_board, case):
    body, where = BAD[case]
    cable = '\n[[path]]\nname = "c"\nkind = "cable"\nlength = "1 m"\nratio = "-60 dB"\n'
    path = write_board(BASE_BOARD + cable + "\n[[tolerance]]\n" + body + "\n")
    result = runner.invoke(app, ["risk", str(path), "--samples", "10"])
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and where in lines[0] and "Traceback" not in result.output, result.output
    assert "board.toml" in lines[0]


def test_a_key_can_carry_one_tolerance_only(runner, write_board):
    entry = '\n[[tolerance]]\nkey = "clock[clk].swing"\ndistribution = "normal"\nsigma = "5 %"\n'
    result = runner.invoke(app, ["risk", str(write_board(BASE_BOARD + entry + entry)), "--samples", "10"])
    assert result.exit_code == 2 and "tolerance[1].key" in result.output and "tolerance[0]" in result.output
