"""Malformed board files: each gives exit 2 and one line naming the file and the key."""

import pytest

from conftest import BASE_BOARD
from emispec.board import BoardError, load_board
from emispec.cli import app


def replace(old, new):
    assert old in BASE_BOARD
    return BASE_BOARD.replace(old, new)


MALFORMED = {
    "rise in MHz": (replace('rise_time = "1 ns"', 'rise_time = "1.2 MHz"'), "clock[clk].rise_time"),
    "negative rise": (replace('rise_time = "1 ns"', 'rise_time = "-1 ns"'), "clock[clk].rise_time"),
    "edges do not fit": (replace('rise_time = "1 ns"', 'rise_time = "9 ns"'), "clock[clk].rise_time"),
    "duty over 1": (replace('rise_time = "1 ns"', 'rise_time = "1 ns"\nduty_cycle = 1.5'), "clock[clk].duty_cycle"),
    "duty 100 %": (replace('rise_time = "1 ns"', 'rise_time = "1 ns"\nduty_cycle = "100 %"'), "clock[clk].duty_cycle"),
    "missing frequency": (replace('frequency = "50 MHz"\n', ""), "clock[clk].frequency"),
    "zero frequency": (replace('"50 MHz"', '"0 Hz"'), "clock[clk].frequency"),
    "unknown clock key": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nrisetime = "1 ns"'), "clock[clk].risetime"),
    "unknown edge": (replace('rise_time = "1 ns"', 'rise_time = "1 ns"\nedge = "5-95"'), "clock[clk].edge"),
    "unknown path": (replace('paths = ["loop1"]', 'paths = ["loop2"]'), "clock[clk].paths"),
    "no paths": (replace('paths = ["loop1"]', "paths = []"), "clock[clk].paths"),
    "duplicate clock": (BASE_BOARD + '\n[[clock]]\nname = "clk"\nfrequency = "1 MHz"\nrise_time = "1 ns"\n'
                        'swing = "1 V"\npaths = ["loop1"]\nload = { resistance = "50 ohm" }\n', "clock[clk].name"),
    "duplicate path": (BASE_BOARD + '\n[[path]]\nname = "loop1"\nkind = "loop"\narea = "1 cm2"\n', "path[loop1].name"),
    "nan swing": (replace('swing = "3.3 V"', "swing = nan"), "clock[clk].swing"),
    "inf area": (replace('area = "1 cm2"', "area = inf"), "path[loop1].area"),
    "area as length": (replace('area = "1 cm2"', 'area = "1 cm"'), "path[loop1].area"),
    "unknown path kind": (replace('kind = "loop"', 'kind = "slot"'), "path[loop1].kind"),
    "unknown top key": ("colour = 3\n" + BASE_BOARD, "colour"),
    "unknown limit": (replace('"cispr32-class-b-radiated-10m"', '"cispr99"'), "limit"),
    "missing limit": (replace('limit = "cispr32-class-b-radiated-10m"\n', ""), "limit"),
    "negative guard band": (replace('"6 dB"', '"-3 dB"'), "guard_band"),
    "guard band in volts": (replace('"6 dB"', '"6 V"'), "guard_band"),
    "loop needs a load": (replace('load = { resistance = "50 ohm" }\n', ""), "clock[clk].load"),
    "empty load": (replace('load = { resistance = "50 ohm" }', "load = {}"), "clock[clk].load"),
    "load with inductance": (replace('{ resistance = "50 ohm" }', '{ inductance = "1 nH" }'),
                             "clock[clk].load.inductance"),
    "loop on a conducted limit": (replace("cispr32-class-b-radiated-10m", "fcc15-class-b-conducted"),
                                  "path[loop1].kind"),
    "rail without parts": (BASE_BOARD + '\n[[rail]]\nname = "r"\nvoltage = "3.3 V"\n', "rail[r].part"),
    "current without frequency": (BASE_BOARD + '\n[[current]]\nname = "x"\n', "current[x].clock"),
    "spread without rate": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "0.5 %" }'),
                            "clock[clk].spread.rate"),
    "spread too deep": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "12 %", '
                                'rate = "30 kHz" }'), "clock[clk].spread.deviation"),
    "spread too fast": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "1 %", '
                                'rate = "1 MHz" }'), "clock[clk].spread.rate"),
    "spread rate in ns": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "1 %", '
                                  'rate = "1 ns" }'), "clock[clk].spread.rate"),
    "spread profile": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "1 %", '
                               'rate = "30 kHz", profile = "kiss" }'), "clock[clk].spread.profile"),
    "spread mode": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "middle", deviation = "1 %", '
                            'rate = "30 kHz" }'), "clock[clk].spread.mode"),
    "spread unknown key": (replace('swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "1 %", '
                                   'rate = "30 kHz", shape = "sine" }'), "clock[clk].spread.shape"),
    "escape cable ratio above 0 dB": (BASE_BOARD + '\n[[path]]\nname = "h"\nkind = "cable"\nlength = "1 m"\n'
                                      'drive = "escape"\nratio = "6 dB"\n', "path[h].ratio"),
    "termination with a ratio drive": (BASE_BOARD + '\n[[path]]\nname = "h"\nkind = "cable"\nlength = "1 m"\n'
                                       'ratio = 0.1\ntermination = "100 ohm"\n', "path[h].termination"),
    "conducted path without a rail": (replace("cispr32-class-b-radiated-10m", "fcc15-class-b-conducted").replace(
        'kind = "loop"\narea = "1 cm2"', 'kind = "conducted"'), "clock[clk].rail"),
    "cable ratio above 1": (BASE_BOARD + '\n[[path]]\nname = "h"\nkind = "cable"\nlength = "1 m"\nratio = 3\n',
                            "path[h].ratio"),
    "cable ratio missing": (BASE_BOARD + '\n[[path]]\nname = "h"\nkind = "cable"\nlength = "1 m"\n', "path[h].ratio"),
    "transfer descending": (BASE_BOARD + '\n[[path]]\nname = "t"\nkind = "transfer"\ninput = "voltage"\n'
                            'gain = [["1 GHz", 0.0], ["1 MHz", 0.0]]\n', "path[t].gain"),
    "transfer bad input": (BASE_BOARD + '\n[[path]]\nname = "t"\nkind = "transfer"\ninput = "power"\n'
                           'gain = [["1 MHz", 0.0]]\n', "path[t].input"),
    "inline limit bad unit": (replace('limit = "cispr32-class-b-radiated-10m"', "").replace(
        "[[clock]]", '[limit]\nmeasurement = "radiated"\ndistance = "3 m"\nunit = "V"\n'
        'lines = { QP = [["30 MHz", 40.0], ["1 GHz", 40.0]] }\n\n[[clock]]', 1), "limit.unit"),
    "not toml": ("title = \n", "toml"),
    "clock without name": (replace('name = "clk"\n', ""), "clock[0].name"),
}


@pytest.mark.parametrize("case", sorted(MALFORMED))
def test_malformed_board_exits_2_naming_the_key(case, runner, write_board):
    text, key = MALFORMED[case]
    path = write_board(text)
    result = runner.invoke(app, ["estimate", str(path)])
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert "\n" not in message and "Traceback" not in message
    assert str(path) in message
    assert f"{key}" in message
    with pytest.raises(BoardError) as info:
        load_board(path)
    assert info.value.key == key


def test_did_you_mean_for_a_misspelt_key(write_board):
    path = write_board(BASE_BOARD.replace('swing = "3.3 V"', 'swing = "3.3 V"\nrise_tme = "1 ns"'))
    with pytest.raises(BoardError, match="did you mean 'rise_time'"):
        load_board(path)


def test_missing_board_file(runner, tmp_path):
    result = runner.invoke(app, ["estimate", str(tmp_path / "nope.toml")])
    assert result.exit_code == 2 and "nope.toml" in result.stderr


def test_inline_and_relative_limits(write_board, tmp_path):
    (tmp_path / "mine.toml").write_text(
        'measurement = "radiated"\ndistance = "3 m"\nunit = "dBuV/m"\nsource = "invented"\n'
        '[lines]\nPK = [["30 MHz", 50.0], ["1 GHz", 50.0]]\n', encoding="utf-8")
    relative = load_board(write_board(BASE_BOARD.replace('"cispr32-class-b-radiated-10m"', '"mine.toml"')))
    assert relative.limit.detectors == ("PK",) and relative.limit.distance_m == 3.0
    inline = load_board(write_board(BASE_BOARD.replace('limit = "cispr32-class-b-radiated-10m"', "").replace(
        "[[clock]]", '[limit]\nmeasurement = "radiated"\ndistance = "10 m"\nunit = "dBuV/m"\n'
        'lines = { QP = [["30 MHz", 40.0], ["1 GHz", 40.0]] }\n\n[[clock]]', 1)))
    assert inline.limit.lines["QP"].level(1e8)[0] == 40.0


def test_quantities_are_converted_to_si(write_board):
    board = load_board(write_board(BASE_BOARD.replace('rise_time = "1 ns"', 'rise_time = "1.2 ns"\nedge = "20-80"\n'
                                                                      'fall_time = "0.9 ns"\nduty_cycle = "45 %"')))
    wave = board.clocks[0].wave
    assert wave.rise_s == pytest.approx(1.2e-9 / 0.6) and wave.fall_s == pytest.approx(0.9e-9 / 0.6)
    assert wave.duty == pytest.approx(0.45) and board.guard_band_db == 6.0
    assert board.paths["loop1"].area_m2 == pytest.approx(1e-4)


def test_cable_ratio_in_db_or_linear(write_board):
    extra = '\n[[path]]\nname = "h"\nkind = "cable"\nlength = "1 m"\nratio = "-40 dB"\n' \
            '\n[[path]]\nname = "g"\nkind = "cable"\nlength = "1 m"\nratio = 0.01\n'
    board = load_board(write_board(BASE_BOARD + extra))
    assert board.paths["h"].ratio == pytest.approx(0.01) and board.paths["g"].ratio == pytest.approx(0.01)


def test_spread_is_read_in_si(write_board):
    board = load_board(write_board(BASE_BOARD.replace(
        'swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "centre", deviation = "0.5 %", rate = "31.5 kHz", '
        'profile = "sine" }\nreference = "xtal"')))
    spread = board.clocks[0].spread
    assert (spread.mode, spread.profile) == ("centre", "sine")
    assert spread.deviation == pytest.approx(0.005) and spread.rate_hz == pytest.approx(31.5e3)
    assert board.clocks[0].reference == "xtal"


RAIL_BASE = BASE_BOARD.replace('limit = "cispr32-class-b-radiated-10m"', 'limit = "cispr32-class-b-conducted-mains"').replace(
    'kind = "loop"\narea = "1 cm2"', 'kind = "conducted"').replace('paths = ["loop1"]', 'paths = ["loop1"]\nrail = "r"') + """
[[rail]]
name = "r"
voltage = "3.3 V"
supply_path = { inductance = "20 nH" }
[[rail.part]]
kind = "capacitor"
capacitance = "100 nF"
esr = "20 mohm"
esl = "1 nH"
count = 2

[[current]]
name = "x"
clock = "clk"
peak = "1 A"
width = "1 ns"
rail = "r"
paths = ["loop1"]
"""


def rail_case(old, new):
    assert old in RAIL_BASE, old
    return RAIL_BASE.replace(old, new)


RAIL_MALFORMED = {
    "part kind": (rail_case('kind = "capacitor"', 'kind = "inductor"'), "rail[r].part[0].kind"),
    "count zero": (rail_case("count = 2", "count = 0"), "rail[r].part[0].count"),
    "count fraction": (rail_case("count = 2", "count = 1.5"), "rail[r].part[0].count"),
    "capacitance in volts": (rail_case('capacitance = "100 nF"', 'capacitance = "100 V"'),
                             "rail[r].part[0].capacitance"),
    "plane permittivity": (rail_case('kind = "capacitor"\ncapacitance = "100 nF"\nesr = "20 mohm"\nesl = "1 nH"\n'
                                     'count = 2', 'kind = "plane"\narea = "10 cm2"\nseparation = "0.1 mm"\n'
                                     'permittivity = "high"'), "rail[r].part[0].permittivity"),
    "touchstone missing file": (rail_case('kind = "capacitor"\ncapacitance = "100 nF"\nesr = "20 mohm"\n'
                                          'esl = "1 nH"\ncount = 2', 'kind = "table"\nfile = "nope.csv"'),
                                "rail[r].part[0].file"),
    "two targets": (rail_case('voltage = "3.3 V"', 'voltage = "3.3 V"\ntarget_impedance = "0.1 ohm"\nripple = "5 %"\n'
                                                   'transient_current = "1 A"'), "rail[r].target_impedance"),
    "ripple without current": (rail_case('voltage = "3.3 V"', 'voltage = "3.3 V"\nripple = "5 %"'),
                               "rail[r].transient_current"),
    "unknown rail": (rail_case('rail = "r"\n', 'rail = "q"\n'), "clock[clk].rail"),
    "supply path key": (rail_case('supply_path = { inductance = "20 nH" }', 'supply_path = { length = "2 cm" }'),
                        "rail[r].supply_path.length"),
    "current too wide": (rail_case('width = "1 ns"', 'width = "30 ns"'), "current[x].width"),
    "current unknown clock": (rail_case('clock = "clk"', 'clock = "clock"'), "current[x].clock"),
    "current own duty while following": (rail_case('clock = "clk"', 'clock = "clk"\nduty_cycle = "40 %"'),
                                         "current[x].duty_cycle"),
    "current without rail": ("".join(RAIL_BASE.rsplit('rail = "r"\n', 1)), "current[x].rail"),
    "current peak in volts": (rail_case('peak = "1 A"', 'peak = "1 V"'), "current[x].peak"),
    "lisn variant": (rail_case('kind = "conducted"', 'kind = "conducted"\nlisn = "75uH"'), "path[loop1].lisn"),
    "current named like a clock": (rail_case('name = "x"', 'name = "clk"'), "current[clk].name"),
}


@pytest.mark.parametrize("case", sorted(RAIL_MALFORMED))
def test_malformed_rails_and_currents_exit_2_naming_the_key(case, runner, write_board):
    text, key = RAIL_MALFORMED[case]
    path = write_board(text)
    result = runner.invoke(app, ["estimate", str(path)])
    assert result.exit_code == 2, result.output
    assert key in result.stderr and "\n" not in result.stderr.strip()


def test_rail_base_is_valid(write_board):
    board = load_board(write_board(RAIL_BASE))
    assert board.rails["r"].parts[0][1].count == 2 and board.currents[0].frequency_hz == 50e6
    assert board.clocks[0].rail == "r"
