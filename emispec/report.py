"""Output edge: the JSON result, CSV and Markdown tables, the test plan, variants and the HTML report.

Numbers leave the core as dB arrays with NaN for "does not exist"; here NaN
becomes JSON ``null`` and the word ``null`` in tables.  Which columns each
output has comes from :mod:`emispec.columns`; what the plots draw comes from
:mod:`emispec.pipeline` (swept spectrum, envelopes, rail views), so nothing
here computes physics.  Every file goes to a temporary name in its destination
folder and is renamed into place, so an interrupted or failed run never leaves
a half-written file over a good one.
"""

from __future__ import annotations

import csv
import html
import io
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import CAUTION, __version__
from .columns import column_values, columns_for, header_cells, json_row, text_cells, unit_token, verdict_text
from .flags import FLAGS
from .flags import names as flag_names
from .pipeline import (CableView, Estimate, RailView, antenna_cables, cable_view, envelope_traces, rail_view,
                       swept_spectrum)
from .parameters import key_label
from .plan import resonance_lines
from .outputs import write_set
from .trace import Trace

__all__ = [
    "CAUTION", "SCHEMA", "Views", "views_of", "result_dict", "row_dict", "csv_text", "swept_csv_text",
    "markdown_text", "output_files", "write_outputs", "plan_csv_text", "plan_markdown_text", "variants_rows",
    "variants_csv_text", "html_text", "RISK_SCHEMA", "risk_dict", "risk_json_text", "risk_csv_text",
    "risk_samples_csv_text", "risk_files", "COMPARE_SCHEMA", "FIT_SCHEMA", "compare_dict", "compare_csv_text",
    "compare_files", "scan_png", "fit_dict",
]

SCHEMA = "emispec.result/1"


def _num(x, digits: int = 3):
    """A finite float rounded for output, or None."""
    if x is None:
        return None
    x = float(x)
    return round(x, digits) if math.isfinite(x) else None


@dataclass(frozen=True)
class Views:
    """What the plots and the HTML report draw of an estimate, computed once by the pipeline."""

    swept: dict[str, Trace]
    envelopes: dict[str, Trace]
    rails: dict[str, RailView]
    cables: dict[str, CableView]


def views_of(est: Estimate) -> Views:
    """The swept spectrum, the sources' envelopes on the plot grid, every rail's and every antenna cable's view."""
    lo, hi = est.span_hz
    return Views(swept_spectrum(est), envelope_traces(est, np.geomspace(lo, hi, 2000)),
                 {name: rail_view(est, name) for name in est.board.rails},
                 {name: cable_view(est, name) for name in antenna_cables(est.board)})


def row_dict(est: Estimate, i: int) -> dict:
    """One row of the JSON result."""
    columns = columns_for(est, "json")
    return json_row(est, columns, column_values(est, columns), i)


def result_dict(est: Estimate) -> dict:
    """The whole result (schema ``emispec.result/1``)."""
    board, limit = est.board, est.board.limit
    columns = columns_for(est, "json")
    values = column_values(est, columns)
    verdict = est.outcome
    worst = None
    if verdict.worst is not None:
        w = verdict.worst
        worst = {"source": w.source, "harmonic": w.harmonic, "frequency_hz": w.frequency_hz,
                 "worst_margin_db": _num(w.margin_db), "detector": w.detector}
    return {
        "schema": SCHEMA,
        "emispec_version": __version__,
        "caution": CAUTION,
        "board": {"title": board.title, "file": board.file, "sha256": board.sha256},
        "limit": {
            "name": limit.name,
            "title": limit.title,
            "source": limit.source,
            "measurement": limit.measurement,
            "distance_m": limit.distance_m,
            "unit": limit.unit,
            "detectors": list(limit.detectors),
        },
        "guard_band_db": board.guard_band_db,
        "paths_combine": {source.name: source.combine for source in board.sources},
        "harmonics": {source.name: source.mode for source in board.sources},
        "rails": [rail_view(est, name).summary for name in board.rails],
        "span_hz": [est.span_hz[0], est.span_hz[1]],
        "rows": [json_row(est, columns, values, i) for i in range(len(est.rows))],
        "summary": {
            "rows": len(est.rows),
            "over_limit": verdict.over_limit,
            "within_guard_band": verdict.within_guard_band,
            "worst": worst,
            "verdict": verdict_text(verdict),
        },
    }


def _table(est: Estimate, output: str, count: int | None = None) -> tuple[list[str], list[list[str]]]:
    """Header and row cells of the margin table for ``output`` (csv, md, html, term)."""
    columns = columns_for(est, output)
    values = column_values(est, columns)
    rows = len(est.rows) if count is None else min(count, len(est.rows))
    return header_cells(est, columns, output), [text_cells(est, columns, values, i, output) for i in range(rows)]


def _csv(header: list[str], rows) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def csv_text(est: Estimate) -> str:
    """All rows, worst first: a header with the unit in every name, then one line per row (empty: no value)."""
    head, rows = _table(est, "csv")
    return _csv(head, rows)


def _csv_number(x, digits: int = 2) -> str:
    return "" if x is None or not math.isfinite(x) else f"{x:.{digits}f}"


def swept_csv_text(est: Estimate, swept: dict[str, Trace]) -> str:
    """The swept spectrum: frequency [MHz], each detector's reading and the limit's lines, in the limit's unit."""
    frequency_hz = next(iter(swept.values())).frequency_hz
    limits = est.board.limit.levels(frequency_hz)
    unit = unit_token(est.board.limit.unit)
    head = ["frequency_mhz", *(f"reading_{d.lower()}_{unit}" for d in swept),
            *(f"limit_{d.lower()}_{unit}" for d in limits)]
    rows = ([f"{f / 1e6:.4f}", *(_csv_number(t.level_db[k]) for t in swept.values()),
             *(_csv_number(v[k]) for v in limits.values())] for k, f in enumerate(frequency_hz))
    return _csv(head, rows)


def _md_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("<", "&lt;").replace(">", "&gt;")


def _legend() -> str:
    return "; ".join(f"{f.short}: {f.meaning}" for f in sorted(FLAGS.values(), key=lambda f: f.rank))


def markdown_text(est: Estimate, count: int = 20) -> str:
    """A summary a reviewer reads on a slide: verdict, limit, assumptions, and the worst rows."""
    b, lim = est.board, est.board.limit
    head, rows = _table(est, "md", count)
    lines = [
        f"# {_md_escape(b.title)}",
        "",
        f"> {CAUTION}",
        "",
        f"**Verdict:** {_md_escape(est.verdict())}",
        "",
        f"- Board file: `{_md_escape(b.file)}` (sha256 `{b.sha256[:16]}`)",
        f"- Limit: {_md_escape(lim.title)} (`{lim.name}`), {lim.measurement}"
        + (f" at {lim.distance_m:g} m" if lim.distance_m else "")
        + f", {lim.unit}; source: {_md_escape(lim.source)}",
        f"- Guard band: {b.guard_band_db:g} dB; analysed {est.span_hz[0] / 1e6:g} to {est.span_hz[1] / 1e6:g} MHz",
        f"- {_combination_line(b)}",
        f"- emispec {__version__}",
        "",
        f"## Worst {min(count, len(est.rows))} of {len(est.rows)} harmonics ({lim.unit}; margins in dB)",
        "",
        "| " + " | ".join(head) + " |",
        "|" + "---|" * len(head),
    ]
    lines += ["| " + " | ".join(_md_escape(c) for c in row) + " |" for row in rows]
    lines += ["", f"Reading, limit and margin are the detector with the least margin (det); path carries most of "
              f"the reading. Flags: {_md_escape(', '.join(flag_names()))}. `-` marks a value that does not exist.",
              "", "Every row, every detector and every path: estimate.csv and estimate.json.", ""]
    return "\n".join(lines)


def file_part(name: str) -> str:
    """A user's name made safe for a file name."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


def json_text(est: Estimate) -> str:
    return json.dumps(result_dict(est), indent=1, allow_nan=False) + "\n"


def output_files(est: Estimate, stem: str = "estimate", views: Views | None = None, rows: int = 20) -> dict:
    """Every file ``estimate --out`` writes: name -> function giving its contents.

    ``<stem>.json``, ``<stem>.csv`` (every row), ``<stem>.md`` (the summary), ``<stem>-swept.csv``,
    ``<stem>-spectrum.png``, ``<stem>-swept.png``, ``<stem>-rail-<name>.png`` for each rail and
    ``<stem>-cable-<name>.png`` for each antenna cable.
    """
    from .plot import cable_figure, png_bytes, rail_figure, spectrum_figure, swept_figure  # matplotlib is slow

    views = views or views_of(est)
    files = {
        f"{stem}.json": lambda: json_text(est),
        f"{stem}.csv": lambda: csv_text(est),
        f"{stem}.md": lambda: markdown_text(est, rows),
        f"{stem}-swept.csv": lambda: swept_csv_text(est, views.swept),
        f"{stem}-spectrum.png": lambda: png_bytes(spectrum_figure(est, views.envelopes)),
        f"{stem}-swept.png": lambda: png_bytes(swept_figure(est, views.swept)),
    }
    for name in est.board.rails:
        files[f"{stem}-rail-{file_part(name)}.png"] = lambda name=name: png_bytes(rail_figure(est, views.rails[name]))
    for name in views.cables:
        files[f"{stem}-cable-{file_part(name)}.png"] = lambda name=name: png_bytes(cable_figure(est,
                                                                                                views.cables[name]))
    return files


def write_outputs(est: Estimate, out_dir: Path, stem: str = "estimate", views: Views | None = None,
                  rows: int = 20) -> list[Path]:
    """Write every file of :func:`output_files` into ``out_dir`` as one set (see :func:`emispec.outputs.write_set`)."""
    return write_set(out_dir, output_files(est, stem, views, rows))


# ---------------------------------------------------------------- test plan, variants, HTML


def plan_csv_text(est: Estimate, plan: list[dict]) -> str:
    """The test plan as CSV: units in the names, frequencies in MHz, levels to 0.01 dB, no comment lines."""
    unit = unit_token(est.board.limit.unit)
    head = ["priority", "source", "harmonic", "frequency_mhz", "band_lo_mhz", "band_hi_mhz", "cispr_band", "rbw_khz",
            "detectors", "detector", f"expected_{unit}", f"limit_{unit}", "margin_db", "path", "note"]
    rows = ([row["priority"], row["source"], row["harmonic"], f"{row['frequency_hz'] / 1e6:.3f}",
             f"{row['band_lo_hz'] / 1e6:.3f}", f"{row['band_hi_hz'] / 1e6:.3f}", row["cispr_band"],
             f"{row['rbw_hz'] / 1e3:g}", row["detectors"], row["detector"], _csv_number(row["expected"]),
             _csv_number(row["limit"]), _csv_number(row["margin_db"]), row["path"] or "", row["note"]]
            for row in plan)
    return _csv(head, rows)


def _plan_frequency(row: dict) -> str:
    if row["band_hi_hz"] > row["band_lo_hz"]:
        return f"{row['band_lo_hz'] / 1e6:.6g}-{row['band_hi_hz'] / 1e6:.6g} MHz"
    return f"{row['frequency_hz'] / 1e6:.6g} MHz"


def plan_markdown_text(est: Estimate, plan: list[dict], passing: bool = False) -> str:
    """The test plan as a Markdown table, worst first."""
    unit = est.board.limit.unit
    what = ("None is over the limit or inside the guard band; these are the closest." if passing else
            "Over the limit or inside the guard band, worst margin first.")
    lines = [f"# Test plan: {_md_escape(est.board.title)}", "", f"> {CAUTION}", "",
             f"Limit {est.board.limit.name} ({unit}), guard band {est.board.guard_band_db:g} dB. "
             f"{len(plan)} frequencies. {what}", "",
             f"| # | source | n | frequency | CISPR band | RBW | detectors | expected {unit} | limit | margin dB | path "
             "| note |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for row in plan:
        lines.append(
            f"| {row['priority']} | {_md_escape(row['source'])} | {row['harmonic']} | {_plan_frequency(row)} | "
            f"{row['cispr_band']} | {row['rbw_hz'] / 1e3:g} kHz | {row['detectors']} | {row['expected']:.1f} | "
            f"{row['limit']:.1f} | {row['margin_db']:.1f} | {_md_escape(row['path'] or '-')} | "
            f"{_md_escape(row['note'])} |")
    resonances = resonance_lines(est)
    if resonances:
        lines += [""] + [f"- {_md_escape(line)}" for line in resonances]
    return "\n".join(lines) + "\n"


def variants_rows(variants) -> list[dict]:
    """Per variant: each swept key's value, the worst margin, where it is, and counts, overall and per detector.

    Detectors are the union over the variants (a variant may use another limit); a detector a variant's limit
    does not have is None.
    """
    detectors = list(dict.fromkeys(d for v in variants for d in v.estimate.board.limit.detectors))
    out = []
    for v in variants:
        row = {key_label(k): str(x) for k, x in v.settings}
        over, guard = v.counts()
        row.update({"worst_margin_db": _num(v.worst_margin_db()), "worst_at": v.worst_at(), "over_limit": over,
                    "within_guard_band": guard})
        own = v.estimate.board.limit.detectors
        for d in detectors:
            over_d, guard_d = v.counts(d) if d in own else (None, None)
            row[f"worst_margin_{d.lower()}_db"] = _num(v.worst_margin_db(d)) if d in own else None
            row[f"over_{d.lower()}"], row[f"guard_{d.lower()}"] = over_d, guard_d
        out.append(row)
    return out


def variants_csv_text(variants) -> str:
    """The variants as CSV: one column per swept key, empty cells where a detector does not apply."""
    rows = variants_rows(variants)
    columns = list(rows[0])
    return _csv(columns, ([("" if row[c] is None else row[c]) for c in columns] for row in rows))


ASSUMPTIONS = (
    "Harmonic levels: the spectral envelope (the upper bound of the trapezoid series, no sinc nulls) unless a source "
    "asks for the exact series, with linear, RC or Gaussian edges.",
    "Rail current: what a driver draws from its supply, the positive part of its load current (the charging "
    "current of a capacitive load); core currents as triangular pulse trains.",
    "Spread spectrum: each harmonic frequency-modulated with n times the deviation; lines from an FFT of one "
    "modulation period.",
    "Receiver: CISPR 16-1-1 bands and 6 dB bandwidths with a Gaussian filter; PK, meter-weighted AV and the QP "
    "detector solved to steady state; a CW sine reads its RMS value.",
    "Radiation: electrically small loops and short cables (lambda/2 cap) in the far field, direction of maximum "
    "radiation, referred to the limit distance by inverse distance; +6 dB ground reflection up to 1 GHz (none "
    "above, over the absorber-lined floor), unless a path sets it.",
    "Decoupling: parts in parallel at the IC pins (with spreading inductance), the package and on-die capacitance "
    "where given, lumped; escaping current by the current divider into the supply path and its termination (LISN "
    "or common-mode impedance); anti-resonances searched within the part tolerances.",
    "Sources add in power unless they share a reference (then in amplitude).",
)


def _combination_line(board) -> str:
    modes = {s.combine for s in board.sources}
    if modes == {"power"}:
        return "Paths of one source add in power (unknown relative phase)."
    if modes == {"coherent"}:
        return "Paths of one source add in amplitude (coherent, the worst case)."
    coherent = ", ".join(s.name for s in board.sources if s.combine == "coherent")
    return f"Paths of one source add in power, except for {coherent} (in amplitude, the worst case)."

_VERDICT_CLASS = {"fails": "FAILS", "marginal": "MARGINAL", "meets": "MEETS", "no-data": "NO"}

_CSS = """
body{font-family:system-ui,sans-serif;margin:2em auto;max-width:1200px;padding:0 1em;color:#222}
h1{font-size:1.5em} h2{font-size:1.2em;margin-top:2em;border-bottom:1px solid #ccc}
.caution{background:#fff4e5;border-left:4px solid #e69500;padding:.6em 1em}
.verdict{font-weight:bold;padding:.5em 1em;border-radius:4px}
.FAILS{background:#fde2e2}.MARGINAL{background:#fff4cc}.MEETS{background:#e2f5e2}
.wide{max-width:100%;overflow-x:auto}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}
th,td{border:1px solid #ccc;padding:.2em .5em;text-align:right;vertical-align:top} th{background:#f0f0f0}
td.text{text-align:left;white-space:normal;overflow-wrap:anywhere;min-width:6em}
tr.over td{background:#fde2e2} tr.guard td{background:#fff4cc}
figure{margin:1em 0} svg{max-width:100%;height:auto}
"""

#: Headings of the test plan and variant tables.
_PLAN_HEADINGS = {"priority": "#", "source": "source", "harmonic": "n", "frequency_hz": "MHz",
                  "cispr_band": "CISPR band", "rbw_hz": "RBW kHz", "detectors": "detectors", "detector": "det",
                  "expected": "expected", "limit": "limit", "margin_db": "margin dB", "path": "path", "note": "note"}


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" + ("" if count == 1 else "s")


def _html_table(head: list[str], rows: list[list[str]], text_columns: set[int], classes=None) -> str:
    out = ['<div class="wide"><table><thead><tr>' + "".join(f"<th>{html.escape(h)}</th>" for h in head)
           + "</tr></thead><tbody>"]
    for i, cells in enumerate(rows):
        cls = f' class="{classes[i]}"' if classes and classes[i] else ""
        out.append(f"<tr{cls}>" + "".join(
            f'<td class="text">{html.escape(c)}</td>' if k in text_columns else f"<td>{html.escape(c)}</td>"
            for k, c in enumerate(cells)) + "</tr>")
    return "".join(out) + "</tbody></table></div>"


def _html_rows_table(est: Estimate, count: int) -> str:
    r = est.rows
    columns = columns_for(est, "html")
    head, rows = _table(est, "html", count)
    text_columns = {k for k, c in enumerate(columns) if c.kind in ("text", "flags")}
    classes = ["over" if r.flags["over-limit"][i] else "guard" if r.flags["within-guard-band"][i] else ""
               for i in range(len(rows))]
    return _html_table(head, rows, text_columns, classes)


def _html_plan_table(plan: list[dict]) -> str:
    columns = list(_PLAN_HEADINGS)
    rows = [[str(row["priority"]), row["source"], str(row["harmonic"]), _plan_frequency(row).removesuffix(" MHz"),
             row["cispr_band"], f"{row['rbw_hz'] / 1e3:g}", row["detectors"], row["detector"],
             f"{row['expected']:.1f}", f"{row['limit']:.1f}", f"{row['margin_db']:.1f}", row["path"] or "-",
             row["note"]] for row in plan]
    text = {columns.index(c) for c in ("source", "cispr_band", "detectors", "detector", "path", "note")}
    return _html_table([_PLAN_HEADINGS[c] for c in columns], rows, text)


def _variant_heading(name: str) -> str:
    words = {"worst_margin_db": "worst dB", "worst_at": "worst at", "over_limit": "over",
             "within_guard_band": "in guard band"}
    if name in words:
        return words[name]
    for prefix, word in (("worst_margin_", "worst dB"), ("over_", "over"), ("guard_", "in guard band")):
        if name.startswith(prefix):
            return f"{name[len(prefix):].removesuffix('_db').upper()} {word}"
    return name


def _html_variants_table(variants) -> str:
    table = variants_rows(variants)
    columns = list(table[0])
    rows = [["-" if row[c] is None else f"{row[c]:.1f}" if isinstance(row[c], float) else str(row[c])
             for c in columns] for row in table]
    keys = {key_label(k) for k, _ in variants[0].settings}
    text = {k for k, c in enumerate(columns) if c in keys or c == "worst_at"}
    return _html_table([_variant_heading(c) for c in columns], rows, text)


def html_text(est: Estimate, plan: list[dict], variants=None, rows: int = 20, views: Views | None = None,
              passing: bool = False, risk=None, scan=None) -> str:
    """One self-contained HTML report: inline SVG plots, no scripts, no external assets.

    User text (titles, names, notes) is escaped.  ``rows`` is how many of the worst rows the margin table
    shows; ``passing`` says that the plan lists the closest rows of a board that keeps its guard band;
    ``risk`` (a :class:`emispec.risk.RiskResult`) adds the tolerance study, ``scan`` (a
    :class:`emispec.scan.Comparison`) a measured scan's overlay and match table.
    """
    from .plot import cable_figure, rail_figure, spectrum_figure, svg_text, swept_figure, variants_figure

    b, lim = est.board, est.board.limit
    outcome = est.outcome
    verdict = verdict_text(outcome)
    views = views or views_of(est)
    figures = [("Harmonic readings against the limit", spectrum_figure(est, views.envelopes)),
               ("Swept receiver readings (all sources)", swept_figure(est, views.swept))]
    figures += [(f"Rail {name}: |Z_dec| and what each harmonic needs", rail_figure(est, views.rails[name]))
                for name in b.rails]
    figures += [(f"Cable {name} as an antenna: response per volt, resonances, common-mode currents",
                 cable_figure(est, view)) for name, view in views.cables.items()]
    counts = ", ".join([_plural(len(b.clocks), "clock"), _plural(len(b.currents), "current source"),
                        _plural(len(b.rails), "rail"), _plural(len(b.paths), "path")])
    plan_title = (f"Test plan ({len(plan)} closest frequencies; all keep the guard band)" if passing
                  else f"Test plan ({len(plan)} frequencies, worst first)")
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(b.title)} - emispec estimate</title>", f"<style>{_CSS}</style></head><body>",
        f"<h1>{html.escape(b.title)}</h1>",
        f'<p class="caution">{html.escape(CAUTION)}</p>',
        f'<p class="verdict {_VERDICT_CLASS[outcome.kind]}">{html.escape(verdict)}</p>',
        "<h2>Board and assumptions</h2><ul>",
        f"<li>Board file: <code>{html.escape(b.file)}</code>, sha256 <code>{html.escape(b.sha256)}</code></li>",
        f"<li>Limit: {html.escape(lim.title)} (<code>{html.escape(lim.name)}</code>), {html.escape(lim.measurement)}"
        + (f" at {lim.distance_m:g} m" if lim.distance_m else "") + f", {html.escape(lim.unit)}; source: "
        f"{html.escape(lim.source)}</li>",
        f"<li>Guard band {b.guard_band_db:g} dB; analysed {est.span_hz[0] / 1e6:g} to {est.span_hz[1] / 1e6:g} MHz; "
        f"{counts}</li>",
        f"<li>emispec {html.escape(__version__)}</li></ul><ul>",
        *(f"<li>{html.escape(a)}</li>" for a in (*ASSUMPTIONS, _combination_line(b))),
        "</ul>",
        f"<h2>Margin table (worst {min(rows, len(est.rows))} of {len(est.rows)}, {html.escape(lim.unit)})</h2>",
        _html_rows_table(est, rows),
        f"<p>Flags: {html.escape(_legend())}.</p>",
    ]
    parts += [f"<h2>{html.escape(title)}</h2><figure>{svg_text(fig)}</figure>" for title, fig in figures]
    if variants:
        parts += ["<h2>Variants</h2>", _html_variants_table(variants),
                  f"<figure>{svg_text(variants_figure(variants))}</figure>"]
    if risk is not None:
        parts += _html_risk_section(risk, rows)
    if scan is not None:
        parts += _html_scan_section(est, scan)
    parts += [f"<h2>{html.escape(plan_title)}</h2>",
              _html_plan_table(plan) if plan else "<p>Nothing within the guard band.</p>",
              f'<p class="caution">{html.escape(CAUTION)}</p>',
              f"<p>emispec {html.escape(__version__)}; input sha256 {html.escape(b.sha256)}</p></body></html>"]
    return "\n".join(parts) + "\n"


# ---------------------------------------------------------------- risk (Monte Carlo over the tolerances)

RISK_SCHEMA = "emispec.risk/1"


def _p(x) -> float | None:
    return _num(x, 6)


def _drivers_json(drivers: list[dict]) -> list[dict]:
    return [{**d, "share": _p(d["share"]), "rho": _num(d["rho"], 4)} for d in drivers]


def risk_dict(result) -> dict:
    """A study's result (schema ``emispec.risk/1``): the board's chance of failing and every row's."""
    board = result.template.nominal
    summary = result.summary()
    rows = [{"source": r["source"], "harmonic": r["harmonic"], "frequency_hz": _num(r["frequency_hz"], 0),
             "nominal_margin_db": _num(r["nominal_margin_db"]),
             "margin_db": {k: _num(v) for k, v in r["margin_db"].items()}, "p_fail": _p(r["p_fail"]),
             "p_fail_ci": [_p(x) for x in r["p_fail_ci"]], "p_guard": _p(r["p_guard"]),
             "drivers": _drivers_json(r["drivers"]), "samples_with_row": r["samples_with_row"]}
            for r in result.row_table()]
    return {
        "schema": RISK_SCHEMA,
        "emispec_version": __version__,
        "caution": CAUTION,
        "board": {"title": board.title, "file": board.file, "sha256": board.sha256},
        "limit": {"name": board.limit.name, "unit": board.limit.unit},
        "guard_band_db": board.guard_band_db,
        "samples": result.samples,
        "seed": result.seed,
        "tolerances": [t.as_json() for t in result.tolerances],
        "board_p_fail": _p(summary["p_fail"]),
        "board_p_fail_ci": [_p(x) for x in summary["p_fail_ci"]],
        "board_p_guard": _p(summary["p_guard"]),
        "board_p_guard_ci": [_p(x) for x in summary["p_guard_ci"]],
        "nominal_worst_margin_db": _num(result.nominal_worst),
        "worst_margin_db": {k: _num(v) for k, v in summary["worst_margin_db"].items()},
        "drivers": _drivers_json(summary["drivers"]),
        "rows": rows,
    }


def risk_json_text(result) -> str:
    return json.dumps(risk_dict(result), indent=1, allow_nan=False) + "\n"


def risk_csv_text(result) -> str:
    """Every row, most likely to fail first: P(fail) with its interval, P(guard band), margins, top driver."""
    head = ["source", "harmonic", "frequency_mhz", "nominal_margin_db", "margin_p05_db", "margin_p50_db",
            "margin_p95_db", "p_fail", "p_fail_low", "p_fail_high", "p_guard", "driver", "driver_share"]
    num, p = lambda x: _csv_number(x, 2), lambda x: _csv_number(x, 6)
    lines = ([r["source"], r["harmonic"], f"{r['frequency_hz'] / 1e6:.3f}", num(r["nominal_margin_db"]),
              *(num(r["margin_db"][k]) for k in ("p05", "p50", "p95")), p(r["p_fail"]), p(r["p_fail_ci"][0]),
              p(r["p_fail_ci"][1]), p(r["p_guard"]), r["drivers"][0]["key"] if r["drivers"] else "",
              p(r["drivers"][0]["share"]) if r["drivers"] else ""] for r in result.row_table())
    return _csv(head, lines)


def _value_column(tolerance) -> str:
    return f"{tolerance.key}_{unit_token(tolerance.unit)}" if tolerance.unit else tolerance.key


def risk_samples_csv_text(result) -> str:
    """One line per sample: each tolerance's value (SI, the unit in the column name), the worst margin and
    where it was, so that a user can plot the samples again."""
    head = ["sample", *(_value_column(t) for t in result.tolerances), "worst_margin_db", "worst_source",
            "worst_harmonic"]
    worst = result.worst
    filled = np.where(np.isnan(result.margins), np.inf, result.margins)
    at = np.argmin(filled, axis=1) if result.margins.shape[1] else np.zeros(result.samples, int)
    lines = ([str(i), *(f"{v:.6g}" for v in result.values[i]), _csv_number(worst[i], 3),
              result.keys[at[i]][0] if np.isfinite(worst[i]) else "",
              str(result.keys[at[i]][1]) if np.isfinite(worst[i]) else ""] for i in range(result.samples))
    return _csv(head, lines)


def risk_files(result) -> dict:
    """Every file ``risk --out`` writes: name -> function giving its contents."""
    from .plot import png_bytes, risk_drivers_figure, risk_figure

    return {
        "risk.json": lambda: risk_json_text(result),
        "risk.csv": lambda: risk_csv_text(result),
        "risk-samples.csv": lambda: risk_samples_csv_text(result),
        "risk-margin.png": lambda: png_bytes(risk_figure(result)),
        "risk-drivers.png": lambda: png_bytes(risk_drivers_figure(result)),
    }


def percent_text(p: float, ci: list) -> str:
    """``12.3 % (95 % CI 10.8-13.9 %)``."""
    return f"{100 * p:.3g} % (95 % CI {100 * ci[0]:.3g}-{100 * ci[1]:.3g} %)"


def _html_risk_section(result, rows: int) -> list[str]:
    from .plot import risk_drivers_figure, risk_figure, svg_text

    s = result.summary()
    head = ["source", "n", "MHz", "nominal dB", "5 % dB", "50 % dB", "95 % dB", "P(fail)", "P(guard)", "driver"]
    cells = []
    for r in result.row_table()[:rows]:
        driver = r["drivers"][0] if r["drivers"] else None
        cells.append([r["source"], str(r["harmonic"]), f"{r['frequency_hz'] / 1e6:.6g}",
                      *(_csv_number(x, 1) or "-" for x in (r["nominal_margin_db"], *r["margin_db"].values())),
                      f"{100 * r['p_fail']:.3g} %", f"{100 * r['p_guard']:.3g} %",
                      f"{driver['key']} ({100 * driver['share']:.0f} %)" if driver else "-"])
    return [
        f"<h2>Tolerances and the chance of failing ({result.samples} samples, seed {result.seed})</h2>",
        "<ul>", *(f"<li><code>{html.escape(t.key)}</code>: {html.escape(t.text())}"
                  + (f" (group {html.escape(t.group)})" if t.group else "") + "</li>" for t in result.tolerances),
        "</ul>",
        f"<p>P(fail): {html.escape(percent_text(s['p_fail'], s['p_fail_ci']))}; P(guard band): "
        f"{html.escape(percent_text(s['p_guard'], s['p_guard_ci']))}.</p>",
        _html_table(head, cells, {0, 9}),
        f"<figure>{svg_text(risk_figure(result))}</figure>",
        f"<figure>{svg_text(risk_drivers_figure(result))}</figure>",
    ]


def _number_or_none(x):
    return None if x is None or not math.isfinite(x) else float(x)


def waveform_dict(analysis, file: str, column: str) -> dict:
    """``emispec.waveform/1``: what the capture says, and its harmonics against the fitted trapezoid's (RMS)."""
    from .units import db_micro
    from .waveform import harmonic_phasors

    wave = analysis.trapezoid()
    n = np.arange(1, len(analysis.harmonics) + 1)
    measured = db_micro(analysis.harmonics / np.sqrt(2))
    trapezoid = db_micro(harmonic_phasors(wave, n) / np.sqrt(2))
    shown = n <= max(analysis.limit, 1)
    return {
        "schema": "emispec.waveform/1",
        "file": file,
        "column": column,
        "frequency_hz": analysis.frequency_hz,
        "duty_cycle": analysis.duty,
        "rise_time_s": analysis.rise_s,
        "fall_time_s": analysis.fall_s,
        "rise_time_2080_s": analysis.rise_2080_s,
        "fall_time_2080_s": analysis.fall_2080_s,
        "swing_v": analysis.swing_v,
        "low_v": analysis.low_v,
        "high_v": analysis.high_v,
        "overshoot": analysis.overshoot,
        "undershoot": analysis.undershoot,
        "ringing_hz": _number_or_none(analysis.ringing_hz),
        "ringing_damping": _number_or_none(analysis.ringing_damping),
        "periods": analysis.periods,
        "sample_interval_s": analysis.sample_interval_s,
        "limit_harmonic": analysis.limit,
        "limit_hz": analysis.limit * analysis.frequency_hz,
        "noise_floor_dbuv": _number_or_none(float(db_micro(analysis.noise_floor_v / np.sqrt(2)))),
        "harmonics": [{"n": int(k), "frequency_hz": float(k * analysis.frequency_hz),
                       "level_dbuv": _number_or_none(float(m)), "trapezoid_dbuv": _number_or_none(float(z))}
                      for k, m, z in zip(n[shown], measured[shown], trapezoid[shown])],
    }


def waveform_json_text(analysis, file: str, column: str) -> str:
    return json.dumps(waveform_dict(analysis, file, column), indent=1, allow_nan=False) + "\n"


def waveform_csv_text(analysis, file: str, column: str) -> str:
    """Each harmonic up to the capture's limit: its level, the fitted trapezoid's, and the difference (RMS dBuV)."""
    lines = []
    for h in waveform_dict(analysis, file, column)["harmonics"]:
        m, z = h["level_dbuv"], h["trapezoid_dbuv"]
        lines.append([h["n"], f"{h['frequency_hz'] / 1e6:.6f}", _csv_number(m), _csv_number(z),
                      _csv_number(None if m is None or z is None else m - z)])
    return _csv(["harmonic", "frequency_mhz", "level_dbuv", "trapezoid_dbuv", "difference_db"], lines)


def clock_snippet(analysis, name: str = "captured_clk") -> str:
    """The fitted trapezoid as a ``[[clock]]`` table to paste into a board file."""
    from .units import format_quantity

    return "\n".join([
        "[[clock]]",
        f'name = "{name}"',
        f'frequency = "{format_quantity(analysis.frequency_hz, "Hz", 7)}"',
        f"duty_cycle = {analysis.duty:.4f}",
        f'rise_time = "{format_quantity(analysis.rise_s, "s")}"',
        f'fall_time = "{format_quantity(analysis.fall_s, "s")}"',
        'edge = "10-90"',
        f'swing = "{format_quantity(analysis.swing_v, "V")}"',
        'paths = []  # the paths this clock drives',
    ]) + "\n"


def waveform_files(analysis, file: str, column: str) -> dict:
    """Every file ``waveform --out`` writes: name -> function giving its contents."""
    from .plot import png_bytes, waveform_figure

    return {
        "waveform.json": lambda: waveform_json_text(analysis, file, column),
        "waveform-harmonics.csv": lambda: waveform_csv_text(analysis, file, column),
        "waveform-clock.toml": lambda: clock_snippet(analysis),
        "waveform.png": lambda: png_bytes(waveform_figure(waveform_dict(analysis, file, column))),
    }


def ibis_dict(model, file: str) -> dict:
    """``emispec.ibis/1``: an IBIS model's ramps per edge and corner (20-80 % as stated; 10-90 % and 0-100 %
    of the same linear ramp) and the 10-90 % times of its waveform tables (SI)."""
    from .ibis import CORNERS
    from .waveform import EDGE_FRACTION

    ramps = []
    for edge, ramp in (("rising", model.rise), ("falling", model.fall)):
        for corner in CORNERS if ramp is not None else ():
            dv, dt = ramp.dv_v[corner], ramp.dt_s[corner]
            if dt is None:
                continue
            full = dt / EDGE_FRACTION["20-80"]
            ramps.append({"edge": edge, "corner": corner, "dv_v": dv, "dt_s": dt, "slew_v_per_s": dv / dt,
                          "time_2080_s": dt, "time_1090_s": full * EDGE_FRACTION["10-90"], "time_0100_s": full})
    return {
        "schema": "emispec.ibis/1",
        "file": file,
        "model": model.name,
        "model_type": model.model_type or None,
        "r_load_ohm": model.r_load_ohm,
        "ramps": ramps,
        "waveforms": [{"edge": w.edge, "fixture": dict(w.fixture), "time_1090_s": w.time_1090_s()}
                      for w in model.waveforms],
    }


# ---------------------------------------------------------------- measured scans: compare and fit

COMPARE_SCHEMA = "emispec.compare/1"
FIT_SCHEMA = "emispec.fit/1"


def _match_dicts(c, difference=None) -> list[dict]:
    d = c.scan.detector
    difference = c.difference_db if difference is None else difference
    return [{"source": str(c.source[i]), "harmonic": int(c.harmonic[i]),
             "harmonic_hz": _num(c.harmonic_hz[i], 0), "frequency_hz": _num(c.peak_hz[i], 0),
             "detector": d, "predicted_db": _num(c.predicted[d][i], 2), "measured_db": _num(c.measured[d][i], 2),
             "difference_db": _num(difference[i], 2), "prominence_db": _num(c.prominence_db[i], 2),
             "other_detectors": {k: {"predicted_db": _num(c.predicted[k][i], 2),
                                     "measured_db": _num(c.measured[k][i], 2)} for k in c.measured if k != d}}
            for i in range(c.peak_hz.size)]


def _unexplained_dicts(c) -> list[dict]:
    return [{"frequency_hz": _num(f, 0), "measured_db": _num(m, 2), "floor_db": _num(fl, 2)}
            for f, m, fl in zip(c.unexplained_hz, c.unexplained_db, c.unexplained_floor_db)]


def _stats(stats: dict) -> dict:
    return {k: _num(v, 2) for k, v in stats.items()}


def compare_dict(c) -> dict:
    """``emispec.compare/1``: the scan's peaks matched to the board's harmonics (dB of the limit's unit)."""
    from .scan import CLEAR_DB, MATCH_FRACTION, PROMINENCE_DB

    return {
        "schema": COMPARE_SCHEMA,
        "emispec_version": __version__,
        "caution": CAUTION,
        "scan": {"file": c.scan.file, "unit": c.scan.unit, "detector": c.scan.detector,
                 "detectors": list(c.scan.traces), "points": int(c.scan.frequency_hz.size),
                 "span_hz": [_num(c.scan.frequency_hz[0], 0), _num(c.scan.frequency_hz[-1], 0)],
                 "notes": list(c.scan.notes)},
        "rules": {"prominence_db": PROMINENCE_DB, "clear_of_floor_db": CLEAR_DB,
                  "match_within": f"max(RBW, {MATCH_FRACTION:g} f, 1.5 scan steps)"},
        "matches": _match_dicts(c),
        "unexplained": _unexplained_dicts(c),
        "not_seen": [{"source": str(s), "harmonic": int(n), "frequency_hz": _num(f, 0), "predicted_db": _num(p, 2),
                      "floor_db": _num(fl, 2)}
                     for s, n, f, p, fl in zip(c.not_seen_source, c.not_seen_harmonic, c.not_seen_hz,
                                               c.not_seen_predicted_db, c.not_seen_floor_db)],
        "residual_db": _stats(c.residual()),
    }


def compare_csv_text(c) -> str:
    """One line per measured peak (matched or unexplained), then the harmonics not seen."""
    unit = unit_token(c.scan.unit)
    head = ["kind", "source", "harmonic", "frequency_mhz", f"predicted_{unit}", f"measured_{unit}", "difference_db",
            f"floor_{unit}"]
    d = c.scan.detector
    lines = [["matched", s, int(n), f"{f / 1e6:.3f}", _csv_number(p), _csv_number(m), _csv_number(m - p), ""]
             for s, n, f, p, m in zip(c.source, c.harmonic, c.peak_hz, c.predicted[d], c.measured[d])]
    lines += [["unexplained", "", "", f"{f / 1e6:.3f}", "", _csv_number(m), "", _csv_number(fl)]
              for f, m, fl in zip(c.unexplained_hz, c.unexplained_db, c.unexplained_floor_db)]
    lines += [["not-seen", s, int(n), f"{f / 1e6:.3f}", _csv_number(p), "", "", _csv_number(fl)]
              for s, n, f, p, fl in zip(c.not_seen_source, c.not_seen_harmonic, c.not_seen_hz,
                                        c.not_seen_predicted_db, c.not_seen_floor_db)]
    return _csv(head, lines)


def scan_png(est: Estimate, c, fitted: Estimate | None = None) -> bytes:
    """The overlay of a scan on the prediction (and on the fitted board's, when given) as PNG bytes."""
    from .plot import png_bytes, scan_figure

    detectors = tuple(c.scan.traces)
    fitted_swept = swept_spectrum(fitted, detectors) if fitted is not None else None
    return png_bytes(scan_figure(est, c, swept_spectrum(est, detectors), fitted_swept))


def compare_files(est: Estimate, c) -> dict:
    """Every file ``compare --out`` writes: name -> function giving its contents."""
    return {"compare.json": lambda: json.dumps(compare_dict(c), indent=1, allow_nan=False) + "\n",
            "compare-peaks.csv": lambda: compare_csv_text(c),
            "compare.png": lambda: scan_png(est, c)}


def fit_dict(result) -> dict:
    """``emispec.fit/1``: the fitted keys (SI; dB for gains) with standard errors, residuals before and after."""
    from .scan import residual_stats

    c = result.before
    parameters = {}
    for j, key in enumerate(result.keys):
        parameters[key] = {
            "nominal": _num(result.nominal[j], 12), "fitted": float(f"{result.fitted[j]:.6g}"),
            "unit": result.units[j], "stderr": _number_or_none(float(f"{result.stderr[j]:.3g}")),
            "constrained_by": [{"source": str(c.source[i]), "harmonic": int(c.harmonic[i]),
                                "frequency_hz": _num(c.peak_hz[i], 0), "share": _num(s, 3)}
                               for i, s in zip(result.constraining[j], result.shares[j])],
        }
    return {
        "schema": FIT_SCHEMA,
        "emispec_version": __version__,
        "caution": CAUTION,
        "scan": {"file": c.scan.file, "unit": c.scan.unit, "detector": c.scan.detector, "notes": list(c.scan.notes)},
        "parameters": parameters,
        "residual_db": {"before": _stats(c.residual()), "after": _stats(residual_stats(result.after_difference_db))},
        "evaluations": result.iterations,
        "matched": _match_dicts(c, result.after_difference_db),
        "unexplained": _unexplained_dicts(c),
    }


def _html_scan_section(est: Estimate, c) -> list[str]:
    """The report's scan section: the overlay and the match table."""
    from .plot import scan_figure, svg_text

    s = compare_dict(c)
    res = s["residual_db"]
    fmt = lambda x: "-" if x is None else f"{x:.1f}"  # noqa: E731
    matches = [[html.escape(m["source"]), str(m["harmonic"]), f"{m['frequency_hz'] / 1e6:.3f}",
                fmt(m["predicted_db"]), fmt(m["measured_db"]), fmt(m["difference_db"])] for m in s["matches"]]
    others = [["unexplained", "-", f"{u['frequency_hz'] / 1e6:.3f}", "-", fmt(u["measured_db"]), "-"]
              for u in s["unexplained"]]
    others += [[f"not seen: {html.escape(n['source'])}", str(n["harmonic"]), f"{n['frequency_hz'] / 1e6:.3f}",
                fmt(n["predicted_db"]), f"floor {fmt(n['floor_db'])}", "-"] for n in s["not_seen"]]
    unit = html.escape(c.scan.unit)
    head = ["source", "n", "MHz", f"predicted {unit}", f"measured {unit}", "difference dB"]
    return [
        f"<h2>Measured scan: {html.escape(c.scan.file)} ({c.scan.detector})</h2>",
        f"<p>{len(s['matches'])} peaks matched, {len(s['unexplained'])} unexplained, {len(s['not_seen'])} predicted "
        f"harmonics not seen; measured - predicted: median {fmt(res['median'])} dB, RMS {fmt(res['rms'])} dB."
        + "".join(f" {html.escape(n)}." for n in c.scan.notes) + "</p>",
        f"<figure>{svg_text(scan_figure(est, c, swept_spectrum(est, tuple(c.scan.traces))))}</figure>",
        _html_table(head, matches + others, {0}),
    ]
