"""Ensembles on any executor: the same numbers in this process, on threads and on processes."""

import concurrent.futures
import multiprocessing

import numpy as np
import pytest

from conftest import REPO
from emispec.ensemble import Ensemble, evaluate, process_pool
from emispec.parameters import Template
from emispec.pipeline import Reuse, estimate

DEMO = REPO / "samples" / "beehive-gateway.toml"
MEMBERS = [{"clock[sdram_clk].rise_time": "0.3 ns"}, {"clock[sdram_clk].rise_time": "1 ns"},
           {"clock[eth_ref].frequency": "33 MHz"}, {"path[dc_cable].ratio": "-30 dB"}]


@pytest.fixture(scope="module")
def template():
    return Template.load(DEMO)


@pytest.fixture(scope="module")
def in_process(template):
    return evaluate(template, MEMBERS)


def same(a, b):
    for det in a.rows.readings:
        np.testing.assert_array_equal(a.rows.readings[det], b.rows.readings[det])
    np.testing.assert_array_equal(a.rows.worst_margin_db, b.rows.worst_margin_db)


def test_in_process_members_equal_single_estimates(template, in_process):
    # Reuse hands unchanged sources' lines from one member to the next; the numbers must not move
    for member, est in zip(MEMBERS, in_process):
        same(est, estimate(template.board(member)))


@pytest.mark.parametrize("kind", ["threads", "spawned processes", "pool"])
def test_executors_give_the_same_numbers(template, in_process, kind):
    if kind == "threads":
        executor = concurrent.futures.ThreadPoolExecutor(2)
    elif kind == "spawned processes":  # nothing relies on fork
        executor = concurrent.futures.ProcessPoolExecutor(2, mp_context=multiprocessing.get_context("spawn"))
    else:
        executor = process_pool(2)
    seen = []
    with executor:
        results = evaluate(template, MEMBERS, executor, progress=seen.append, chunk=1)
    assert sum(seen) == len(MEMBERS)
    for a, b in zip(in_process, results):
        same(a, b)


def test_rows_line_up_by_source_and_harmonic(template):
    result = Ensemble(template, MEMBERS).evaluate()
    keys = result.keys
    margins = result.matrix("worst_margin_db")
    assert margins.shape == (len(MEMBERS), len(keys))
    for m, est in enumerate(result.estimates):
        own = {est.rows.key(i): est.rows.worst_margin_db[i] for i in range(len(est.rows))}
        expected = np.array([own.get(k, np.nan) for k in keys])
        np.testing.assert_array_equal(margins[m], expected)
    # eth_ref at 33 MHz has other harmonics in the span than at 25 MHz: rows one member lacks are NaN there
    lacking = [k for k in keys if k[0] == "eth_ref" and k not in {result.estimates[2].rows.key(i)
                                                                   for i in range(len(result.estimates[2].rows))}]
    assert lacking and all(np.isnan(margins[2, keys.index(k)]) for k in lacking)
    assert result.matrix("readings", "QP").shape == margins.shape


def test_reuse_keeps_an_estimate_unchanged(template):
    reuse = Reuse()
    first = estimate(template.nominal, reuse)
    second = estimate(template.board({"clock[lcd_pclk].rise_time": "5 ns"}), reuse)
    same(first, estimate(template.nominal))
    same(second, estimate(template.board({"clock[lcd_pclk].rise_time": "5 ns"})))


def test_readings_remembered_for_a_spread_value_that_comes_back(template, monkeypatch):
    # A spread clock's deviation recurring while another key varies: its lines are found again and read
    # from memory at every tuning point seen before; the numbers must not move.
    from emispec import pipeline

    read = []
    real = pipeline.sweep_lines
    monkeypatch.setattr(pipeline, "sweep_lines", lambda lines, points, d: read.append(
        points.size if lines.modulated else 0) or real(lines, points, d))
    key, other = "clock[sdram_clk].spread.deviation", "clock[lcd_pclk].rise_time"
    members = [{key: "0.5 %", other: "3 ns"}, {key: "1 %", other: "5 ns"}, {key: "0.5 %", other: "5 ns"}]
    reuse = Reuse()
    estimates = []
    for member in members:
        read.clear()
        estimates.append(estimate(template.board(member), reuse))
        points = sum(read)
    assert points == 0  # the third board's spread lines: every point from memory (sweep_lines is not called)
    same(estimates[2], estimate(template.board(members[2])))
