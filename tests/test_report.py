import json
import math

import numpy as np
import pytest

from conftest import REPO
from emispec import report
from emispec.board import load_board
from emispec.pipeline import estimate
from emispec.report import csv_text, markdown_text, result_dict


@pytest.fixture(scope="module")
def demo():
    return estimate(load_board(REPO / "samples" / "beehive-gateway.toml"))


def test_json_rows_match_the_columns(demo):
    data = result_dict(demo)
    assert len(data["rows"]) == len(demo.rows) == data["summary"]["rows"]
    for row in data["rows"][:20]:
        f0 = {"mcu_clk": 24e6, "mcu_core": 24e6, "sdram_clk": 100e6, "eth_ref": 25e6, "lcd_pclk": 9e6}
        assert row["frequency_hz"] == pytest.approx(row["harmonic"] * f0[row["source"]])
        assert set(row["paths"]) == set(demo.source_paths[row["source"]])
        worst = min(row["margin_db"].values())
        assert row["worst_margin_db"] == pytest.approx(worst, abs=1e-9)
    json.dumps(data, allow_nan=False)  # no NaN or infinity anywhere


def test_nulls_are_null_not_nan(write_board):
    text = (REPO / "samples" / "beehive-gateway.toml").read_text().replace('guard_band = "6 dB"',
                                                                           'guard_band = "6 dB"\nharmonics = "exact"')
    exact = estimate(load_board(write_board(text)))
    data = result_dict(exact)
    nulls = [row for row in data["rows"] if "spectral-null" in row["flags"]]
    assert nulls, "in exact mode the demo's 50 % clocks have even-harmonic nulls"
    for row in nulls:
        assert row["line_dbuv"] is None and row["worst_margin_db"] is None
        assert all(v is None for v in row["readings"].values())
    assert data["summary"]["over_limit"] == exact.over_limit
    assert not [row for row in result_dict(estimate(load_board(REPO / "samples" / "beehive-gateway.toml")))["rows"]
                if "spectral-null" in row["flags"]], "the default envelope has no nulls"


def test_csv_carries_every_row_for_spreadsheets_and_markdown_a_summary(demo):
    text = csv_text(demo)
    lines = text.splitlines()
    assert not lines[0].startswith("#") and len(lines) == len(demo.rows) + 1  # header first, no comment lines
    header = lines[0].split(",")
    assert {"frequency_mhz", "reading_qp_dbuv_m", "limit_qp_dbuv_m", "margin_qp_db", "worst_margin_db",
            "dominant_path", "line_dbuv", "decoupling_impedance_ohm"} <= set(header)
    cells = [cell.lower() for line in lines[1:] for cell in line.split(",")]
    assert "" in cells and not {"null", "nan", "inf", "none"} & set(cells)
    frequency = header.index("frequency_mhz")
    assert all(len(line.split(",")[frequency].split(".")[1]) == 3 for line in lines[1:])  # MHz to 1 kHz
    md = markdown_text(demo, count=10)
    assert report.CAUTION in md and md.count("\n| ") == 11  # header and 10 rows
    assert "| source | n | MHz | det | read | limit | margin | path | flags |" in md


def test_markdown_escapes_user_text(demo):
    from dataclasses import replace

    evil = replace(demo, board=replace(demo.board, title="<b>x</b> | y"))
    md = markdown_text(evil)
    assert "<b>" not in md and "\\|" in md


def test_summary_worst_is_first_row(demo):
    data = result_dict(demo)
    first = data["rows"][0]
    assert data["summary"]["worst"]["frequency_hz"] == first["frequency_hz"]
    assert math.isclose(data["summary"]["worst"]["worst_margin_db"], np.nanmin(demo.rows.worst_margin_db), abs_tol=1e-3)


def test_spread_rows_carry_band_and_reduction(demo):
    data = result_dict(demo)
    spread_rows = [row for row in data["rows"] if row["source"] == "sdram_clk"]
    assert spread_rows and all(row["band_hz"] is not None for row in spread_rows)
    lo, hi = spread_rows[0]["band_hz"]
    assert hi == pytest.approx(spread_rows[0]["frequency_hz"]) and lo == pytest.approx(0.995 * hi)
    assert all(row["spread_reduction_db"]["QP"] is not None for row in spread_rows if row["readings"]["QP"])
    plain = [row for row in data["rows"] if row["source"] == "mcu_clk"]
    assert all(row["band_hz"] is None and row["spread_reduction_db"] is None for row in plain)


def test_rail_columns_and_summary(demo):
    data = result_dict(demo)
    rail = data["rails"][0]
    assert rail["name"] == "io_3v3" and rail["target_impedance_ohm"] == pytest.approx(3.3 * 0.05 / 0.5)
    caps = [p for p in rail["parts"] if p["kind"] == "capacitor"]
    # Source: f = 1 / (2 pi sqrt(L C)) for 100 nF with 0.6 + 0.6 nH and the spreading inductance of 6 mm in planes
    # 0.2 mm apart through 0.3 mm vias, (mu0 / pi) h ln(2 s / D) (H. Johnson, EDN 2003)
    spreading = 4e-7 * 0.2e-3 * np.log(2 * 6 / 0.3)
    assert caps[0]["srf_hz"] == pytest.approx(1 / (2 * np.pi * np.sqrt((1.2e-9 + spreading) * 100e-9)))
    core = [row for row in data["rows"] if row["source"] == "mcu_core" and row["readings"]["QP"] is not None]
    assert core and all(row["decoupling_impedance_ohm"] > 0 and row["suppression_db"] > 0 for row in core)
    assert any("decoupling-insufficient" in row["flags"] for row in core)
    plain = [row for row in data["rows"] if row["source"] == "lcd_pclk"]
    assert all(row["decoupling_impedance_ohm"] is None for row in plain)
