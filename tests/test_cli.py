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
    assert names == ["estimate-rail-io_3v3.png", "estimate-spectrum.png", "estimate-swept.csv", "estimate-swept.png",
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
