"""IBIS edge rates: files written here with known ramps and waveform tables."""

import json
import textwrap

import numpy as np
import pytest
from typer.testing import CliRunner

from emispec.board import load_board
from emispec.cli import app
from emispec.ibis import IbisError, read_ibis
from emispec.schema import BoardError

# Source: ANSI/EIA-656-B (IBIS) [Ramp]: dV/dt_r and dV/dt_f are the 20-80 % voltage change into R_load and
# its time, typ/min/max columns, NA allowed in min and max; [Rising Waveform] with R_fixture / V_fixture and a
# time, typ, min, max table.  The scaling letters (M mega, m milli) and keywords read without regard to case
# are recalled from memory of the specification's general syntax rules.
DRIVER = """\
[IBIS Ver]      5.0
[File Name]     driver.ibs
[Component]     TEST_PART
[Manufacturer]  none
[Pin]  signal_name  model_name  R_pin  L_pin  C_pin
1      CLK_OUT      DRV_FAST    NA     NA     NA
2      CLK_IN       RX          NA     NA     NA
[Model]         DRV_FAST
Model_type      Output
C_comp          2.0pF  1.8pF  2.2pF
[Pulldown]
| V      I(typ)   I(min)   I(max)
 -3.3    -50m     -40m     -60m
  3.3     50m      40m      60m
[Ramp]
| variable    typ          min          max
dV/dt_r       1.98/0.60n   1.80/800p    2.16/0.45nS
dV/dt_f       1.98/0.50n   1.80/0.7e-9  NA
R_load = 50
[Rising Waveform]
R_fixture = 50
V_fixture = 0.0
{rising}
[Model]         RX
Model_type      Input
[End]
"""

TAU = 0.25e-9


def rc_table(points: int = 400) -> str:
    """A single-pole rising edge v = 3 (1 - exp(-t / tau)) from t = 0.1 ns, tabulated out to 12 tau."""
    t = np.linspace(0, 0.1e-9 + 12 * TAU, points)
    v = np.where(t > 0.1e-9, 3.0 * (1 - np.exp(-(t - 0.1e-9) / TAU)), 0.0)
    return "\n".join(f"{a * 1e9:.6f}n  {b:.6f}  {0.9 * b:.6f}  NA" for a, b in zip(t, v))


@pytest.fixture
def driver(tmp_path):
    path = tmp_path / "driver.ibs"
    path.write_text(DRIVER.replace("{rising}", rc_table()))
    return path


def test_ramps_per_corner_with_scaling_letters_and_na(driver):
    model = read_ibis(driver)["DRV_FAST"]
    assert model.model_type == "Output" and model.r_load_ohm == 50.0
    assert model.rise.dt_s == pytest.approx({"typ": 0.6e-9, "min": 0.8e-9, "max": 0.45e-9})
    assert model.rise.dv_v == pytest.approx({"typ": 1.98, "min": 1.8, "max": 2.16})
    assert model.fall.dt_s["max"] is None
    assert model.fall.corner("max") == ("typ", 1.98, 0.5e-9)  # NA: the typ value applies
    assert model.rise.corner("fastest") == pytest.approx(("max", 2.16, 0.45e-9))
    assert read_ibis(driver)["RX"].rise is None


def test_waveform_table_ten_ninety_is_tau_ln9(driver):
    # Source: single-pole step response, t(10-90) = tau ln 9 (any circuit text); the min column is the same
    # edge scaled (same time), the max column NA throughout
    times = read_ibis(driver)["DRV_FAST"].waveforms[0].time_1090_s()
    assert times["typ"] == pytest.approx(TAU * np.log(9), rel=2e-3)
    assert times["min"] == pytest.approx(TAU * np.log(9), rel=2e-3)
    assert times["max"] is None


BOARD = """\
title = "IBIS edges"
limit = "cispr32-class-b-radiated-3m"

[[clock]]
name = "clk"
frequency = "50 MHz"
swing = "3.3 V"
{edges}
load = {{ capacitance = "10 pF" }}
paths = ["loop"]

[[path]]
name = "loop"
kind = "loop"
area = "1 cm2"
"""


def board_with(tmp_path, edges: str):
    path = tmp_path / "board.toml"
    path.write_text(BOARD.format(edges=textwrap.dedent(edges)))
    return load_board(path).source("clk")


def test_a_ramp_becomes_the_boards_edge_convention(tmp_path, driver):
    # Source: a linear ramp crosses 10-90 % in 0.8 / 0.6 = 4/3 of its 20-80 % time (arithmetic of the ramp)
    ibis = board_with(tmp_path, 'rise_time = { ibis = "driver.ibs", model = "DRV_FAST", corner = "typ" }')
    assert ibis.wave.rise_s == pytest.approx(0.6e-9 / 0.6) and ibis.wave.fall_s == pytest.approx(0.5e-9 / 0.6)
    written = board_with(tmp_path, f'rise_time = "{0.6 * 4 / 3} ns"\nfall_time = "{0.5 * 4 / 3} ns"\nedge = "10-90"')
    n = np.arange(1, 60)
    np.testing.assert_allclose(np.abs(ibis.harmonics(n)["voltage"]), np.abs(written.harmonics(n)["voltage"]),
                               rtol=1e-9)
    fastest = board_with(tmp_path, 'rise_time = { ibis = "driver.ibs", model = "DRV_FAST" }')
    assert fastest.wave.rise_s == pytest.approx(0.45e-9 / 0.6)  # the conservative default: the fastest corner
    assert fastest.wave.fall_s == pytest.approx(0.5e-9 / 0.6)   # the falling ramp (its max column NA: typ)
    own_fall = board_with(tmp_path, 'rise_time = { ibis = "driver.ibs", corner = "min", model = "DRV_FAST" }\n'
                                    'fall_time = "2 ns"')
    assert own_fall.wave.rise_s == pytest.approx(0.8e-9 / 0.6) and own_fall.wave.fall_s == pytest.approx(2e-9 / 0.8)
    # a shaped edge takes the ramp's 20-80 % time: an RC edge's time constant is dt / ln 4
    rc = board_with(tmp_path, 'rise_time = { ibis = "driver.ibs", model = "DRV_FAST", corner = "typ" }\n'
                              'edge_shape = "rc"')
    assert rc.rise == pytest.approx(0.6e-9 / np.log(4))


@pytest.mark.parametrize("edges, key, words", [
    ('rise_time = { ibis = "driver.ibs" }', "clock[clk].rise_time.model", "holds 2 models"),
    ('rise_time = { ibis = "driver.ibs", model = "DRV_FAS" }', "clock[clk].rise_time.model",
     "did you mean 'DRV_FAST'"),
    ('rise_time = { ibis = "driver.ibs", model = "RX" }', "clock[clk].rise_time.model", "not an output"),
    ('rise_time = { ibis = "driver.ibs", model = "DRV_FAST", corner = "slow" }', "clock[clk].rise_time.corner",
     "allowed: fastest, typ, min, max"),
    ('rise_time = { ibis = "missing.ibs", model = "DRV_FAST" }', "clock[clk].rise_time.ibis", "cannot read"),
    ('rise_time = { file = "driver.ibs" }', "clock[clk].rise_time.file", "unknown key"),
])
def test_board_errors_name_the_key(tmp_path, driver, edges, key, words):
    with pytest.raises(BoardError) as caught:
        board_with(tmp_path, edges)
    assert caught.value.key == key and words in str(caught.value)


def test_unreadable_lines_are_named(tmp_path):
    path = tmp_path / "bad.ibs"
    path.write_text(DRIVER.replace("1.80/800p", "1.80-800p").replace("{rising}", ""))
    with pytest.raises(IbisError, match=r"bad.ibs line 17: \[Ramp\] dV/dt_r min: expected dV/dt"):
        read_ibis(path)
    path.write_text("[Model] X\nModel_type Output\n")
    with pytest.raises(IbisError, match="not an IBIS file"):
        read_ibis(path)
    path.write_text("[IBIS Ver] 5.0\n[Comment Char] #_char\n# | is data now\n[Model] X\nModel_type Output\n"
                    "[ramp]\ndv/dt_r 1/1n NA NA  # a comment\ndV/dt_f 1/2n NA NA\n[END]\n")
    assert read_ibis(path)["X"].fall.dt_s["typ"] == pytest.approx(2e-9)


def test_waveform_command_on_an_ibis_file(driver):
    runner = CliRunner()
    result = runner.invoke(app, ["waveform", str(driver), "--model", "DRV_FAST", "--json", "-"])
    assert result.exit_code == 0, result.output
    s = json.loads(result.stdout)
    assert s["schema"] == "emispec.ibis/1" and s["model"] == "DRV_FAST"
    typ = next(r for r in s["ramps"] if r["edge"] == "rising" and r["corner"] == "typ")
    assert typ["time_1090_s"] == pytest.approx(0.8e-9) and typ["slew_v_per_s"] == pytest.approx(1.98 / 0.6e-9)
    assert s["waveforms"][0]["time_1090_s"]["typ"] == pytest.approx(TAU * np.log(9), rel=2e-3)
    result = runner.invoke(app, ["waveform", str(driver)])  # one model with a ramp: no --model needed
    assert result.exit_code == 0 and "0.6667" in result.stdout and "Rising Waveform" in result.stdout
    result = runner.invoke(app, ["waveform", str(driver), "--model", "NOPE"])
    assert result.exit_code == 2 and len(result.stderr.strip().splitlines()) == 1 and "NOPE" in result.stderr
