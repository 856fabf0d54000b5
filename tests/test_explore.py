"""Variants, solving and the test plan."""

import numpy as np
import pytest

from conftest import REPO
from emispec.board import board_from_mapping, load_board, read_board_data
from emispec.explore import solve, vary
from emispec.parameters import Template, scope_of, set_value
from emispec.pipeline import estimate

DEMO = REPO / "samples" / "beehive-gateway.toml"


@pytest.fixture(scope="module")
def demo_data():
    return read_board_data(DEMO)


def test_set_value_by_name_and_index(demo_data):
    data, file, base, _ = demo_data
    changed = set_value(data, "clock[sdram_clk].rise_time", "1 ns", file)
    assert [c for c in changed["clock"] if c["name"] == "sdram_clk"][0]["rise_time"] == "1 ns"
    assert [c for c in data["clock"] if c["name"] == "sdram_clk"][0]["rise_time"] != "1 ns"  # the original stays
    changed = set_value(data, "rail[io_3v3].part[0].count", 8, file)
    assert changed["rail"][0]["part"][0]["count"] == 8
    assert scope_of("clock[sdram_clk].rise_time") == "sdram_clk" and scope_of("path[dc_cable].ratio") is None


def test_variants_reproduce_single_estimates_exactly(demo_data, write_board):
    values = ["0.3 ns", "1 ns"]
    variants = vary(Template.load(DEMO), {"clock[sdram_clk].rise_time": values, "path[sdram_loop].area": ["0.2 cm2"]})
    assert len(variants) == 2
    text = DEMO.read_text()
    for variant, value in zip(variants, values):
        board_text = text.replace('rise_time = "0.45 ns"', f'rise_time = "{value}"').replace(
            'area = "0.28 cm2"', 'area = "0.2 cm2"')
        path = write_board(board_text, name="variant.toml")
        single = estimate(load_board(path))
        for det in single.board.limit.detectors:
            np.testing.assert_array_equal(variant.estimate.rows.readings[det], single.rows.readings[det])
        np.testing.assert_array_equal(variant.estimate.rows.worst_margin_db, single.rows.worst_margin_db)


def test_zip_and_cross(demo_data):
    template = Template.load(DEMO)
    changes = {"clock[sdram_clk].rise_time": ["0.3 ns", "1 ns"], "path[sdram_loop].area": ["0.2 cm2", "0.4 cm2"]}
    assert len(vary(template, changes, "cross")) == 4
    zipped = vary(template, changes, "zip")
    assert [v.settings for v in zipped] == [(("clock[sdram_clk].rise_time", "0.3 ns"), ("path[sdram_loop].area", "0.2 cm2")),
                                            (("clock[sdram_clk].rise_time", "1 ns"), ("path[sdram_loop].area", "0.4 cm2"))]


def judged_worst(est, scope):
    mask = np.ones(len(est.rows), bool) if scope is None else est.rows.source == scope
    worst = est.rows.worst_margin_db[mask]
    return np.nanmin(worst)


SMALL_BOARD = """\
title = "solver check"
guard_band = "6 dB"
limit = "cispr32-class-b-radiated-3m"

[[rail]]
name = "r"
voltage = "1.8 V"
supply_path = { inductance = "15 nH" }
[[rail.part]]
kind = "capacitor"
capacitance = "100 nF"
esr = "20 mohm"
esl = "0.5 nH"
mounting_inductance = "0.5 nH"
count = 1

[[clock]]
name = "clk"
frequency = "40 MHz"
rise_time = "1 ns"
swing = "1.8 V"
load = { resistance = "50 ohm" }
spread = { mode = "down", deviation = "0.5 %", rate = "31 kHz" }
paths = ["loop"]

[[current]]
name = "core"
frequency = "50 MHz"
peak = "0.1 A"
width = "2 ns"
rail = "r"
paths = ["cable"]

[[path]]
name = "loop"
kind = "loop"
area = "1 cm2"

[[path]]
name = "cable"
kind = "cable"
length = "1 m"
drive = "escape"
ratio = "-40 dB"
"""


@pytest.mark.parametrize(
    "key, low, high, scope",
    [
        ("clock[clk].rise_time", "0.2 ns", "6 ns", "clk"),              # fastest edge that passes
        ("clock[clk].spread.deviation", "0.05 %", "5 %", "clk"),         # least spread that passes
        ("path[loop].area", "0.01 cm2", "10 cm2", "clk"),                # largest loop that passes
        ("path[cable].ratio", "-90 dB", "-10 dB", "core"),               # largest common-mode ratio that passes
    ],
)
def test_solution_just_keeps_the_guard_band(write_board, key, low, high, scope):
    path = write_board(SMALL_BOARD)
    data, file, base, _ = read_board_data(path)
    solution = solve(Template.load(path), key, low, high, scope=scope)
    assert solution.value is not None, (solution.note, solution.scanned)
    value = f"{solution.value!r} {solution.unit}".strip()
    board = board_from_mapping(set_value(data, key, value, file), file, base)
    assert judged_worst(estimate(board), scope) - board.guard_band_db == pytest.approx(0.0, abs=0.1)
    assert solution.binding


def test_capacitor_count_solves_on_integers(write_board):
    path = write_board(SMALL_BOARD)
    data, file, base, _ = read_board_data(path)
    solution = solve(Template.load(path), "rail[r].part[0].count", "1", "60", scope="core")
    assert solution.value is not None and float(solution.value).is_integer(), (solution.note, solution.scanned)
    n = int(solution.value)

    def worst(count):
        est = estimate(board_from_mapping(set_value(data, "rail[r].part[0].count", count, file), file, base))
        return judged_worst(est, "core") - est.board.guard_band_db

    assert worst(n) >= 0 and (n == 1 or worst(n - 1) < 0)


NULL_BOARD = """\
title = "one harmonic"
harmonics = "exact"
guard_band = "6 dB"
[limit]
measurement = "radiated"
distance = "3 m"
unit = "dBuV/m"
source = "invented for the test"
lines = { QP = [["240 MHz", 20.0], ["260 MHz", 20.0]] }

[[clock]]
name = "c"
frequency = "50 MHz"
duty_cycle = "30 %"
rise_time = "1 ns"
edge = "0-100"
swing = "3.3 V"
load = { resistance = "50 ohm" }
paths = ["loop"]

[[path]]
name = "loop"
kind = "loop"
area = "1 cm2"
"""


def test_non_monotone_rise_time_is_detected(write_board):
    # Source: Paul 2006 sec. 3.2: the 5th harmonic of a 50 MHz trapezoid vanishes at tr = T/5 = 4 ns, so its
    # level is not monotone in the rise time
    solution = solve(Template.load(write_board(NULL_BOARD)), "clock[c].rise_time", "0.5 ns", "6 ns", points=25)
    assert not solution.monotone
    assert "not monotone" in solution.note
    assert len(solution.crossings) >= 2
