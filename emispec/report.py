"""Output edge: JSON (SPEC 3.5), CSV and Markdown tables, written atomically.

Numbers leave the core as dB arrays with NaN for "does not exist"; here NaN
becomes JSON ``null`` and the word ``null`` in tables.  Every file goes to a
temporary name in its destination folder and is renamed into place, so an
interrupted or failed run never leaves a half-written file over a good one.
"""

from __future__ import annotations

import csv
import html
import io
import json
import math
import os
import tempfile
from pathlib import Path


from . import __version__
from .decoupling import rail_summary
from .explore import PLAN_COLUMNS
from .margin import FLAGS, Estimate

__all__ = [
    "CAUTION", "SCHEMA", "result_dict", "row_dict", "csv_text", "swept_csv_text", "markdown_text", "atomic_write",
    "write_outputs", "plan_csv_text", "plan_markdown_text", "variants_rows", "variants_csv_text", "html_text",
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


def row_dict(est: Estimate, i: int) -> dict:
    """One row of SPEC 3.5."""
    r = est.rows
    detectors = est.board.limit.detectors
    limits = {d: _num(r.limits[d][i]) for d in detectors if math.isfinite(r.limits[d][i])}
    row = {
        "source": str(r.source[i]),
        "harmonic": int(r.harmonic[i]),
        "frequency_hz": float(r.frequency_hz[i]),
        "line_dbuv": _num(r.line_dbuv[i]),
        "line_dbua": _num(r.line_dbua[i]),
        "band_hz": [float(r.band_lo_hz[i]), float(r.band_hi_hz[i])] if r.spread[i] else None,
        "paths": {
            p: {d: _num(r.path_readings[p][d][i]) for d in detectors}
            for p in est.source_paths[str(r.source[i])]
        },
        "readings": {d: _num(r.readings[d][i]) for d in detectors},
        "spread_reduction_db": {d: _num(r.spread_reduction_db[d][i]) for d in detectors} if r.spread[i] else None,
        "limits": limits,
        "margin_db": {d: _num(r.margins[d][i]) for d in limits},
        "worst_margin_db": _num(r.worst_margin_db[i]),
        "flags": r.flag_list(i),
    }
    if est.board.rails:
        row["decoupling_impedance_ohm"] = _num(r.decoupling_impedance_ohm[i], 6)
        row["required_impedance_ohm"] = _num(r.required_impedance_ohm[i], 6)
        row["suppression_db"] = _num(r.suppression_db[i])
    return row


def result_dict(est: Estimate) -> dict:
    """The whole result as SPEC 3.5 (schema ``emispec.result/1``)."""
    board, limit = est.board, est.board.limit
    worst = None
    if est.worst_index is not None:
        row = row_dict(est, est.worst_index)
        worst = {k: row[k] for k in ("source", "harmonic", "frequency_hz", "worst_margin_db")}
        worst["detector"] = est.rows.worst_detector[est.worst_index]
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
        "rails": [rail_summary(rail, est.span_hz) for rail in board.rails.values()],
        "span_hz": [est.span_hz[0], est.span_hz[1]],
        "rows": [row_dict(est, i) for i in range(len(est.rows))],
        "summary": {
            "rows": len(est.rows),
            "over_limit": est.over_limit,
            "within_guard_band": est.within_guard_band,
            "worst": worst,
            "verdict": est.verdict(),
        },
    }


def _cell(x) -> str:
    return "null" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.2f}"


RAIL_COLUMNS = ("decoupling_impedance_ohm", "required_impedance_ohm", "suppression_db")


def _table_columns(est: Estimate) -> list[str]:
    dets = est.board.limit.detectors
    return (
        ["source", "harmonic", "frequency_hz", "band_lo_hz", "band_hi_hz", "line_dbuv", "line_dbua"]
        + [f"{kind}_{d}" for d in dets for kind in ("reading", "limit", "margin", "ssc_reduction")]
        + (list(RAIL_COLUMNS) if est.board.rails else [])
        + ["worst_margin_db", "flags"]
    )


def _impedance_cell(x) -> str:
    return "null" if not math.isfinite(x) else f"{x:.4g}"


def _table_rows(est: Estimate, count: int | None = None):
    r, dets = est.rows, est.board.limit.detectors
    for i in range(len(r) if count is None else min(count, len(r))):
        yield (
            [str(r.source[i]), str(int(r.harmonic[i])), f"{r.frequency_hz[i]:.10g}", f"{r.band_lo_hz[i]:.10g}",
             f"{r.band_hi_hz[i]:.10g}", _cell(r.line_dbuv[i]), _cell(r.line_dbua[i])]
            + [_cell(col[d][i]) for d in dets for col in (r.readings, r.limits, r.margins, r.spread_reduction_db)]
            + ([_impedance_cell(r.decoupling_impedance_ohm[i]), _impedance_cell(r.required_impedance_ohm[i]),
                _cell(r.suppression_db[i])] if est.board.rails else [])
            + [_cell(r.worst_margin_db[i]), " ".join(r.flag_list(i))]
        )


def csv_text(est: Estimate) -> str:
    """All rows, worst first; levels in the limit's unit."""
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n# levels in {est.board.limit.unit}; limit {est.board.limit.name}\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(_table_columns(est))
    writer.writerows(_table_rows(est))
    return buffer.getvalue()


def swept_csv_text(est: Estimate, frequency_hz, readings: dict) -> str:
    """The swept spectrum: frequency, detector readings and the limit's lines, in the limit's unit."""
    limits = est.board.limit.levels(frequency_hz)
    buffer = io.StringIO()
    buffer.write(f"# {CAUTION}\n# swept receiver readings in {est.board.limit.unit}, all sources together; "
                 "steps of RBW/2 plus every unmodulated line\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["frequency_hz", *readings, *(f"limit_{d}" for d in limits)])
    for k, f in enumerate(frequency_hz):
        writer.writerow([f"{f:.10g}", *(_cell(v[k]) for v in readings.values()),
                         *(_cell(v[k]) for v in limits.values())])
    return buffer.getvalue()


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|").replace("<", "&lt;").replace(">", "&gt;")


def markdown_text(est: Estimate, count: int = 50) -> str:
    """A readable report: verdict, limit, and the worst rows."""
    b, lim = est.board, est.board.limit
    head = _table_columns(est)
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
        f"- emispec {__version__}",
        "",
        f"## Worst {min(count, len(est.rows))} of {len(est.rows)} harmonics",
        "",
        "| " + " | ".join(head) + " |",
        "|" + "---|" * len(head),
    ]
    lines += ["| " + " | ".join(_md_escape(c) for c in row) + " |" for row in _table_rows(est, count)]
    flags = ", ".join(FLAGS)
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


def write_outputs(est: Estimate, out_dir: Path, stem: str = "estimate") -> list[Path]:
    """Write CSV, Markdown, JSON, the swept spectrum and the plots (spectrum, swept, rails) into ``out_dir``.

    All files are first rendered into a temporary folder inside ``out_dir``
    and then renamed into place, so a failure leaves nothing half-written.
    """
    from .margin import swept_spectrum
    from .plot import png_bytes, rail_figure, spectrum_figure, swept_figure  # matplotlib is slow to import

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(dir=out_dir, prefix=".emispec-"))
    try:
        swept_hz, swept = swept_spectrum(est)
        contents = {
            f"{stem}.json": json_text(est),
            f"{stem}.csv": csv_text(est),
            f"{stem}.md": markdown_text(est),
            f"{stem}-swept.csv": swept_csv_text(est, swept_hz, swept),
        }
        for name, text in contents.items():
            (staging / name).write_text(text, encoding="utf-8")
        figures = [(f"{stem}-spectrum.png", lambda: spectrum_figure(est)),
                   (f"{stem}-swept.png", lambda: swept_figure(est, swept_hz, swept))]
        figures += [(f"{stem}-rail-{file_part(name)}.png", lambda name=name: rail_figure(est, name))
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
    "Clock harmonics: exact Fourier series of a trapezoid with linear edges (edge times converted to 0-100 %).",
    "Spread spectrum: each harmonic frequency-modulated with n times the deviation; lines from an FFT of one "
    "modulation period.",
    "Receiver: CISPR 16-1-1 bands and 6 dB bandwidths with a Gaussian filter; PK, meter-weighted AV and the QP "
    "detector solved to steady state; a CW sine reads its RMS value.",
    "Radiation: electrically small loops and short cables (lambda/2 cap) in the far field, direction of maximum "
    "radiation, referred to the limit distance by inverse distance; ground reflection as set per path.",
    "Decoupling: parts in parallel at the IC pins, lumped; escaping current by the current divider into the supply "
    "path and its termination (LISN or common-mode impedance).",
    "Paths of one source add in power; sources add in power unless they share a reference (then in amplitude).",
)

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
    dets = est.board.limit.detectors
    head = ["source", "n", "MHz", *(f"{d} reading" for d in dets), *(f"{d} limit" for d in dets),
            *(f"{d} margin" for d in dets), "worst", "flags"]
    out = ["<table><thead><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in head) + "</tr></thead><tbody>"]
    for i in range(min(count, len(r))):
        cls = "over" if r.flags["over-limit"][i] else "guard" if r.flags["within-guard-band"][i] else ""
        cells = [f'<td class="text">{html.escape(str(r.source[i]))}</td>', f"<td>{r.harmonic[i]}</td>",
                 f"<td>{r.frequency_hz[i] / 1e6:.6g}</td>"]
        cells += [f"<td>{_cell(col[d][i])}</td>" for col in (r.readings, r.limits, r.margins) for d in dets]
        cells += [f"<td>{_cell(r.worst_margin_db[i])}</td>",
                  f'<td class="text">{html.escape(" ".join(r.flag_list(i)))}</td>']
        out.append(f'<tr class="{cls}">' + "".join(cells) + "</tr>")
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


def html_text(est: Estimate, plan: list[dict], variants=None, rows: int = 60) -> str:
    """One self-contained HTML report: inline SVG plots, no scripts, no external assets.

    User text (titles, names, notes) is escaped.
    """
    from .margin import swept_spectrum
    from .plot import rail_figure, spectrum_figure, svg_text, swept_figure, variants_figure

    b, lim = est.board, est.board.limit
    verdict = est.verdict()
    swept_hz, swept = swept_spectrum(est)
    figures = [("Harmonic readings against the limit", spectrum_figure(est)),
               ("Swept receiver readings (all sources)", swept_figure(est, swept_hz, swept))]
    figures += [(f"Rail {name}: |Z_dec| and what each harmonic needs", rail_figure(est, name)) for name in b.rails]
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{html.escape(b.title)} - emispec estimate</title>", f"<style>{_CSS}</style></head><body>",
        f"<h1>{html.escape(b.title)}</h1>",
        f'<p class="caution">{html.escape(CAUTION)}</p>',
        f'<p class="verdict {verdict.split(":")[0].split()[0]}">{html.escape(verdict)}</p>',
        "<h2>Board and assumptions</h2><ul>",
        f"<li>Board file: <code>{html.escape(b.file)}</code>, sha256 <code>{html.escape(b.sha256)}</code></li>",
        f"<li>Limit: {html.escape(lim.title)} (<code>{html.escape(lim.name)}</code>), {html.escape(lim.measurement)}"
        + (f" at {lim.distance_m:g} m" if lim.distance_m else "") + f", {html.escape(lim.unit)}; source: "
        f"{html.escape(lim.source)}</li>",
        f"<li>Guard band {b.guard_band_db:g} dB; analysed {est.span_hz[0] / 1e6:g} to {est.span_hz[1] / 1e6:g} MHz; "
        f"{len(b.clocks)} clocks, {len(b.currents)} current sources, {len(b.rails)} rails, {len(b.paths)} paths</li>",
        f"<li>emispec {html.escape(__version__)}</li></ul><ul>",
        *(f"<li>{html.escape(a)}</li>" for a in ASSUMPTIONS),
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
