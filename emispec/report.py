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
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__
from .columns import column_values, columns_for, header_cells, json_row, text_cells, verdict_text
from .flags import names as flag_names
from .pipeline import Estimate, RailView, envelope_traces, rail_view, swept_spectrum
from .plan import PLAN_COLUMNS
from .trace import Trace

__all__ = [
    "CAUTION", "SCHEMA", "Views", "views_of", "result_dict", "row_dict", "csv_text", "swept_csv_text",
    "markdown_text", "atomic_write", "write_outputs", "plan_csv_text", "plan_markdown_text", "variants_rows",
    "variants_csv_text", "html_text",
]

SCHEMA = "emispec.result/1"
CAUTION = (
    "Estimate only: final compliance is decided by measurement at an accredited lab "
    "under the applicable regulations and standards."
)


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


def views_of(est: Estimate) -> Views:
    """The swept spectrum, the sources' envelopes on the plot grid, and every rail's view."""
    lo, hi = est.span_hz
    return Views(swept_spectrum(est), envelope_traces(est, np.geomspace(lo, hi, 2000)),
                 {name: rail_view(est, name) for name in est.board.rails})


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


def csv_text(est: Estimate) -> str:
    """All rows, worst first; levels in the limit's unit."""
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n# levels in {est.board.limit.unit}; limit {est.board.limit.name}\n")
    writer = csv.writer(buffer, lineterminator="\n")
    head, rows = _table(est, "csv")
    writer.writerow(head)
    writer.writerows(rows)
    return buffer.getvalue()


def swept_csv_text(est: Estimate, swept: dict[str, Trace]) -> str:
    """The swept spectrum: frequency, detector readings and the limit's lines, in the limit's unit."""
    frequency_hz = next(iter(swept.values())).frequency_hz
    limits = est.board.limit.levels(frequency_hz)
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n# swept receiver readings in {est.board.limit.unit}, all sources together; "
                 "steps of RBW/2 plus every unmodulated line\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["frequency_hz", *swept, *(f"limit_{d}" for d in limits)])
    for k, f in enumerate(frequency_hz):
        writer.writerow([f"{f:.10g}", *(_cell(t.level_db[k]) for t in swept.values()),
                         *(_cell(v[k]) for v in limits.values())])
    return buffer.getvalue()


def _cell(x) -> str:
    return "null" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.2f}"


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|").replace("<", "&lt;").replace(">", "&gt;")


def markdown_text(est: Estimate, count: int = 50) -> str:
    """A readable report: verdict, limit, and the worst rows."""
    b, lim = est.board, est.board.limit
    head, rows = _table(est, "md", count)
    lines = [
        f"# {_md_escape(b.title)}",
        "",
        f"> {CAUTION}",
        "",
        f"**Verdict:** {_md_escape(est.verdict())}",
        "",
        f"- Board file: `{b.file}` (sha256 `{b.sha256[:16]}`)",
        f"- Limit: {_md_escape(lim.title)} (`{lim.name}`), {lim.measurement}"
        + (f" at {lim.distance_m:g} m" if lim.distance_m else "")
        + f", {lim.unit}; source: {_md_escape(lim.source)}",
        f"- Guard band: {b.guard_band_db:g} dB; analysed {est.span_hz[0] / 1e6:g} to {est.span_hz[1] / 1e6:g} MHz",
        f"- {_combination_line(b)}",
        f"- emispec {__version__}",
        "",
        f"## Worst {min(count, len(est.rows))} of {len(est.rows)} harmonics",
        "",
        "| " + " | ".join(head) + " |",
        "|" + "---|" * len(head),
    ]
    lines += ["| " + " | ".join(_md_escape(c) for c in row) + " |" for row in rows]
    flags = ", ".join(flag_names())
    lines += ["", f"Flags: {flags}. Levels in {lim.unit}; `null` marks a spectral null or a missing value.", ""]
    return "\n".join(lines)


def file_part(name: str) -> str:
    """A user's name made safe for a file name."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _umask()


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})) as handle:
            handle.write(data)
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the file the permissions open() would
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def json_text(est: Estimate) -> str:
    return json.dumps(result_dict(est), indent=1, allow_nan=False) + "\n"


def write_outputs(est: Estimate, out_dir: Path, stem: str = "estimate", views: Views | None = None) -> list[Path]:
    """Write CSV, Markdown, JSON, the swept spectrum and the plots (spectrum, swept, rails) into ``out_dir``.

    All files are first rendered into a temporary folder inside ``out_dir``
    and then renamed into place, so a failure leaves nothing half-written.
    """
    from .plot import png_bytes, rail_figure, spectrum_figure, swept_figure  # matplotlib is slow to import

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(dir=out_dir, prefix=".emispec-"))
    try:
        views = views or views_of(est)
        contents = {
            f"{stem}.json": json_text(est),
            f"{stem}.csv": csv_text(est),
            f"{stem}.md": markdown_text(est),
            f"{stem}-swept.csv": swept_csv_text(est, views.swept),
        }
        for name, text in contents.items():
            (staging / name).write_text(text, encoding="utf-8")
        figures = [(f"{stem}-spectrum.png", lambda: spectrum_figure(est, views.envelopes)),
                   (f"{stem}-swept.png", lambda: swept_figure(est, views.swept))]
        figures += [(f"{stem}-rail-{file_part(name)}.png", lambda name=name: rail_figure(est, views.rails[name]))
                    for name in est.board.rails]
        for name, draw in figures:
            (staging / name).write_bytes(png_bytes(draw()))
        written = []
        for item in sorted(staging.iterdir()):
            os.replace(item, out_dir / item.name)
            written.append(out_dir / item.name)
        return written
    finally:
        for item in staging.iterdir():
            item.unlink()
        staging.rmdir()


# ---------------------------------------------------------------- test plan, variants, HTML


def plan_csv_text(est: Estimate, plan: list[dict]) -> str:
    """The test plan as CSV, levels in the limit's unit."""
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n# test plan for {est.board.title}; levels in {est.board.limit.unit}\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(PLAN_COLUMNS)
    for row in plan:
        writer.writerow([_plan_cell(row[c]) for c in PLAN_COLUMNS])
    return buffer.getvalue()


def _plan_cell(value) -> str:
    return f"{value:.6g}" if isinstance(value, float) else str(value)


def _plan_frequency(row: dict) -> str:
    if row["band_hi_hz"] > row["band_lo_hz"]:
        return f"{row['band_lo_hz'] / 1e6:.6g}-{row['band_hi_hz'] / 1e6:.6g} MHz"
    return f"{row['frequency_hz'] / 1e6:.6g} MHz"


def plan_markdown_text(est: Estimate, plan: list[dict]) -> str:
    """The test plan as a Markdown table, worst first."""
    unit = est.board.limit.unit
    lines = [f"# Test plan: {_md_escape(est.board.title)}", "", f"> {CAUTION}", "",
             f"Limit {est.board.limit.name} ({unit}), guard band {est.board.guard_band_db:g} dB. "
             f"{len(plan)} frequencies, worst margin first.", "",
             f"| # | source | n | frequency | CISPR band | RBW | detectors | expected {unit} | limit | margin dB | note |",
             "|---|---|---|---|---|---|---|---|---|---|---|"]
    for row in plan:
        lines.append(
            f"| {row['priority']} | {_md_escape(row['source'])} | {row['harmonic']} | {_plan_frequency(row)} | "
            f"{row['cispr_band']} | {row['rbw_hz'] / 1e3:g} kHz | {row['detectors']} | {row['expected']:.1f} | "
            f"{row['limit']:.1f} | {row['margin_db']:.1f} | {_md_escape(row['note'])} |")
    return "\n".join(lines) + "\n"


def variants_rows(variants) -> list[dict]:
    """Per variant: settings, worst margin and counts, overall and per detector."""
    out = []
    for v in variants:
        dets = v.estimate.board.limit.detectors
        row = {"variant": v.label, "settings": {k: str(x) for k, x in v.settings},
               "worst_margin_db": _num(v.worst_margin_db()), "over_limit": v.counts()[0],
               "within_guard_band": v.counts()[1]}
        for d in dets:
            over, guard = v.counts(d)
            row[f"worst_{d}"] = _num(v.worst_margin_db(d))
            row[f"over_{d}"], row[f"guard_{d}"] = over, guard
        out.append(row)
    return out


def variants_csv_text(variants) -> str:
    rows = variants_rows(variants)
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n")
    columns = [c for c in rows[0] if c != "settings"]
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow(["null" if row[c] is None else row[c] for c in columns])
    return buffer.getvalue()


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
body{font-family:system-ui,sans-serif;margin:2em;max-width:1200px;color:#222}
h1{font-size:1.5em} h2{font-size:1.2em;margin-top:2em;border-bottom:1px solid #ccc}
.caution{background:#fff4e5;border-left:4px solid #e69500;padding:.6em 1em}
.verdict{font-weight:bold;padding:.5em 1em;border-radius:4px}
.FAILS{background:#fde2e2}.MARGINAL{background:#fff4cc}.MEETS{background:#e2f5e2}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}
th,td{border:1px solid #ccc;padding:.2em .5em;text-align:right} th{background:#f0f0f0}
td.text{text-align:left} tr.over td{background:#fde2e2} tr.guard td{background:#fff4cc}
figure{margin:1em 0} svg{max-width:100%;height:auto}
"""


def _html_rows_table(est: Estimate, count: int) -> str:
    r = est.rows
    head, rows = _table(est, "html", count)
    text_columns = {0, len(head) - 1}  # the source and the flags read left-aligned
    out = ["<table><thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in head) + "</tr></thead><tbody>"]
    for i, cells in enumerate(rows):
        cls = "over" if r.flags["over-limit"][i] else "guard" if r.flags["within-guard-band"][i] else ""
        out.append(f'<tr class="{cls}">' + "".join(
            f'<td class="text">{html.escape(c)}</td>' if k in text_columns else f"<td>{html.escape(c)}</td>"
            for k, c in enumerate(cells)) + "</tr>")
    return "".join(out) + "</tbody></table>"


def _html_dict_table(rows: list[dict], columns) -> str:
    def fmt(v):
        if v is None:
            return "null"
        return f"{v:.4g}" if isinstance(v, float) else str(v)

    out = ["<table><thead><tr>" + "".join(f"<th>{html.escape(str(c))}</th>" for c in columns) + "</tr></thead><tbody>"]
    for row in rows:
        out.append("<tr>" + "".join(
            f'<td class="{"text" if isinstance(row[c], str) else ""}">{html.escape(fmt(row[c]))}</td>'
            for c in columns) + "</tr>")
    return "".join(out) + "</tbody></table>"


def html_text(est: Estimate, plan: list[dict], variants=None, rows: int = 60, views: Views | None = None) -> str:
    """One self-contained HTML report: inline SVG plots, no scripts, no external assets.

    User text (titles, names, notes) is escaped.
    """
    from .plot import rail_figure, spectrum_figure, svg_text, swept_figure, variants_figure

    b, lim = est.board, est.board.limit
    outcome = est.outcome
    verdict = verdict_text(outcome)
    views = views or views_of(est)
    figures = [("Harmonic readings against the limit", spectrum_figure(est, views.envelopes)),
               ("Swept receiver readings (all sources)", swept_figure(est, views.swept))]
    figures += [(f"Rail {name}: |Z_dec| and what each harmonic needs", rail_figure(est, views.rails[name]))
                for name in b.rails]
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
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
        f"{len(b.clocks)} clocks, {len(b.currents)} current sources, {len(b.rails)} rails, {len(b.paths)} paths</li>",
        f"<li>emispec {html.escape(__version__)}</li></ul><ul>",
        *(f"<li>{html.escape(a)}</li>" for a in (*ASSUMPTIONS, _combination_line(b))),
        "</ul>",
        f"<h2>Margin table (worst {min(rows, len(est.rows))} of {len(est.rows)}, {html.escape(lim.unit)})</h2>",
        _html_rows_table(est, rows),
    ]
    parts += [f"<h2>{html.escape(title)}</h2><figure>{svg_text(fig)}</figure>" for title, fig in figures]
    if variants:
        table = variants_rows(variants)
        columns = [c for c in table[0] if c != "settings"]
        parts += ["<h2>Variants</h2>", _html_dict_table(table, columns),
                  f"<figure>{svg_text(variants_figure(variants))}</figure>"]
    parts += [f"<h2>Test plan ({len(plan)} frequencies, worst first)</h2>",
              _html_dict_table(plan, PLAN_COLUMNS) if plan else "<p>Nothing within the guard band.</p>",
              f'<p class="caution">{html.escape(CAUTION)}</p>',
              f"<p>emispec {html.escape(__version__)}; input sha256 {html.escape(b.sha256)}</p></body></html>"]
    return "\n".join(parts) + "\n"
