"""The test plan."""

import numpy as np

from conftest import REPO
from emispec.board import load_board
from emispec.pipeline import estimate
from emispec.plan import plan_rows

DEMO = REPO / "samples" / "beehive-gateway.toml"


def test_plan_lists_rows_near_the_limit_worst_first():
    est = estimate(load_board(DEMO))
    plan = plan_rows(est)
    margins = [row["margin_db"] for row in plan]
    assert margins == sorted(margins) and max(margins) < est.board.guard_band_db
    assert len(plan) == est.over_limit + est.within_guard_band
    spread = [row for row in plan if row["source"] == "sdram_clk"]
    assert spread and all(row["band_hi_hz"] > row["band_lo_hz"] and "peak scan" in row["note"] for row in spread)
    # Source: CISPR 16-1-1 band C/D: 120 kHz
    assert all(row["rbw_hz"] == 120e3 and row["cispr_band"] == "C/D" for row in plan)
    assert len(plan_rows(est, everything=True)) == np.isfinite(est.rows.worst_margin_db).sum()
