"""Output edge: JSON (SPEC 3.5), CSV and Markdown tables, written atomically.

Numbers leave the core as dB arrays with NaN for "does not exist"; here NaN
becomes JSON ``null`` and the word ``null`` in tables.  Every file goes to a
temporary name in its destination folder and is renamed into place, so an
interrupted or failed run never leaves a half-written file over a good one.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import tempfile
from pathlib import Path

import numpy as np

from . import __version__
from .decoupling import rail_summary
from .margin import FLAGS, Estimate

__all__ = ["CAUTION", "SCHEMA", "result_dict", "row_dict", "csv_text", "swept_csv_text", "markdown_text", "atomic_write", "write_outputs"]

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


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})) as handle:
            handle.write(data)
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
