"""The parameter layer: a board parsed once, variants built without files and checked only where they changed."""

import pickle

import numpy as np
import pytest

from conftest import REPO
from emispec import readers
from emispec.board import BoardError, load_board
from emispec.parameters import Template, set_value, split_key
from emispec.pipeline import estimate

DEMO = REPO / "samples" / "beehive-gateway.toml"

TABLE_BOARD = """\
title = "files read once"
limit = "line.csv"

[[rail]]
name = "r"
voltage = "1.8 V"
supply_path = { inductance = "10 nH" }
[[rail.part]]
kind = "table"
file = "cap.csv"

[[current]]
name = "core"
frequency = "40 MHz"
peak = "0.2 A"
width = "2 ns"
rail = "r"
paths = ["harness"]

[[path]]
name = "harness"
kind = "cable"
length = "1 m"
drive = "escape"
ratio = "-40 dB"
"""


@pytest.fixture
def table_board(write_board, tmp_path):
    (tmp_path / "line.csv").write_text("# measurement: radiated\n# distance: 3 m\n# unit: dBuV/m\n"
                                       "# detector: QP\n30e6,40\n1e9,47\n", encoding="utf-8")
    f = np.geomspace(1e5, 2e9, 60)
    z = 0.01 + 2j * np.pi * f * 1e-9 + 1 / (2j * np.pi * f * 100e-9)
    (tmp_path / "cap.csv").write_text("frequency_hz,resistance_ohm,reactance_ohm\n"
                                      + "".join(f"{a},{b.real},{b.imag}\n" for a, b in zip(f, z)), encoding="utf-8")
    return write_board(TABLE_BOARD)


def test_parameters_are_every_numeric_key_in_si():
    params = Template.load(DEMO).parameters()
    rise = params["clock[sdram_clk].rise_time"]
    assert rise.value == pytest.approx(0.45e-9) and rise.unit == "s" and rise.label == "sdram_clk.rise_time"
    assert params["clock[sdram_clk].spread.deviation"].value == pytest.approx(0.005)
    assert params["clock[sdram_clk].load.capacitance"].value == pytest.approx(10e-12)
    ratio = params["path[dc_cable].ratio"]
    assert ratio.value == pytest.approx(-45.0) and ratio.unit == "dB"  # common-mode ratios are dB parameters
    assert params["rail[io_3v3].part[0].count"].value == 4
    assert params["rail[io_3v3].supply_path.inductance"].value == pytest.approx(25e-9)
    assert params["guard_band"].value == 6.0
    assert "clock[sdram_clk].edge" not in params and "title" not in params  # not numeric


def test_a_parameter_vector_gives_exactly_the_board_file_with_that_value(write_board):
    template = Template.load(DEMO)
    board = template.board_at({"clock[sdram_clk].rise_time": 0.7e-9, "path[dc_cable].ratio": -30.0})
    text = DEMO.read_text().replace('rise_time = "0.45 ns"', 'rise_time = "0.7 ns"').replace(
        'ratio = "-45 dB"', 'ratio = "-30 dB"')
    again = load_board(write_board(text))
    a, b = estimate(board).rows, estimate(again).rows
    for det in a.readings:
        np.testing.assert_array_equal(a.readings[det], b.readings[det])


def test_only_changed_entries_are_parsed_again():
    template = Template.load(DEMO)
    nominal = template.nominal
    changed = template.board({"clock[sdram_clk].rise_time": "0.7 ns"})
    same = [s for s in changed.sources if s.name != "sdram_clk"]
    assert all(s is nominal.source(s.name) for s in same)
    assert changed.source("sdram_clk") is not nominal.source("sdram_clk")
    assert changed.rails["io_3v3"] is nominal.rails["io_3v3"] and changed.limit is nominal.limit
    assert changed.paths["eth_loop"] is nominal.paths["eth_loop"]
    # a path change re-checks the sources that might use it, not the rails
    moved = template.board({"path[eth_loop].area": "0.6 cm2"})
    assert moved.paths["eth_loop"].area_m2 == pytest.approx(0.6e-4) and moved.rails["io_3v3"] is nominal.rails["io_3v3"]


def test_variants_read_no_file(table_board, monkeypatch):
    template = Template.load(table_board)
    calls = []

    def refuse(*args, **kwargs):
        calls.append(args)
        raise AssertionError("a variant read a file")

    monkeypatch.setattr(readers, "read_text", refuse)
    board = template.board({"rail[r].part[0].count": 3, "limit": "line.csv", "current[core].peak": "0.3 A"})
    assert board.rails["r"].parts[0][1].count == 3 and calls == []
    assert estimate(board).rows.readings["QP"].size


def test_a_bad_value_gets_the_file_error_naming_the_key():
    template = Template.load(DEMO)
    with pytest.raises(BoardError) as info:
        template.board({"clock[sdram_clk].rise_time": "3 MHz"})
    assert info.value.key == "clock[sdram_clk].rise_time" and "time" in info.value.problem
    with pytest.raises(BoardError, match="no clock named"):
        template.board({"clock[nope].rise_time": "1 ns"})
    with pytest.raises(BoardError, match="not a key"):
        template.parameter("clock[sdram_clk].colour")


def test_set_value_copies_only_the_way_to_the_value():
    template = Template.load(DEMO)
    data = template.data
    changed = set_value(data, "clock[sdram_clk].spread.rate", "30 kHz")
    index = [c["name"] for c in data["clock"]].index("sdram_clk")
    assert data["clock"][index]["spread"]["rate"] == "32 kHz"  # the original stays
    assert changed["clock"][index]["spread"]["rate"] == "30 kHz"
    assert changed["clock"][index - 1] is data["clock"][index - 1] and changed["rail"] is data["rail"]
    assert split_key("rail[io_3v3].part[0].count") == [("rail", "io_3v3"), ("part", "0"), ("count", None)]


def test_a_template_pickles_without_its_memo_and_gives_the_same_boards():
    template = Template.load(DEMO)
    copy = pickle.loads(pickle.dumps(template))
    a = estimate(template.board({"clock[mcu_clk].rise_time": "1 ns"})).rows
    b = estimate(copy.board({"clock[mcu_clk].rise_time": "1 ns"})).rows
    np.testing.assert_array_equal(a.worst_margin_db, b.worst_margin_db)
