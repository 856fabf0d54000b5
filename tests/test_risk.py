"""The chance of failing: Monte Carlo over the tolerances, its fast path, its statistics and its command."""

import concurrent.futures
import json
import math
import pickle

import numpy as np
import pytest
from scipy import optimize, stats

from conftest import REPO
from emispec import risk
from emispec.cli import app
from emispec.parameters import Template
from emispec.pipeline import estimate
from emispec.risk import Model, clopper_pearson, rank_shares, study
from emispec.tolerances import draw, read_tolerances

DEMO = REPO / "samples" / "beehive-gateway.toml"

CABLE_BOARD = """\
title = "one cable"
guard_band = "6 dB"
limit = "cispr32-class-b-radiated-3m"

[[clock]]
name = "clk"
frequency = "25 MHz"
rise_time = "2 ns"
swing = "3.3 V"
load = {{ resistance = "50 ohm" }}
paths = ["harness"]

[[path]]
name = "harness"
kind = "cable"
length = "1.5 m"
ratio = "{ratio} dB"

[[tolerance]]
key = "path[harness].ratio"
distribution = "normal"
sigma = "6 dB"
truncate = 10
"""


def test_a_normal_cable_ratio_fails_as_often_as_the_normal_distribution_says(write_board):
    # Source: scipy.stats.norm.  A cable's common-mode ratio scales every reading of the board by the same draw
    # r, so the worst margin is m0 - (r - r0) and P(fail) = P(r - r0 > m0) = 1 - Phi(m0 / sigma); the Monte
    # Carlo share must fall inside the 95 % binomial interval (scipy.stats.binom) around that value
    probe = Template.load(write_board(CABLE_BOARD.format(ratio=-80)))
    m_probe = float(np.nanmin(estimate(probe.nominal).rows.worst_margin_db))
    r0 = -80 - m_probe + 3.0  # a nominal margin of 3 dB
    template = Template.load(write_board(CABLE_BOARD.format(ratio=f"{r0:.4f}")))
    tolerances = read_tolerances(template)
    m0 = float(np.nanmin(estimate(template.nominal).rows.worst_margin_db))
    n = 4000
    result = study(template, tolerances, n, seed=3)
    # each sample, exactly: the draw moves the worst margin dB for dB
    assert result.worst == pytest.approx(m0 - (result.values[:, 0] - r0), abs=0.01)
    p = stats.norm.sf(m0 / 6.0)
    lo, hi = stats.binom.interval(0.95, n, p)
    assert lo / n <= result.summary()["p_fail"] <= hi / n
    assert result.summary()["drivers"][0]["key"] == "path[harness].ratio"
    assert result.summary()["drivers"][0]["share"] == pytest.approx(1.0)


RISE_BOARD = """\
title = "one edge"
guard_band = "6 dB"

[limit]
measurement = "radiated"
distance = "3 m"
unit = "dBuV/m"
lines = {{ QP = [["30 MHz", {limit}], ["1 GHz", {limit}]] }}

[[clock]]
name = "clk"
frequency = "20 MHz"
duty_cycle = "50 %"
rise_time = "1 ns"
edge = "0-100"
swing = "1 V"
paths = ["probe"]

[[path]]
name = "probe"
kind = "transfer"
input = "voltage"
gain = [["30 MHz", -100.0], ["1 GHz", -39.0848]]   # +40 dB/decade

[[tolerance]]
key = "clock[clk].rise_time"
distribution = "uniform"
low = "0.5 ns"
high = "2 ns"
"""


def test_a_uniform_rise_time_fails_on_the_share_of_its_range_the_envelope_says(write_board):
    # Source: Paul, Introduction to Electromagnetic Compatibility, 2nd ed., sec. 3.2: the bound of the
    # trapezoid's harmonics, 2 A min(D, 1/(pi n)) min(1, T / (pi n t_r)), written out here.  Through a gain
    # rising 40 dB/decade every harmonic above the second corner reads the same, falling 20 dB per decade of
    # t_r, so the board fails for t_r below one value t*; a uniform t_r fails with probability
    # (t* - low) / (high - low), and the Monte Carlo share must fall in the 95 % binomial interval around it
    limit, f0, period = 40.0, 20e6, 50e-9
    n = np.arange(2, 51)  # 40 MHz .. 1 GHz

    def worst_reading(tr):
        level = 2 * 1.0 * np.minimum(0.5, 1 / (np.pi * n)) * np.minimum(1, period / (np.pi * n * tr)) / math.sqrt(2)
        gain = -100.0 + 60.9152 * np.log10(n * f0 / 30e6) / np.log10(1e9 / 30e6)  # the table, linear in log f
        return float(np.max(20 * np.log10(level / 1e-6) + gain))

    reading_at = {tr: worst_reading(tr) for tr in (0.5e-9, 2e-9)}
    limit = round(0.5 * sum(reading_at.values()), 2)  # so that t* lies inside the range
    template = Template.load(write_board(RISE_BOARD.format(limit=limit)))
    t_star = optimize.brentq(lambda tr: worst_reading(tr) - limit, 0.5e-9, 2e-9, xtol=1e-15)
    p = (t_star - 0.5e-9) / 1.5e-9
    samples = 3000
    result = study(template, read_tolerances(template), samples, seed=11)
    lo, hi = stats.binom.interval(0.95, samples, p)
    assert lo / samples <= result.summary()["p_fail"] <= hi / samples, (p, result.summary()["p_fail"])
    # and sample by sample: the worst margin is the limit less the envelope's worst reading
    tr = result.values[:5, 0]
    assert result.worst[:5] == pytest.approx([limit - worst_reading(t) for t in tr], abs=0.01)


def test_the_exact_interval_is_scipys():
    # Source: scipy.stats.binomtest(...).proportion_ci(method="exact"), the Clopper-Pearson interval
    for k, n in [(0, 50), (1, 50), (17, 200), (200, 200), (3, 10000), (5000, 10000)]:
        lo, hi = clopper_pearson([k], n)
        ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
        assert lo[0] == pytest.approx(ci.low, abs=1e-12) and hi[0] == pytest.approx(ci.high, abs=1e-12)


def test_rank_correlations_are_spearmans():
    # Source: scipy.stats.spearmanr
    rng = np.random.default_rng(5)
    x = rng.normal(size=(400, 3))
    y = np.stack([2 * x[:, 0] + 0.3 * x[:, 1], np.exp(x[:, 2]) + rng.normal(size=400)], axis=1)
    y[::7, 1] = np.nan  # a row that some samples do not have
    rho, share = rank_shares(x, y)
    ok = np.isfinite(y[:, 1])
    for j in range(3):
        assert rho[j, 0] == pytest.approx(stats.spearmanr(x[:, j], y[:, 0]).statistic, abs=1e-12)
        assert rho[j, 1] == pytest.approx(stats.spearmanr(x[ok, j], y[ok, 1]).statistic, abs=1e-12)
    assert share.sum(axis=0) == pytest.approx([1.0, 1.0])
    assert share[0, 0] > 0.9 and share[2, 1] > 0.5


def _full_estimates(template, tolerances, values):
    keys, per_sample = [t.key for t in tolerances], []
    for v in values:
        rows = estimate(template.board_at(dict(zip(keys, v)))).rows
        per_sample.append({rows.key(i): float(m) for i, m in enumerate(rows.worst_margin_db)})
    order = list(dict.fromkeys(k for s in per_sample for k in s))
    return order, np.array([[s.get(k, np.nan) for k in order] for s in per_sample])


def _compare_fast_and_full(template, samples: int, seed: int):
    tolerances = read_tolerances(template)
    model = Model(template, tolerances)
    values = draw(tolerances, samples, seed)
    keys, fast = model.margins(values)
    full_keys, full = _full_estimates(template, tolerances, values)
    index = {k: i for i, k in enumerate(keys)}
    assert set(full_keys) <= set(keys)
    picked = fast[:, [index[k] for k in full_keys]]
    assert np.array_equal(np.isnan(picked), np.isnan(full))
    return model, float(np.nanmax(np.abs(picked - full)))


def test_the_fast_path_equals_full_estimates_of_the_same_samples(write_board):
    # Source: emispec's own full estimate of each sample's board, the reference the fast path must reproduce
    # (what the fast path promises: within 0.01 dB).  The demo has a spread clock, a shared reference, a rail with an
    # escape path and a group; the fall time makes a term that two tolerances change together.
    text = DEMO.read_text(encoding="utf-8") + """
[[tolerance]]
key = "clock[sdram_clk].fall_time"
distribution = "uniform"
low = "0.4 ns"
high = "0.7 ns"

[[tolerance]]
key = "clock[mcu_clk].swing"
distribution = "normal"
sigma = "5 %"
"""
    model, worst = _compare_fast_and_full(Template.load(write_board(text)), 12, seed=2)
    assert not model.full and model.joint
    assert worst <= 0.01


def test_the_fast_path_equals_full_estimates_for_an_antenna_cable(write_board):
    # Source: emispec's own full estimate of each sample's board: the demo's antenna cable's ratio scales it, through
    # the fast path within 0.01 dB
    base = DEMO.read_text(encoding="utf-8").replace('ratio = "-66 dB"',
                                                    'ratio = "-66 dB"\nferrite = { inductance = "0.5 uH" }')
    text = base + """
[[tolerance]]
key = "path[sensor_cable].ratio"
distribution = "normal"
sigma = "6 dB"
"""
    model, worst = _compare_fast_and_full(Template.load(write_board(text)), 10, seed=4)
    assert not model.full and worst <= 0.01
    # its wire and its ferrite move its resonances: across the spread clock's band the gain then tilts (one factor
    # per harmonic, the fast path's, missed full estimates by 0.011 dB for the ferrite and 0.1 dB for the length),
    # so those samples are full estimates
    for key, tolerance in (("length", 'distribution = "uniform"\nlow = "1.2 m"\nhigh = "1.8 m"'),
                           ("ferrite.inductance", 'distribution = "normal"\nsigma = "20 %"')):
        text = base + f'\n[[tolerance]]\nkey = "path[sensor_cable].{key}"\n{tolerance}\n'
        template = Template.load(write_board(text, "wire.toml"))
        assert Model(template, read_tolerances(template)).full, key


MOVING_BOARD = """\
title = "a spread that varies"
guard_band = "6 dB"
limit = "cispr32-class-b-radiated-3m"

[[clock]]
name = "cpu"
frequency = "100 MHz"
rise_time = "0.8 ns"
swing = "3.3 V"
load = { resistance = "33 ohm", capacitance = "5 pF" }
spread = { mode = "down", deviation = "0.5 %", rate = "32 kHz", profile = "triangle" }
paths = ["loop"]

[[clock]]
name = "bus"
frequency = "33.2 MHz"
rise_time = "1.5 ns"
swing = "3.3 V"
load = { capacitance = "10 pF" }
paths = ["loop"]

[[path]]
name = "loop"
kind = "loop"
area = "0.2 cm2"

[[tolerance]]
key = "clock[cpu].spread.deviation"
distribution = "uniform"
low = "0.3 %"
high = "0.7 %"

[[tolerance]]
key = "clock[bus].rise_time"
distribution = "uniform"
low = "1 ns"
high = "2 ns"
"""


def test_lines_that_move_make_each_sample_a_full_estimate(write_board):
    # Source: estimates of the same samples, one by one.  The bus clock's n = 3 (99.6 MHz) sits in the cpu clock's
    # spread band, so the shared rows change with both tolerances; the model's samples share a memo of readings
    # and read only the margins, and must give the same numbers.
    model, worst = _compare_fast_and_full(Template.load(write_board(MOVING_BOARD)), 8, seed=4)
    assert model.full and model.slow
    assert worst <= 1e-9


def test_a_spread_that_moves_on_the_demo_agrees_with_full_estimates(write_board, monkeypatch):
    # Source: estimates of the same samples, one by one.  The demo's sources share a reference (they add in
    # amplitude there) and the SDRAM clock's band reaches other clocks' rows; a sample reads only the rows its
    # moving lines reach (or reached on the nominal board) and keeps the nominal margins of the others
    text = DEMO.read_text(encoding="utf-8") + """
[[tolerance]]
key = "clock[sdram_clk].spread.deviation"
distribution = "uniform"
low = "0.3 %"
high = "0.7 %"
"""
    rows_read = []
    real = risk.read_rows
    monkeypatch.setattr(risk, "read_rows", lambda lines, refs, tunings, *a, **k: rows_read.append(
        sum(t["lo_hz"].size for t in tunings)) or real(lines, refs, tunings, *a, **k))
    # the template travels as it does to a worker (a pickle, which leaves its memo of entries behind)
    model, worst = _compare_fast_and_full(pickle.loads(pickle.dumps(Template.load(write_board(text)))), 6, seed=3)
    assert model.full
    assert worst <= 1e-9
    assert len(rows_read) == 7 and all(0 < r < rows_read[0] for r in rows_read[1:])  # the nominal, then 6


def test_a_tolerance_that_moves_the_span_makes_every_sample_a_full_estimate(write_board):
    # Source: CISPR 32:2015, Table 1 (recalled from memory, as in the bundled limit): a highest internal
    # frequency above 108 MHz takes radiated measurements to 2 GHz, so a clock frequency across 108 MHz
    # changes the span.
    text = MOVING_BOARD.split("[[tolerance]]")[0] + """
[[tolerance]]
key = "clock[cpu].frequency"
distribution = "uniform"
low = "100 MHz"
high = "120 MHz"
"""
    template = Template.load(write_board(text))
    tolerances = read_tolerances(template)
    model = Model(template, tolerances)
    assert model.full
    key = tolerances[0].key
    assert estimate(template.board_at({key: 100e6})).span_hz[1] < estimate(template.board_at({key: 120e6})).span_hz[1]
    values = np.array([[104e6], [115e6]])
    keys, margins = model.margins(values)
    for value, margin in zip(values[:, 0], margins):
        rows = estimate(template.board_at({key: value})).rows
        expected = {rows.key(i): m for i, m in enumerate(rows.worst_margin_db)}
        got = {k: m for k, m in zip(keys, margin) if np.isfinite(m)}
        assert got.keys() == {k for k, m in expected.items() if np.isfinite(m)}
        assert [got[k] for k in got] == pytest.approx([expected[k] for k in got], abs=1e-4)


def test_the_same_seed_gives_the_same_numbers_wherever_the_chunks_run():
    template = Template.load(DEMO)
    tolerances = read_tolerances(template)
    model = Model(template, tolerances)
    here = study(template, tolerances, 1100, seed=9, model=model)
    with concurrent.futures.ProcessPoolExecutor(2) as pool:
        pooled = study(template, tolerances, 1100, seed=9, executor=pool, model=model)
    assert here.keys == pooled.keys
    assert np.array_equal(here.margins, pooled.margins, equal_nan=True)
    assert not np.array_equal(here.margins, study(template, tolerances, 1100, seed=10, model=model).margins,
                              equal_nan=True)


def test_a_local_dask_cluster_gives_the_same_numbers():
    distributed = pytest.importorskip("distributed")
    from emispec.ensemble import dask_client

    template = Template.load(DEMO)
    tolerances = read_tolerances(template)
    model = Model(template, tolerances)
    here = study(template, tolerances, 1100, seed=9, model=model)
    with dask_client(workers=2) as client:
        assert isinstance(client, distributed.Client)
        remote = study(template, tolerances, 1100, seed=9, executor=client, model=model)
    assert np.array_equal(here.margins, remote.margins, equal_nan=True)


def test_risk_command_json_and_files(runner, tmp_path):
    pd = pytest.importorskip("pandas")
    out = tmp_path / "out"
    result = runner.invoke(app, ["risk", str(DEMO), "--samples", "600", "--seed", "5", "--json",
                                 str(tmp_path / "r.json"), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "P(fail)" in result.output and "accredited" in result.output
    text = (tmp_path / "r.json").read_text(encoding="utf-8")
    assert "NaN" not in text
    data = json.loads(text)
    assert data["schema"] == "emispec.risk/1" and data["samples"] == 600 and data["seed"] == 5
    assert len(data["tolerances"]) == 6 and data["tolerances"][0]["key"] == "clock[sdram_clk].rise_time"
    lo, hi = data["board_p_fail_ci"]
    assert lo <= data["board_p_fail"] <= hi and 0 <= data["board_p_guard"] <= 1
    assert data["worst_margin_db"]["p05"] <= data["worst_margin_db"]["p50"] <= data["worst_margin_db"]["p95"]
    assert {d["key"] for d in data["drivers"]} >= {"path[ethernet_cable].ratio"}
    row = data["rows"][0]
    assert set(row) >= {"source", "harmonic", "frequency_hz", "nominal_margin_db", "margin_db", "p_fail",
                        "p_fail_ci", "p_guard", "drivers"}
    assert [r["p_fail"] for r in data["rows"]] == sorted((r["p_fail"] for r in data["rows"]), reverse=True)
    # the board fails whenever some row does: P(fail) of the board is at least that of any row
    assert data["board_p_fail"] >= data["rows"][0]["p_fail"]
    assert {p.name for p in out.iterdir()} == {"risk.json", "risk.csv", "risk-samples.csv", "risk-margin.png",
                                               "risk-drivers.png"}
    rows = pd.read_csv(out / "risk.csv")
    assert len(rows) == len(data["rows"]) and rows["p_fail"].iloc[0] == pytest.approx(data["rows"][0]["p_fail"])
    samples = pd.read_csv(out / "risk-samples.csv")
    assert len(samples) == 600 and "clock[sdram_clk].rise_time_s" in samples.columns
    fails = (samples["worst_margin_db"] < 0).mean()
    assert fails == pytest.approx(data["board_p_fail"], abs=1e-6)  # the JSON rounds to 6 digits


def test_risk_without_tolerances_or_dask_says_what_to_do(runner, write_board, monkeypatch):
    from conftest import BASE_BOARD

    result = runner.invoke(app, ["risk", str(write_board(BASE_BOARD))])
    assert result.exit_code == 2 and "no [[tolerance]]" in result.output
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)  # as if Dask were not installed
    result = runner.invoke(app, ["risk", str(DEMO), "--samples", "10", "--workers", "2"])
    assert result.exit_code == 2 and "pip install 'emispec[cluster]'" in result.output
    result = runner.invoke(app, ["risk", str(DEMO), "--workers", "2", "--scheduler", "tcp://127.0.0.1:1"])
    assert result.exit_code == 2 and "give one" in result.output


def test_the_report_has_a_risk_section_when_the_board_has_tolerances(runner, tmp_path):
    page = tmp_path / "r.html"
    result = runner.invoke(app, ["report", str(DEMO), "--out", str(page), "--samples", "200"])
    assert result.exit_code == 0, result.output
    text = page.read_text(encoding="utf-8")
    assert "chance of failing (200 samples" in text and "P(fail)" in text


def test_risk_help_shows_the_board_file_and_extra_names(runner):
    # rich markup would swallow "[[tolerance]]" and "[cluster]" unless they are escaped
    text = " ".join(runner.invoke(app, ["risk", "--help"], env={"COLUMNS": "200"}).stdout.replace("│", " ").split())
    assert "[[tolerance]] entries" in text and "pip install 'emispec[cluster]'" in text
