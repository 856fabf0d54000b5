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


def test_plan_names_the_demo_cables_resonances():
    # Source: NEC-2 (necpp): the demo's load-cell cable (1.5 m, 4 mm diameter, a monopole over the ground plane)
    # has its first series resonance where NEC-2's reactance crosses zero; the plan names it within 3 %
    import nec_reference as nec

    from emispec.plan import cable_resonances, resonance_lines

    est = estimate(load_board(DEMO))
    found = cable_resonances(est)["sensor_cable"]
    f = np.arange(40e6, 56e6, 0.5e6)
    x = nec.input_impedance(f, 1.5, 2e-3).imag
    i = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))[0]
    first = f[i] - x[i] * (f[i + 1] - f[i]) / (x[i + 1] - x[i])
    assert abs(found[0] / first - 1) < 0.03
    line = next(line for line in resonance_lines(est) if "sensor_cable" in line)
    assert f"{found[0] / 1e6:.4g}" in line and "1.5 m" in line
    # a harmonic within 3 % of a resonance is marked in its note: a 1.1 m cable resonates near 200 and 600 MHz
    from emispec.parameters import Template

    shorter = estimate(Template.load(DEMO).board({"path[sensor_cable].length": "1.1 m"}))
    found = cable_resonances(shorter)["sensor_cable"]
    marked = {row["harmonic"] for row in plan_rows(shorter, everything=True)
              if row["source"] == "sdram_clk" and "sensor_cable's series resonance" in row["note"]}
    expected = {n for n in range(1, 11) if np.min(np.abs(n * 100e6 / found - 1)) <= 0.03}
    assert marked == expected and {2, 6} <= marked


def test_cable_view_draws_what_the_rows_say():
    from emispec.pipeline import cable_view

    est = estimate(load_board(DEMO))
    view = cable_view(est, "sensor_cable")
    f, level = view.harmonics["sdram_clk"]
    rows = est.rows
    mine = rows.source == "sdram_clk"
    np.testing.assert_array_equal(level, rows.cable_current_dbua["sensor_cable"][mine])
    # the response peaks at the resonances: the current per volt is a local maximum there
    peak = np.interp(view.resonances_hz[:3], view.frequency_hz, view.current_dbua_per_v)
    beside = np.interp(view.resonances_hz[:3] * 1.1, view.frequency_hz, view.current_dbua_per_v)
    assert np.all(peak > beside + 3)
