"""Hostile and broken input: one clear line and exit 2, or the right answer; never a crash, a hang or a lost file."""

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from conftest import BASE_BOARD, REPO
from emispec.board import load_board
from emispec.cli import app
from emispec.limits import LimitError, load_limit
from emispec.pipeline import estimate

DEMO = REPO / "samples" / "beehive-gateway.toml"


def replace(old, new, text=BASE_BOARD):
    assert old in text, old
    return text.replace(old, new)


def refused(runner, path, *words, args=("estimate",)):
    """The command exits 2 with one line on stderr that contains every word."""
    result = runner.invoke(app, [*args, str(path)] if args == ("estimate",) else [*args])
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert "\n" not in message and "Traceback" not in message, message
    for word in words:
        assert word in message, (word, message)
    return message


# ---------------------------------------------------------------- silent wrong answers


META = "# measurement: radiated\n# distance: 3 m\n# unit: dBuV/m\n"


def test_a_bom_and_data_on_the_first_line_keep_the_first_row(tmp_path):
    line = tmp_path / "line.csv"
    line.write_bytes(("\ufeff30e6,10\n1e9,10\n" + META).encode("utf-8"))
    limit = load_limit(str(line))
    assert limit.lines["QP"].frequency_hz[0] == 30e6  # not dropped as a "header"


@pytest.mark.parametrize("first, word", [("3O MHz,10", "line 1"), ("30 MHz;10", "line 1"), ("frequency,10", "line 1")])
def test_a_first_row_that_is_neither_header_nor_data_is_refused(tmp_path, first, word):
    line = tmp_path / "line.csv"
    line.write_text(f"{first}\n1e9,10\n" + META, encoding="utf-8")
    with pytest.raises(LimitError, match=word):
        load_limit(str(line))


def test_a_header_row_is_read_as_a_header(tmp_path):
    line = tmp_path / "line.csv"
    line.write_text(META + "Frequency (Hz),Level (dBuV/m)\n30e6,40\n1e9,47\n", encoding="utf-8")
    assert load_limit(str(line)).lines["QP"].level_db.tolist() == [40.0, 47.0]


@pytest.mark.parametrize("old, new, key", [
    ('swing = "3.3 V"', 'swing = "1e300 V"', "clock[clk].swing"),
    ('swing = "3.3 V"', 'swing = "1e-300 V"', "clock[clk].swing"),
    ('area = "1 cm2"', 'area = "1e30 m2"', "path[loop1].area"),
    ('load = { resistance = "50 ohm" }', 'load = { resistance = "1e300 ohm" }', "clock[clk].load.resistance"),
    ('"6 dB"', '"1e6 dB"', "guard_band"),
])
def test_implausible_values_are_refused_with_their_range(runner, write_board, old, new, key):
    refused(runner, write_board(replace(old, new)), key, "allowed")


def test_a_huge_transfer_gain_and_limit_level_are_refused(runner, write_board):
    text = BASE_BOARD + '\n[[path]]\nname = "t"\nkind = "transfer"\ninput = "voltage"\ngain = [["1 MHz", 1e6]]\n'
    refused(runner, write_board(text), "path[t].gain[0]", "-300 dB to 300 dB")
    inline = replace('limit = "cispr32-class-b-radiated-10m"', "").replace(
        "[[clock]]", '[limit]\nmeasurement = "radiated"\ndistance = "3 m"\nunit = "dBuV/m"\n'
        'lines = { QP = [["30 MHz", 1e300], ["1 GHz", 40.0]] }\n\n[[clock]]', 1)
    refused(runner, write_board(inline, "inline.toml"), "limit.lines.QP", "levels")


RAIL_PART = """
[[rail]]
name = "r"
voltage = "1 V"
[[rail.part]]
kind = "{kind}"
file = "part.{ext}"
"""


def rail_board(write_board, kind, ext):
    text = replace('paths = ["loop1"]', 'paths = ["loop1"]\nrail = "r"') + RAIL_PART.format(kind=kind, ext=ext)
    return write_board(text)


@pytest.mark.parametrize("s11", ["1.0 0.0", "-1.0 0.0"])
def test_a_touchstone_open_or_short_is_refused(runner, write_board, tmp_path, s11):
    pytest.importorskip("skrf")
    (tmp_path / "part.s1p").write_text(f"# Hz S RI R 50\n1e6 0.1 0.0\n2e6 {s11}\n", encoding="utf-8")
    refused(runner, rail_board(write_board, "touchstone", "s1p"), "rail[r].part[0].file", "ideal open or short")


@pytest.mark.parametrize("table, word", [
    ("frequency_hz,magnitude_ohm,phase_deg\n1e6,-1,0\n1e7,1,0\n", "magnitude_ohm must be > 0"),
    ("frequency_hz,magnitude_ohm,phase_deg\n1e6,1\n1e7,1,0\n", "line 2"),
    ("frequency_hz,magnitude_ohm,phase_deg\n1e6,1,inf\n1e7,1,0\n", "line 2"),
])
def test_bad_impedance_tables_are_refused(runner, write_board, tmp_path, table, word):
    (tmp_path / "part.csv").write_text(table, encoding="utf-8")
    message = refused(runner, rail_board(write_board, "table", "csv"), "rail[r].part[0].file", word)
    assert "Warning" not in message


def test_a_span_cut_below_its_start_and_a_span_without_harmonics_are_refused(runner, write_board):
    refused(runner, write_board(replace('guard_band = "6 dB"', 'guard_band = "6 dB"\nmax_frequency = "1 MHz"')),
            "max_frequency", "below the limit's span")
    refused(runner, write_board(replace('frequency = "50 MHz"', 'frequency = "2 GHz"').replace(
        'rise_time = "1 ns"', 'rise_time = "0.1 ns"'), "far.toml"), "limit", "nothing to estimate")


@pytest.mark.parametrize("name", ["io/3v3", "a.b", "x y", "$x^$", "clk]"])
def test_names_that_would_break_keys_or_file_names_are_refused(runner, write_board, name):
    refused(runner, write_board(replace('name = "clk"', f'name = "{name}"')), "clock[0].name", "letters, digits")


def test_control_characters_in_text_are_refused(runner, write_board):
    refused(runner, write_board(replace('title = "Test board"', 'title = "rev A\\n# not a heading"')), "title",
            "control characters")


# ---------------------------------------------------------------- bad input that used to crash


@pytest.mark.parametrize("key", ["frequency", "guard_band", "max_frequency"])
def test_a_400_digit_number_is_refused(runner, write_board, key):
    digits = "9" * 400
    text = {"frequency": replace('frequency = "50 MHz"', f"frequency = {digits}"),
            "guard_band": replace('guard_band = "6 dB"', f"guard_band = {digits}"),
            "max_frequency": replace('guard_band = "6 dB"', f'guard_band = "6 dB"\nmax_frequency = {digits}')}[key]
    refused(runner, write_board(text), key, "too large")
    result = runner.invoke(app, ["vary", str(write_board(BASE_BOARD, "b.toml")), "--set", f"guard_band={digits},6"])
    assert result.exit_code == 2 and "\n" not in result.stderr.strip()


def test_toml_nested_500_deep_is_refused(runner, write_board):
    refused(runner, write_board(BASE_BOARD + "deep = " + "[" * 500 + "]" * 500 + "\n"), "toml")


@pytest.mark.parametrize("what", ["limit toml", "limit csv", "table csv"])
def test_latin1_files_get_one_line(runner, write_board, tmp_path, what):
    latin = "# r\u00e9sum\u00e9\n".encode("latin-1")
    if what == "limit toml":
        (tmp_path / "mine.toml").write_bytes(latin + b'measurement = "radiated"\n')
        path = write_board(replace('"cispr32-class-b-radiated-10m"', '"mine.toml"'))
    elif what == "limit csv":
        (tmp_path / "mine.csv").write_bytes(latin + META.encode() + b"30e6,40\n1e9,40\n")
        path = write_board(replace('"cispr32-class-b-radiated-10m"', '"mine.csv"'))
    else:
        (tmp_path / "part.csv").write_bytes(latin + b"frequency_hz,magnitude_ohm,phase_deg\n1e6,1,0\n1e7,1,0\n")
        path = rail_board(write_board, "table", "csv")
    refused(runner, path, "not UTF-8")
    if what == "limit csv":
        result = runner.invoke(app, ["limits", str(tmp_path / "mine.csv")])
        assert result.exit_code == 2 and "not UTF-8" in result.stderr


def test_a_latin1_board_gets_one_line(runner, tmp_path):
    board = tmp_path / "latin.toml"
    board.write_bytes(BASE_BOARD.replace("Test board", "Pr\u00fcfling").encode("latin-1"))
    refused(runner, board, "not UTF-8")


@pytest.mark.parametrize("where", ["board", "table", "bead"])
def test_devices_and_fifos_are_not_read(runner, write_board, tmp_path, where):
    fifo = tmp_path / "fifo"
    os.mkfifo(fifo)
    for target, kind in (("/dev/zero", "character device"), (str(fifo), "pipe")):
        if where == "board":
            path = target
        elif where == "table":
            text = replace('paths = ["loop1"]', 'paths = ["loop1"]\nrail = "r"') + RAIL_PART.format(
                kind="table", ext="csv").replace('file = "part.csv"', f'file = "{target}"')
            path = write_board(text)
        else:
            text = replace('paths = ["loop1"]', 'paths = ["loop1"]\nrail = "r"') + (
                f'\n[[rail]]\nname = "r"\nvoltage = "1 V"\nsupply_path = {{ bead = {{ table = "{target}" }} }}\n'
                '[[rail.part]]\nkind = "regulator"\nresistance = "10 mohm"\n')
            path = write_board(text)
        start = time.monotonic()
        done = subprocess.run([sys.executable, "-m", "emispec", "estimate", str(path)], capture_output=True,
                              text=True, timeout=30, check=False)
        assert done.returncode == 2 and kind in done.stderr and time.monotonic() - start < 25, done.stderr
        assert done.stderr.count("\n") == 1


def test_dollar_signs_in_a_title_reach_the_plots_as_text(runner, write_board, tmp_path):
    path = write_board(replace('title = "Test board"', "title = 'Rev $A^$'"))
    result = runner.invoke(app, ["estimate", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    result = runner.invoke(app, ["report", str(path), "--out", str(tmp_path / "r.html")])
    assert result.exit_code == 0, result.output


@pytest.mark.parametrize("order", [("cispr32-class-b-radiated-3m", "cispr32-class-b-radiated-10m"),
                                   ("cispr32-class-b-radiated-10m", "cispr32-class-b-radiated-3m")])
def test_variants_with_different_detector_sets(runner, tmp_path, order):
    import pandas

    result = runner.invoke(app, ["vary", str(DEMO), "--set", f"limit={','.join(order)}", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    table = pandas.read_csv(tmp_path / "variants.csv")
    assert {"worst_margin_qp_db", "worst_margin_av_db", "worst_margin_pk_db"} <= set(table.columns)
    ten_m = list(order).index("cispr32-class-b-radiated-10m")
    assert np.isnan(table["worst_margin_av_db"][ten_m])  # the 10 m limit has no AV line


def test_a_range_of_extreme_numbers_gets_one_line(runner):
    result = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range",
                                 "1e-400 ns..1e400 ns"])
    assert result.exit_code == 2 and "finite" in result.stderr and "nan" not in result.stderr.lower()


# ---------------------------------------------------------------- runaway work


@pytest.mark.parametrize("old, new, key, hint", [
    ('frequency = "50 MHz"', 'frequency = "16"', "clock[clk].frequency", "did you mean 16 MHz?"),
    ('frequency = "50 MHz"', 'frequency = "1 kHz"', "clock[clk].frequency", "harmonics"),
    ('frequency = "50 MHz"', 'frequency = "1 Hz"', "clock[clk].frequency", "harmonics"),
])
def test_work_beyond_the_budget_is_refused_before_it_starts(runner, write_board, old, new, key, hint):
    text = replace(old, new).replace('rise_time = "1 ns"', 'rise_time = "1 ns"\nedge = "0-100"')
    start = time.monotonic()
    refused(runner, write_board(text), key, hint, "--budget")
    assert time.monotonic() - start < 5


def test_a_slow_spread_rate_is_refused_with_its_fix(runner, write_board):
    text = replace('frequency = "50 MHz"', 'frequency = "100 MHz"').replace(
        'swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "down", deviation = "0.5 %", rate = "100 Hz" }')
    start = time.monotonic()
    refused(runner, write_board(text), "clock[clk].spread.rate", "did you mean 100 kHz?")
    assert time.monotonic() - start < 5


def test_the_budget_can_be_raised(runner, write_board):
    text = replace('frequency = "50 MHz"', 'frequency = "100 kHz"').replace('rise_time = "1 ns"', 'rise_time = "1 us"')
    text = text.replace("cispr32-class-b-radiated-10m", "cispr32-class-b-radiated-3m")
    assert runner.invoke(app, ["estimate", str(write_board(text))]).exit_code == 0
    many = write_board(text.replace('"100 kHz"', '"20 kHz"').replace('"1 us"', '"2 us"'), "many.toml")
    assert runner.invoke(app, ["estimate", str(many)]).exit_code == 2
    assert runner.invoke(app, ["estimate", str(many), "--budget", "2"]).exit_code == 0


def test_too_many_variants_are_refused(runner):
    values = ",".join(f"{0.3 + 0.01 * k:.2f} ns" for k in range(100))
    result = runner.invoke(app, ["vary", str(DEMO), "--set", f"clock[sdram_clk].rise_time={values}", "--set",
                                 f"clock[mcu_clk].rise_time={values}"])
    assert result.exit_code == 2 and "10000 variants" in result.stderr and "--budget" in result.stderr


def test_pool_workers_end_with_their_parent():
    values = ",".join(f"{0.3 + 0.05 * k:.2f} ns" for k in range(16))
    parent = subprocess.Popen([sys.executable, "-m", "emispec", "vary", str(DEMO), "--set",
                               f"clock[sdram_clk].rise_time={values}", "--workers", "2"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    children = []
    for _ in range(100):  # wait for the pool to start
        time.sleep(0.1)
        done = subprocess.run(["pgrep", "-P", str(parent.pid)], capture_output=True, text=True, check=False)
        children = [int(p) for p in done.stdout.split()]
        if children:
            break
    assert children, "no worker started"
    os.kill(parent.pid, signal.SIGKILL)
    parent.wait()
    def running(pid):
        try:
            with open(f"/proc/{pid}/status", encoding="utf-8") as handle:
                return "zombie" not in handle.read().lower()
        except FileNotFoundError:
            return False

    deadline = time.monotonic() + 10
    alive = children
    while alive and time.monotonic() < deadline:
        time.sleep(0.2)
        alive = [p for p in alive if running(p)]
    assert not alive, f"workers {alive} outlived their parent"


# ---------------------------------------------------------------- output files and messages


def test_json_onto_a_full_device_is_an_error_and_keeps_the_device(runner):
    if not os.path.exists("/dev/full"):
        pytest.skip("no /dev/full")
    result = runner.invoke(app, ["estimate", str(DEMO), "--json", "/dev/full"])
    assert result.exit_code == 2 and "cannot write output" in result.stderr
    assert os.path.exists("/dev/full") and not os.path.isfile("/dev/full")


def test_a_folder_in_the_way_of_out_writes_nothing(runner, tmp_path):
    (tmp_path / "estimate.md").mkdir()
    (tmp_path / "estimate.json").write_text("keep me")
    result = runner.invoke(app, ["estimate", str(DEMO), "--out", str(tmp_path)])
    assert result.exit_code == 2 and "estimate.md: is a directory; nothing was written" in result.stderr
    assert (tmp_path / "estimate.json").read_text() == "keep me"


@pytest.mark.parametrize("what, word", [("dir", "directory"), ("fifo", "pipe"), ("devnull", "character device"),
                                        ("loop", "symbolic links")])
def test_a_limit_path_that_is_not_a_file_says_what_it_is(runner, write_board, tmp_path, what, word):
    target = tmp_path / "mine.toml"
    if what == "dir":
        target.mkdir()
    elif what == "fifo":
        os.mkfifo(target)
    elif what == "devnull":
        target = "/dev/null"
    else:
        os.symlink(tmp_path / "mine.toml", tmp_path / "mine.toml")
    refused(runner, write_board(replace('"cispr32-class-b-radiated-10m"', f'"{target}"')), "limit", word)


def test_a_bom_changes_nothing(tmp_path):
    board = tmp_path / "bom.toml"
    board.write_bytes("\ufeff".encode("utf-8") + BASE_BOARD.encode("utf-8"))
    assert load_board(board).title == "Test board"


@pytest.mark.parametrize("value", ["2500000000 cHz", "5 cV", "\uff15\uff10 MHz", "50\u0663 MHz"])
def test_prefixes_fit_their_unit_and_digits_are_ascii(runner, write_board, value):
    refused(runner, write_board(replace('frequency = "50 MHz"', f'frequency = "{value}"').replace(
        'swing = "3.3 V"', 'swing = "3.3 V"' if "V" not in value else f'swing = "{value}"')))


def test_centimetres_still_read(write_board):
    board = load_board(write_board(replace('area = "1 cm2"', 'area = "2 cm2"')))
    assert board.paths["loop1"].area_m2 == pytest.approx(2e-4)
    assert estimate(board).rows.readings["QP"].size


def test_a_variant_refused_in_a_pool_worker_is_a_board_error(runner):
    # an input error raised in a worker process must come back whole (exit 2, one line), not break the pool
    result = runner.invoke(app, ["vary", str(DEMO), "--set", "clock[sdram_clk].spread.rate=1 Hz,2 Hz,3 Hz,4 Hz",
                                 "--workers", "2"])
    assert result.exit_code == 2, result.output
    assert "clock[sdram_clk].spread.rate" in result.stderr and "kHz?" in result.stderr
    assert "internal error" not in result.output + result.stderr
