import json
import subprocess
import sys

import pytest

from conftest import REPO
from emispec import cli
from emispec.cli import app
from emispec.report import CAUTION

DEMO = REPO / "samples" / "beehive-gateway.toml"


def test_estimate_prints_table_verdict_and_caution(runner):
    result = runner.invoke(app, ["estimate", str(DEMO), "--rows", "5"])
    assert result.exit_code == 0, result.output
    out = " ".join(result.stdout.split())
    assert "FAILS" in out and "over the limit" in out
    assert "accredited lab" in out
    assert "worst 5 of" in out


def test_json_to_stdout_follows_the_schema(runner):
    result = runner.invoke(app, ["estimate", str(DEMO), "--json", "-"])
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    assert data["schema"] == "emispec.result/1"
    assert set(data) >= {"schema", "emispec_version", "board", "limit", "guard_band_db", "rows", "summary"}
    assert data["limit"]["unit"] == "dBuV/m" and data["limit"]["detectors"] == ["QP", "AV", "PK"]
    row = data["rows"][0]
    assert set(row) >= {"source", "harmonic", "frequency_hz", "line_dbuv", "line_dbua", "paths", "readings",
                        "limits", "margin_db", "worst_margin_db", "flags"}
    assert row["worst_margin_db"] == data["summary"]["worst"]["worst_margin_db"]
    assert "over-limit" in row["flags"]
    assert row["margin_db"]["QP"] == pytest.approx(row["limits"]["QP"] - row["readings"]["QP"], abs=0.002)
    assert "NaN" not in result.stdout and "Infinity" not in result.stdout


def test_out_writes_all_artifacts(runner, tmp_path):
    out = tmp_path / "out"
    result = runner.invoke(app, ["estimate", str(DEMO), "--out", str(out)])
    assert result.exit_code == 0, result.output
    names = sorted(p.name for p in out.iterdir())
    assert names == ["estimate-cable-sensor_cable.png", "estimate-rail-io_3v3.png", "estimate-spectrum.png",
                     "estimate-swept.csv", "estimate-swept.png",
                     "estimate.csv", "estimate.json", "estimate.md"]
    swept = (out / "estimate-swept.csv").read_text().splitlines()
    assert swept[0].startswith("frequency_mhz,reading_pk_dbuv_m,reading_qp_dbuv_m,reading_av_dbuv_m")
    assert (out / "estimate-spectrum.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert CAUTION in (out / "estimate.md").read_text() and CAUTION in (out / "estimate.json").read_text()


def test_unwritable_out_leaves_nothing_and_exits_2(runner, tmp_path):
    blocker = tmp_path / "file.txt"
    blocker.write_text("keep me")
    result = runner.invoke(app, ["estimate", str(DEMO), "--out", str(blocker / "sub")])
    assert result.exit_code == 2
    assert "cannot write" in result.stderr and "\n" not in result.stderr.strip()
    assert blocker.read_text() == "keep me"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["file.txt"]


def test_internal_error_exits_1_without_traceback(runner, monkeypatch):
    def boom(board, budget):
        raise RuntimeError("kaput")

    monkeypatch.setattr(cli, "_estimate", boom)
    result = runner.invoke(app, ["estimate", str(DEMO)])
    assert result.exit_code == 1
    assert "internal error" in result.stderr and "Traceback" not in result.stderr


def test_limits_lists_every_bundled_limit(runner):
    result = runner.invoke(app, ["limits"])
    assert result.exit_code == 0
    for name in ("cispr32-class-b-radiated-10m", "fcc15-class-b-radiated-3m", "cispr32-class-a-conducted-mains"):
        assert name in result.stdout
    shown = runner.invoke(app, ["limits", "fcc15-class-b-radiated-3m"])
    assert shown.exit_code == 0 and "15.109(a)" in shown.stdout


def test_limits_unknown_name_exits_2(runner):
    result = runner.invoke(app, ["limits", "no-such-limit"])
    assert result.exit_code == 2


def test_real_subprocess_help_names_the_caution():
    done = subprocess.run([sys.executable, "-m", "emispec", "estimate", "--help"], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 0
    top = subprocess.run([sys.executable, "-m", "emispec", "--help"], capture_output=True, text=True, check=False)
    assert "accredited lab" in " ".join(top.stdout.split())


def test_real_subprocess_bad_input_exits_2(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('limit = "cispr32-class-b-radiated-10m"\n[[clock]]\nname = "c"\nfrequency = "1 ns"\n')
    done = subprocess.run([sys.executable, "-m", "emispec", "estimate", str(bad)], capture_output=True, text=True,
                          check=False)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "clock[c].frequency" in done.stderr


def test_rails_command_lists_parts_and_draws_the_plot(runner, tmp_path):
    result = runner.invoke(app, ["rails", str(DEMO), "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    text = " ".join(result.stdout.split())
    # Source: f = 1 / (2 pi sqrt(L C)) for 100 nF with 0.6 + 0.6 nH plus the spreading inductance of 6 mm in
    # planes 0.2 mm apart, (mu0 / pi) h ln(2 s / D) = 0.295 nH (Johnson, EDN 2003): 13.02 MHz
    assert "rail io_3v3" in text and "anti-resonance" in text and "13.02 MHz" in text
    assert "escape more than the guard band allows" in text
    assert (tmp_path / "rail-io_3v3.png").read_bytes()[:4] == b"\x89PNG"


def test_rails_command_without_rails_exits_2(runner, write_board):
    from conftest import BASE_BOARD

    result = runner.invoke(app, ["rails", str(write_board(BASE_BOARD))])
    assert result.exit_code == 2 and "no [[rail]]" in result.stderr


def test_vary_solve_and_plan_commands(runner, tmp_path):
    result = runner.invoke(app, ["vary", str(DEMO), "--set", "clock[sdram_clk].rise_time=0.3 ns,0.45 ns,0.7 ns,1 ns",
                                 "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert "4 variants" in result.stdout and (tmp_path / "variants.csv").exists()
    assert (tmp_path / "variants.png").read_bytes()[:4] == b"\x89PNG"
    result = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range", "0.2 ns..4 ns"])
    assert result.exit_code == 0, result.output
    text = " ".join(result.stdout.split())
    assert "clock[sdram_clk].rise_time =" in text and "binding: sdram_clk" in text
    result = runner.invoke(app, ["plan", str(DEMO), "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    assert (tmp_path / "testplan.csv").read_text().count("\n") > 3 and (tmp_path / "testplan.md").exists()


@pytest.mark.parametrize("args", [
    ["vary", str(DEMO), "--set", "clock[nope].rise_time=1 ns"],
    ["vary", str(DEMO), "--set", "clock[sdram_clk].rise_time=1 MHz"],
    ["vary", str(DEMO), "--set", "no-equals-sign"],
    ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range", "1 ns..5 MHz"],
    ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range", "1 ns"],
])
def test_exploration_input_errors_exit_2(runner, args):
    result = runner.invoke(app, args)
    assert result.exit_code == 2, result.output
    assert "\n" not in result.stderr.strip() and "Traceback" not in result.stderr


def test_help_has_readable_placeholders_and_examples_that_work(runner):
    for command in ("estimate", "vary", "solve", "plan", "report", "rails", "limits"):
        text = runner.invoke(app, [command, "--help"]).stdout
        assert "<bool>" not in text and "<str>" not in text and "{board}" not in text.lower(), command
    vary_help = " ".join(runner.invoke(app, ["vary", "--help"], env={"COLUMNS": "200"}).stdout.replace("│", " ").split())
    assert "clock[sdram_clk].rise_time=0.5 ns,1 ns" in vary_help and "--zip " in vary_help
    example = runner.invoke(app, ["vary", str(DEMO), "--set", "clock[sdram_clk].rise_time=0.5 ns,1 ns"])
    assert example.exit_code == 0, example.output


def test_the_table_fits_80_columns(tmp_path):
    done = subprocess.run([sys.executable, "-m", "emispec", "estimate", str(DEMO), "--rows", "30"],
                          capture_output=True, text=True, check=False, env={**__import__("os").environ,
                                                                            "COLUMNS": "80"})
    assert done.returncode == 0, done.stderr
    lines = [line.rstrip() for line in done.stdout.splitlines()]
    assert max(len(line) for line in lines) <= 80
    start = next(k for k, line in enumerate(lines) if line.strip().startswith("source"))
    body = lines[start + 2:lines.index("", start + 2)]
    rows = [line for line in body if line.strip() and not line.startswith("  " * 20)]
    assert len(body) <= 2 * len(rows) and len(rows) == 30  # no row wraps into three lines


def test_solve_orders_its_range_and_cuts_it_to_valid_boards(runner):
    ordered = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range",
                                  "0.2 ns..4 ns"])
    reversed_ = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range",
                                    "4 ns..0.2 ns"])
    assert ordered.exit_code == reversed_.exit_code == 0 and ordered.stdout == reversed_.stdout
    assert "larger values pass" in ordered.stdout
    cut = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[mcu_clk].rise_time", "--range", "0.5 ns..40 ns"])
    text = " ".join(cut.stdout.split())
    assert cut.exit_code == 0 and "the range was cut to 0.5..16.67 ns" in text and "does not fit" in text


def test_solve_says_why_no_value_helps(runner):
    result = runner.invoke(app, ["solve", str(DEMO), "--value", "path[sensor_cable].ratio", "--range",
                                 "-90 dB..-60 dB"])
    text = " ".join(result.stdout.split())
    assert result.exit_code == 0
    assert "no value in -90 dB..-60 dB keeps the guard band" in text
    assert "eth_ref n=2 on ethernet_cable binds, and path[sensor_cable].ratio does not change it" in text
    assert "crossings at none" not in text and "values pass" not in text and "1 crossings" not in text


@pytest.mark.parametrize("span", ["0.2 ns...4 ns", "0.2 ns.4 ns", "..4 ns"])
def test_a_range_needs_two_dots(runner, span):
    result = runner.invoke(app, ["solve", str(DEMO), "--value", "clock[sdram_clk].rise_time", "--range", span])
    assert result.exit_code == 2 and "two dots" in result.stderr


def test_vary_refuses_a_key_given_twice_and_sets_booleans(runner, tmp_path):
    twice = runner.invoke(app, ["vary", str(DEMO), "--set", "clock[sdram_clk].rise_time=1 ns", "--set",
                                "clock[sdram_clk].rise_time=2 ns"])
    assert twice.exit_code == 2 and "given twice" in twice.stderr
    flags = runner.invoke(app, ["vary", str(DEMO), "--set", "path[eth_loop].ground_reflection=true,false",
                                "--out", str(tmp_path)])
    assert flags.exit_code == 0, flags.output
    import pandas

    table = pandas.read_csv(tmp_path / "variants.csv")
    assert list(table["eth_loop.ground_reflection"]) == [True, False]
    assert {"worst_margin_db", "worst_at", "worst_margin_qp_db"} <= set(table.columns)


def test_rails_without_out_writes_nothing(runner, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    result = runner.invoke(app, ["rails", str(DEMO)])
    assert result.exit_code == 0 and list(tmp_path.iterdir()) == []


def test_plan_of_a_passing_board_lists_the_closest(runner, write_board):
    from conftest import BASE_BOARD

    result = runner.invoke(app, ["plan", str(write_board(BASE_BOARD.replace('area = "1 cm2"', 'area = "0.001 cm2"'))),
                                 "--top", "4"])
    text = " ".join(result.stdout.split())
    assert result.exit_code == 0 and "4 closest frequencies; all keep the guard band" in text


def test_every_csv_reads_in_pandas_with_no_options(runner, tmp_path):
    # pandas as a real CSV client: header first, numbers as numbers, empty cells as missing values
    import pandas

    assert runner.invoke(app, ["estimate", str(DEMO), "--out", str(tmp_path)]).exit_code == 0
    assert runner.invoke(app, ["plan", str(DEMO), "--out", str(tmp_path)]).exit_code == 0
    rows = pandas.read_csv(tmp_path / "estimate.csv")
    assert rows["frequency_mhz"].dtype == float and rows["reading_qp_dbuv_m"].dtype == float
    assert rows["rail_dbua"].isna().any() and not rows["worst_margin_db"].isna().all()
    swept = pandas.read_csv(tmp_path / "estimate-swept.csv")
    assert list(swept.columns[:4]) == ["frequency_mhz", "reading_pk_dbuv_m", "reading_qp_dbuv_m", "reading_av_dbuv_m"]
    plan = pandas.read_csv(tmp_path / "testplan.csv")
    assert {"frequency_mhz", "rbw_khz", "expected_dbuv_m", "margin_db", "path"} <= set(plan.columns)
    assert plan["margin_db"].dtype == float and (plan["frequency_mhz"] == plan["frequency_mhz"].round(3)).all()


def test_spread_mode_center_is_accepted(write_board):
    from conftest import BASE_BOARD

    from emispec.board import load_board

    board = load_board(write_board(BASE_BOARD.replace(
        'swing = "3.3 V"', 'swing = "3.3 V"\nspread = { mode = "center", deviation = "0.5 %", rate = "30 kHz" }')))
    assert board.clocks[0].spread.mode == "centre"
