"""The column specification: one entry per column drives the terminal table, CSV, Markdown, HTML and JSON rows.

A :class:`Column` names a column, says how to get its values from an
estimate (an array over the rows, or a dict of arrays per detector), what kind
of value it is (which decides how each output formats it), its unit, and in
which outputs it appears.  Adding a column is one entry in :data:`COLUMNS`;
the writers in :mod:`emispec.report` and the command line only walk this list.

Formats: JSON carries numbers (levels rounded to 0.001 dB) and ``null``; CSV
carries frequencies in MHz to 1 kHz, levels to 0.01 dB, empty cells where a
value does not exist, and the unit in every column name
(``reading_qp_dbuv_m``); the terminal, Markdown and HTML tables show the
detector with the least margin, levels to 0.1 dB and a dash where a value
does not exist.

:func:`verdict_text` puts a :class:`emispec.rows.Verdict` into words.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .flags import OVER_LIMIT, OVERLAPS, WITHIN_GUARD_BAND, short_code
from .receiver import band_names
from .rows import Verdict

__all__ = ["Column", "COLUMNS", "columns_for", "column_values", "json_row", "text_cells", "header_cells",
           "verdict_text", "detectors_of", "unit_token"]

FULL = frozenset({"json", "csv"})
SUMMARY = frozenset({"term", "md", "html"})


@dataclass(frozen=True)
class Column:
    """One output column.

    Parameters
    ----------
    name : str
        Key in a JSON row.
    header : str
        Heading in the terminal, Markdown and HTML tables (per detector: ``<detector> <header>``).
    kind : str
        ``text``, ``int``, ``mhz`` (a frequency in Hz, shown in MHz), ``db`` (a level or margin), ``ohm``,
        ``flags``, or ``json`` (a value only JSON carries).
    values : callable
        ``values(est)`` -> array over the rows, or a dict detector -> array.
    outputs : frozenset
        Any of ``json``, ``csv``, ``md``, ``html``, ``term``.
    per_detector : bool
        The values are a dict detector -> array.
    csv : str
        The CSV name before the detector and unit (default ``name``).
    unit : str
        ``"limit"`` (the limit's unit), or a unit token for the CSV name (``"db"``, ``"dbuv"``, ``"dbua"``,
        ``"mhz"``, ``"ohm"``); empty for none.
    when : callable
        ``when(est)``: the column exists for this estimate (rail columns only for boards with rails).
    json : callable
        ``json(est, values, i)``: the JSON value of row ``i`` where it is not simply the formatted value.
    """

    name: str
    header: str
    kind: str
    values: Callable
    outputs: frozenset = FULL
    per_detector: bool = False
    csv: str | None = None
    unit: str = ""
    when: Callable = lambda est: True
    json: Callable | None = None


def detectors_of(est) -> tuple[str, ...]:
    return est.board.limit.detectors


def unit_token(unit: str) -> str:
    """``dBuV/m`` -> ``dbuv_m``: a unit as it can stand in a column name."""
    return unit.lower().replace("/", "_")


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
    Column("source", "source", "text", _rows("source"), FULL | SUMMARY),
    Column("harmonic", "n", "int", _rows("harmonic"), FULL | SUMMARY),
    Column("frequency_hz", "MHz", "mhz", _rows("frequency_hz"), FULL | SUMMARY, csv="frequency", unit="mhz"),
    Column("cispr_band", "band", "text", lambda est: band_names(est.rows.frequency_hz), frozenset({"term"})),
    Column("band_lo_hz", "band from", "mhz", _rows("band_lo_hz"), frozenset({"csv"}), csv="band_lo", unit="mhz"),
    Column("band_hi_hz", "band to", "mhz", _rows("band_hi_hz"), frozenset({"csv"}), csv="band_hi", unit="mhz"),
    Column("harmonics", "level", "text", _rows("harmonics")),
    Column("line_dbuv", "line dBuV", "db", _rows("line_dbuv"), csv="line", unit="dbuv"),
    Column("line_dbua", "line dBuA", "db", _rows("line_dbua"), csv="line", unit="dbua"),
    Column("line_envelope_dbuv", "envelope dBuV", "db", _rows("line_envelope_dbuv"), csv="line_envelope",
           unit="dbuv"),
    Column("line_exact_dbuv", "exact dBuV", "db", _rows("line_exact_dbuv"), csv="line_exact", unit="dbuv"),
    Column("line_envelope_dbua", "envelope dBuA", "db", _rows("line_envelope_dbua"), csv="line_envelope",
           unit="dbua"),
    Column("line_exact_dbua", "exact dBuA", "db", _rows("line_exact_dbua"), csv="line_exact", unit="dbua"),
    Column("rail_dbua", "rail dBuA", "db", _rows("rail_dbua"), csv="rail", unit="dbua", when=_has_rails),
    Column("band_hz", "band", "json", _rows("band_lo_hz"), frozenset({"json"}), json=_json_band),
    Column("paths", "paths", "json", _rows("path_readings"), frozenset({"json"}), json=_json_paths),
    Column("cable_current_dbua", "cable dBuA", "json", _rows("cable_current_dbua"), frozenset({"json"}),
           json=_json_cables),
    Column("readings", "reading", "db", _per_detector("readings"), per_detector=True, csv="reading", unit="limit"),
    Column("spread_reduction_db", "SSC dB", "db", _per_detector("spread_reduction_db"), per_detector=True,
           csv="ssc_reduction", unit="db", json=_json_reduction),
    Column("limits", "limit", "db", _per_detector("limits"), per_detector=True, csv="limit", unit="limit",
           json=_json_limits),
    Column("margin_db", "margin", "db", _per_detector("margins"), per_detector=True, csv="margin", unit="db",
           json=_json_margins),
    Column("worst_detector", "det", "text", _rows("worst_detector"), frozenset({"csv"}) | SUMMARY),
    Column("worst_reading", "read", "db", lambda est: _worst(est, "readings"), SUMMARY),
    Column("worst_limit", "limit", "db", lambda est: _worst(est, "limits"), SUMMARY),
    Column("worst_margin_db", "margin", "db", _rows("worst_margin_db"), FULL | SUMMARY, csv="worst_margin",
           unit="db"),
    Column("worst_ssc", "SSC dB", "db", _worst_ssc, frozenset({"term"})),
    Column("dominant_path", "path", "text", _rows("dominant_path"), FULL | SUMMARY),
    Column("flags", "flags", "flags", lambda est: est.rows, FULL | SUMMARY),
    Column("decoupling_impedance_ohm", "|Z_dec| ohm", "ohm", _rows("decoupling_impedance_ohm"),
           csv="decoupling_impedance", unit="ohm", when=_has_rails),
    Column("decoupling_impedance_max_ohm", "worst |Z_dec| ohm", "ohm", _rows("decoupling_impedance_max_ohm"),
           csv="decoupling_impedance_max", unit="ohm", when=_has_rails),
    Column("required_impedance_ohm", "required ohm", "ohm", _rows("required_impedance_ohm"),
           csv="required_impedance", unit="ohm", when=_has_rails),
    Column("suppression_db", "suppression dB", "db", _rows("suppression_db"), csv="suppression", unit="db",
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
            row[c.name] = None if v[i] is None else str(v[i])
        elif c.kind == "int":
            row[c.name] = int(v[i])
        elif c.kind == "mhz":
            row[c.name] = float(v[i])
        else:
            row[c.name] = _num(v[i], 6 if c.kind == "ohm" else 3)
    return row


def _csv_name(est, c: Column, detector: str | None = None) -> str:
    parts = [c.csv or c.name]
    if detector is not None:
        parts.append(detector.lower().replace("-", "_"))
    unit = unit_token(est.board.limit.unit) if c.unit == "limit" else c.unit
    if unit:
        parts.append(unit)
    return "_".join(parts)


def header_cells(est, columns, output: str) -> list[str]:
    """Column headings: names with units for CSV, short headings for the terminal, Markdown and HTML."""
    out = []
    for c in columns:
        if c.per_detector:
            dets = detectors_of(est)
            out += [_csv_name(est, c, d) if output == "csv" else f"{d} {c.header}" for d in dets]
        else:
            out.append(_csv_name(est, c) if output == "csv" else c.header)
    return out


def _format(x, kind: str, output: str) -> str:
    missing = "" if output == "csv" else "-"
    if x is None:
        return missing
    if kind == "text":
        return str(x)
    if kind == "int":
        return str(int(x))
    if not math.isfinite(x):
        return "null" if output == "term" and kind == "db" else missing
    if kind == "mhz":
        return f"{x / 1e6:.3f}" if output == "csv" else f"{x / 1e6:.6g}"
    if kind == "ohm":
        return f"{x:.4g}"
    return f"{x:.2f}" if output == "csv" else f"{x:.1f}"


def terminal_flags(flags: list[str], wide: bool) -> str:
    """Short codes for the terminal: the margin column already says over or inside the guard band, and
    overlapping sources are counted (``+2``) unless the terminal is wide enough for their names."""
    shown = [short_code(f) for f in flags if f not in (OVER_LIMIT, WITHIN_GUARD_BAND) and not f.startswith(OVERLAPS)]
    others = [f for f in flags if f.startswith(OVERLAPS)]
    if others:
        shown += [short_code(f) for f in others] if wide else [f"+{len(others)}"]
    return " ".join(shown)


def text_cells(est, columns, values, i: int, output: str) -> list[str]:
    """One row's cells as text for ``output`` (csv, md, html, term, or term-wide: a terminal of 110 columns or
    more)."""
    terminal, wide = output.startswith("term"), output == "term-wide"
    output = "term" if terminal else output
    cells = []
    for c in columns:
        v = values[c.name]
        if c.kind == "flags":
            flags = v.flag_list(i)
            cells.append(terminal_flags(flags, wide) if terminal else " ".join(flags))
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
