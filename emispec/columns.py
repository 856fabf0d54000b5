"""The column specification: one entry per column drives the terminal table, CSV, Markdown, HTML and JSON rows.

A :class:`Column` names a column, says how to get its values from an
estimate (an array over the rows, or a dict of arrays per detector), what kind
of value it is (which decides how each output formats it) and in which outputs
it appears.  Adding a column is one entry in :data:`COLUMNS`; the writers in
:mod:`emispec.report` and the command line only walk this list.

:func:`verdict_text` puts a :class:`emispec.rows.Verdict` into words.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .flags import short_code
from .receiver import band_names
from .rows import Verdict

__all__ = ["Column", "COLUMNS", "columns_for", "column_values", "json_row", "text_cells", "header_cells",
           "verdict_text", "detectors_of"]

ALL = frozenset({"json", "csv", "md", "html", "term"})


@dataclass(frozen=True)
class Column:
    """One output column.

    Parameters
    ----------
    name : str
        Key in a JSON row; the CSV name unless ``csv`` says otherwise (per
        detector: ``<csv>_<detector>``).
    header : str
        Heading in the terminal, HTML and Markdown tables (per detector:
        ``<detector> <header>``).
    kind : str
        ``text``, ``int``, ``hz`` (a frequency in Hz), ``mhz`` (shown in MHz),
        ``db`` (a level or margin), ``ohm``, ``flags``, or ``json`` (a value
        only JSON carries).
    values : callable
        ``values(est)`` -> array over the rows, or a dict detector -> array.
    outputs : frozenset
        Any of ``json``, ``csv``, ``md``, ``html``, ``term``.
    per_detector : bool
        The values are a dict detector -> array.
    when : callable
        ``when(est)``: the column exists for this estimate (rail columns only
        for boards with rails).
    json : callable
        ``json(est, values, i)``: the JSON value of row ``i`` where it is not
        simply the formatted value.
    """

    name: str
    header: str
    kind: str
    values: Callable
    outputs: frozenset = ALL
    per_detector: bool = False
    csv: str | None = None
    when: Callable = lambda est: True
    json: Callable | None = None


def detectors_of(est) -> tuple[str, ...]:
    return est.board.limit.detectors


def _rows(name):
    return lambda est: est.rows.columns[name]


def _per_detector(name):
    return lambda est: {d: est.rows.columns[name][d] for d in detectors_of(est)}


def _num(x, digits: int = 3):
    """A finite float rounded for output, or None."""
    if x is None:
        return None
    x = float(x)
    return round(x, digits) if math.isfinite(x) else None


def _worst(est, name):
    """The value of a per-detector column at each row's worst detector (the highest reading where none)."""
    r = est.rows
    dets = detectors_of(est)
    column = r.columns[name]
    out = np.full(len(r), np.nan)
    for d in dets:
        out = np.where(r.worst_detector == d, column[d], out)
    if name == "readings":
        none = np.array([w is None for w in r.worst_detector], bool)
        if none.any() and dets:
            out[none] = np.fmax.reduce([column[d][none] for d in dets])
    return out


def _worst_ssc(est):
    """What the spread buys at the worst detector; None (shown as a dash) for an unspread row."""
    values = _worst(est, "spread_reduction_db").astype(object)
    values[~est.rows.spread | np.array([w is None for w in est.rows.worst_detector], bool)] = None
    return values


def _has_rails(est) -> bool:
    return bool(est.board.rails)


def _json_band(est, values, i):
    r = est.rows
    return [float(r.band_lo_hz[i]), float(r.band_hi_hz[i])] if r.spread[i] else None


def _json_paths(est, values, i):
    r = est.rows
    return {p: {d: _num(r.path_readings[p][d][i]) for d in detectors_of(est)}
            for p in est.source_paths[str(r.source[i])]}


def _json_cables(est, values, i):
    """{cable path: dBuA} for the row's source's cables, None where it drives none."""
    r = est.rows
    mine = [p for p in est.source_paths[str(r.source[i])] if p in values]
    return {p: _num(values[p][i]) for p in mine} or None


def _json_limits(est, values, i):
    return {d: _num(v[i]) for d, v in values.items() if math.isfinite(v[i])}


def _json_margins(est, values, i):
    limits = est.rows.limits
    return {d: _num(v[i]) for d, v in values.items() if math.isfinite(limits[d][i])}


def _json_reduction(est, values, i):
    return {d: _num(v[i]) for d, v in values.items()} if est.rows.spread[i] else None


#: Every output column, in output order.
COLUMNS: tuple[Column, ...] = (
    Column("source", "source", "text", _rows("source")),
    Column("harmonic", "n", "int", _rows("harmonic")),
    Column("frequency_hz", "frequency Hz", "hz", _rows("frequency_hz"), frozenset({"json", "csv", "md"})),
    Column("frequency_mhz", "MHz", "mhz", _rows("frequency_hz"), frozenset({"html", "term"})),
    Column("cispr_band", "band", "text", lambda est: band_names(est.rows.frequency_hz), frozenset({"term"})),
    Column("band_lo_hz", "band from Hz", "hz", _rows("band_lo_hz"), frozenset({"csv", "md"})),
    Column("band_hi_hz", "band to Hz", "hz", _rows("band_hi_hz"), frozenset({"csv", "md"})),
    Column("harmonics", "level", "text", _rows("harmonics"), frozenset({"json", "csv"})),
    Column("line_dbuv", "line dBuV", "db", _rows("line_dbuv"), frozenset({"json", "csv", "md"})),
    Column("line_dbua", "line dBuA", "db", _rows("line_dbua"), frozenset({"json", "csv", "md"})),
    Column("line_envelope_dbuv", "envelope dBuV", "db", _rows("line_envelope_dbuv"), frozenset({"json", "csv"})),
    Column("line_exact_dbuv", "exact dBuV", "db", _rows("line_exact_dbuv"), frozenset({"json", "csv"})),
    Column("line_envelope_dbua", "envelope dBuA", "db", _rows("line_envelope_dbua"), frozenset({"json", "csv"})),
    Column("line_exact_dbua", "exact dBuA", "db", _rows("line_exact_dbua"), frozenset({"json", "csv"})),
    Column("rail_dbua", "rail dBuA", "db", _rows("rail_dbua"), frozenset({"json", "csv"}), when=_has_rails),
    Column("band_hz", "band", "json", _rows("band_lo_hz"), frozenset({"json"}), json=_json_band),
    Column("paths", "paths", "json", _rows("path_readings"), frozenset({"json"}), json=_json_paths),
    Column("cable_current_dbua", "cable dBuA", "json", _rows("cable_current_dbua"), frozenset({"json"}),
           json=_json_cables),
    Column("readings", "reading", "db", _per_detector("readings"), frozenset({"json", "csv", "md", "html"}),
           per_detector=True, csv="reading"),
    Column("worst_detector", "det", "text", _rows("worst_detector"), frozenset({"term"})),
    Column("worst_reading", "read", "db", lambda est: _worst(est, "readings"), frozenset({"term"})),
    Column("worst_limit", "limit", "db", lambda est: _worst(est, "limits"), frozenset({"term"})),
    Column("spread_reduction_db", "SSC dB", "db", _per_detector("spread_reduction_db"),
           frozenset({"json", "csv", "md"}), per_detector=True, csv="ssc_reduction", json=_json_reduction),
    Column("limits", "limit", "db", _per_detector("limits"), frozenset({"json", "csv", "md", "html"}),
           per_detector=True, csv="limit", json=_json_limits),
    Column("margin_db", "margin", "db", _per_detector("margins"), frozenset({"json", "csv", "md", "html"}),
           per_detector=True, csv="margin", json=_json_margins),
    Column("worst_margin", "margin", "db", _rows("worst_margin_db"), frozenset({"term"})),
    Column("worst_ssc", "SSC dB", "db", _worst_ssc, frozenset({"term"})),
    Column("worst_margin_db", "worst", "db", _rows("worst_margin_db"), frozenset({"json", "csv", "md", "html"})),
    Column("flags", "flags", "flags", lambda est: est.rows, frozenset(ALL)),
    Column("decoupling_impedance_ohm", "|Z_dec| ohm", "ohm", _rows("decoupling_impedance_ohm"),
           frozenset({"json", "csv", "md"}), when=_has_rails),
    Column("decoupling_impedance_max_ohm", "worst |Z_dec| ohm", "ohm", _rows("decoupling_impedance_max_ohm"),
           frozenset({"json", "csv"}), when=_has_rails),
    Column("required_impedance_ohm", "required ohm", "ohm", _rows("required_impedance_ohm"),
           frozenset({"json", "csv", "md"}), when=_has_rails),
    Column("suppression_db", "suppression dB", "db", _rows("suppression_db"), frozenset({"json", "csv", "md"}),
           when=_has_rails),
)


def columns_for(est, output: str) -> list[Column]:
    """The columns an output shows for this estimate, in order."""
    return [c for c in COLUMNS if output in c.outputs and c.when(est)]


def column_values(est, columns) -> dict[str, object]:
    """Each column's values, computed once for a whole table."""
    return {c.name: c.values(est) for c in columns}


def json_row(est, columns, values, i: int) -> dict:
    """One row as the JSON result carries it."""
    row = {}
    for c in columns:
        v = values[c.name]
        if c.json is not None:
            row[c.name] = c.json(est, v, i)
        elif c.kind == "flags":
            row[c.name] = v.flag_list(i)
        elif c.per_detector:
            row[c.name] = {d: _num(x[i]) for d, x in v.items()}
        elif c.kind == "text":
            row[c.name] = str(v[i])
        elif c.kind == "int":
            row[c.name] = int(v[i])
        elif c.kind == "hz":
            row[c.name] = float(v[i])
        else:
            row[c.name] = _num(v[i], 6 if c.kind == "ohm" else 3)
    return row


def header_cells(est, columns, output: str) -> list[str]:
    """Column headings: CSV names for CSV and Markdown, short headings for the terminal and HTML."""
    out = []
    for c in columns:
        if c.per_detector:
            dets = detectors_of(est)
            out += [f"{c.csv or c.name}_{d}" if output in ("csv", "md") else f"{d} {c.header}" for d in dets]
        else:
            out.append(c.name if output in ("csv", "md") else c.header)
    return out


def _format(x, kind: str, output: str) -> str:
    if kind == "text":
        return "-" if x is None else str(x)
    if kind == "int":
        return str(int(x))
    if kind == "hz":
        return f"{x:.10g}"
    if kind == "mhz":
        return f"{x / 1e6:.6g}"
    if x is None:
        return "-"
    finite = math.isfinite(x)
    if kind == "ohm":
        return f"{x:.4g}" if finite else "null"
    if output == "term":
        return f"{x:.1f}" if finite else "null"
    return f"{x:.2f}" if finite else "null"


def text_cells(est, columns, values, i: int, output: str) -> list[str]:
    """One row's cells as text for ``output`` (csv, md, html, term)."""
    cells = []
    for c in columns:
        v = values[c.name]
        if c.kind == "flags":
            flags = v.flag_list(i)
            cells.append(" ".join(short_code(f) for f in flags) if output == "term" else " ".join(flags))
        elif c.per_detector:
            cells += [_format(v[d][i], c.kind, output) for d in detectors_of(est)]
        else:
            cells.append(_format(v[i], c.kind, output))
    return cells


def verdict_text(v: Verdict) -> str:
    """One line: how many harmonics are over, within the guard band, and the worst."""
    if v.worst is None:
        return f"NO DATA: no harmonic falls where the limit has a line ({v.rows} rows)"
    w = v.worst
    worst = (f"worst {w.margin_db:+.1f} dB at {w.frequency_hz / 1e6:.6g} MHz "
             f"({w.source} n={w.harmonic}, {w.detector})")
    guard = v.guard_band_db
    if v.kind == "fails":
        return (f"FAILS: {v.over_limit} of {v.rows} harmonics over the limit, {v.within_guard_band} within "
                f"the {guard:g} dB guard band; {worst}")
    if v.kind == "marginal":
        return f"MARGINAL: {v.within_guard_band} of {v.rows} harmonics within the {guard:g} dB guard band; {worst}"
    return f"MEETS THE GUARD BAND: all {v.rows} harmonics at least {guard:g} dB below the limit; {worst}"
