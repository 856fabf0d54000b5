"""The column specification drives every table and the JSON rows."""

import csv
import io

import pytest

from conftest import REPO
from emispec import columns
from emispec.board import load_board
from emispec.pipeline import estimate
from emispec.report import csv_text, result_dict
from emispec.rows import Verdict, Worst


@pytest.fixture(scope="module")
def demo():
    return estimate(load_board(REPO / "samples" / "beehive-gateway.toml"))


def test_json_rows_have_exactly_the_json_columns(demo):
    names = [c.name for c in columns.columns_for(demo, "json")]
    for row in result_dict(demo)["rows"][:10]:
        assert list(row) == names


def test_a_new_column_is_one_entry(demo, monkeypatch):
    extra = columns.Column("twice_n", "2n", "int", lambda est: 2 * est.rows.harmonic)
    monkeypatch.setattr(columns, "COLUMNS", columns.COLUMNS + (extra,))
    row = result_dict(demo)["rows"][0]
    assert row["twice_n"] == 2 * row["harmonic"]
    table = list(csv.reader(io.StringIO("\n".join(l for l in csv_text(demo).splitlines() if not l.startswith("#")))))
    assert table[0][-1] == "twice_n" and int(table[1][-1]) == 2 * int(table[1][1])


def test_the_verdict_is_a_value_put_into_words_once():
    worst = Worst("clk", 3, 150e6, -1.25, "QP")
    assert columns.verdict_text(Verdict("fails", 10, 2, 3, 6.0, worst)) == (
        "FAILS: 2 of 10 harmonics over the limit, 3 within the 6 dB guard band; worst -1.2 dB at 150 MHz (clk n=3, QP)")
    assert columns.verdict_text(Verdict("no-data", 0, 0, 0, 6.0, None)).startswith("NO DATA")
    assert columns.verdict_text(Verdict("meets", 4, 0, 0, 3.0, Worst("c", 1, 3e7, 9.0, "QP"))).startswith(
        "MEETS THE GUARD BAND: all 4")
