"""Command line: parse arguments, call the core, format.  No physics here."""

from __future__ import annotations

import functools
import sys
from pathlib import Path
from typing import Optional

import numpy as np
import typer
from rich import box
from rich.console import Console
from rich.markup import escape as esc
from rich.table import Table

from . import __version__
from .board import BoardError, load_board
from .columns import column_values, columns_for, header_cells, text_cells, verdict_text
from .flags import FLAGS
from .limits import LimitError, bundled_limits, load_limit
from .parameters import Template, scope_of
from .pipeline import estimate as run_estimate
from .report import CAUTION, atomic_write, file_part, json_text, write_outputs
from .units import format_quantity

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help=f"Estimate clock-harmonic emissions of a board and their margins to a limit line.\n\n{CAUTION}",
)
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


class OutputError(Exception):
    """An output that cannot be written (a user problem: exit 2)."""


def _guarded(command):
    """Turn input problems into one line on stderr and exit 2, anything else into exit 1."""

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except (BoardError, LimitError, OutputError) as problem:
            err.print(f"error: {problem}", markup=False, soft_wrap=True)
            raise typer.Exit(2) from None
        except typer.Exit:
            raise
        except Exception as problem:  # noqa: BLE001 - the last line of defence
            err.print(f"internal error: {type(problem).__name__}: {problem} (please report it)", markup=False,
                      soft_wrap=True)
            raise typer.Exit(1) from None

    return wrapper


def _fmt(x: float) -> str:
    return "null" if not x == x else f"{x:.1f}"


def _margin_style(margin: float, guard: float) -> str:
    if not margin == margin:
        return "dim"
    return "bold red" if margin < 0 else "yellow" if margin < guard else "green"


_VERDICT_STYLE = {"fails": "bold red", "marginal": "bold yellow", "meets": "bold green", "no-data": "bold"}


@app.command()
@_guarded
def estimate(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    json_path: Optional[str] = typer.Option(None, "--json", help="Write the JSON result to PATH, or '-' for stdout."),
    out_dir: Optional[Path] = typer.Option(None, "--out", help="Write CSV, Markdown, JSON and a spectrum plot here."),
    rows: int = typer.Option(20, "--rows", min=0, help="How many of the worst rows to print (0: all)."),
) -> None:
    """Estimate every clock harmonic's reading and margin, worst first."""
    result = run_estimate(load_board(board))
    to_stdout = json_path == "-"
    if json_path and not to_stdout:
        _write(lambda: atomic_write(Path(json_path), json_text(result)), json_path)
    if out_dir is not None:
        _write(lambda: write_outputs(result, out_dir), str(out_dir))
    if to_stdout:
        sys.stdout.write(json_text(result))
        err.print(verdict_text(result.outcome), markup=False)
        return
    _print_table(result, rows)


def _write(action, where: str) -> None:
    try:
        action()
    except OSError as problem:
        raise OutputError(f"{where}: cannot write output ({problem.strerror or problem}); nothing was written") from None


def _write_into(folder: Path, files: dict) -> None:
    """Render each file (name -> function giving text or bytes) and write it atomically into ``folder``."""
    def write():
        Path(folder).mkdir(parents=True, exist_ok=True)
        for name, render in files.items():
            atomic_write(Path(folder) / name, render())

    _write(write, str(folder))


def _print_verdict(result) -> None:
    outcome = result.outcome
    out.print(f"[{_VERDICT_STYLE[outcome.kind]}]{esc(verdict_text(outcome))}[/]")


def _print_table(result, count: int) -> None:
    rows, board = result.rows, result.board
    shown = len(rows) if count == 0 else min(count, len(rows))
    unit = board.limit.unit
    legend = ", ".join(f"{flag.short} ({flag.meaning})" for flag in sorted(FLAGS.values(), key=lambda f: f.rank))
    table = Table(title=f"{esc(board.title)}\nworst {shown} of {len(rows)} harmonics against "
                  f"{esc(board.limit.name)} ({unit})",
                  title_style="bold", caption="reading, limit, margin: the detector with the least margin. SSC dB: what "
                  f"the spread buys there. flags: {legend}; +name: another source within one RBW. --json and --out "
                  "give every detector.", caption_style="dim")
    columns = columns_for(result, "term")
    for c, head in zip(columns, header_cells(result, columns, "term")):
        left = c.kind in ("text", "flags")
        table.add_column(head, justify="left" if left else "right", no_wrap=c.kind != "flags", overflow="fold")
    values = column_values(result, columns)
    margin_at = [c.name for c in columns].index("worst_margin")
    for i in range(shown):
        cells = [esc(cell) for cell in text_cells(result, columns, values, i, "term")]
        style = _margin_style(rows.worst_margin_db[i], board.guard_band_db)
        cells[margin_at] = f"[{style}]{cells[margin_at]}[/]"
        table.add_row(*cells)
    out.print(table)
    _print_verdict(result)
    out.print(f"[dim]{CAUTION}[/]")


@app.command()
@_guarded
def limits(name: Optional[str] = typer.Argument(None, help="Show this limit's points (bundled name or file).")) -> None:
    """List the bundled limit lines, or show one limit's points."""
    if name is not None:
        limit = load_limit(name)
        out.print(f"[bold]{esc(limit.title)}[/] ({esc(limit.name)})\nsource: {esc(limit.source)}\n"
                  f"{limit.measurement}" + (f" at {limit.distance_m:g} m" if limit.distance_m else "")
                  + f", {limit.unit}", markup=True)
        for det, line in limit.lines.items():
            points = ", ".join(f"{f / 1e6:g} MHz {y:g}" for f, y in zip(line.frequency_hz, line.level_db))
            out.print(f"  {det}: {points}", markup=False)
        return
    table = Table(title="Bundled limits", title_style="bold", box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False,
                  padding=(0, 1), collapse_padding=True)
    table.add_column("name", no_wrap=True, min_width=31)
    for col in ("measured", "unit", "detectors", "span MHz"):
        table.add_column(col, no_wrap=True)
    sources = []
    for key in bundled_limits():
        limit = load_limit(key)
        lo, hi = limit.span_hz
        measured = limit.measurement + (f" {limit.distance_m:g} m" if limit.distance_m else "")
        table.add_row(key, measured, limit.unit, " ".join(limit.detectors), f"{lo / 1e6:g}-{hi / 1e6:g}")
        sources.append(f"[bold]{esc(key)}[/]: {esc(limit.source)}")
    out.print(table)
    out.print("Sources:\n" + "\n".join(sources))
    out.print(f"[dim]{CAUTION}[/]")


def _part_cells(part: dict) -> list[str]:
    kind = part["kind"]
    if kind == "capacitor":
        value = format_quantity(part["capacitance_f"], "F")
        detail = f"ESR {format_quantity(part['esr_ohm'], 'ohm')}, L {format_quantity(part['inductance_h'], 'H')}"
    elif kind == "plane":
        value, detail = format_quantity(part["capacitance_f"], "F"), "plane pair"
    elif kind == "regulator":
        value = format_quantity(part["resistance_ohm"], "ohm")
        detail = f"L {format_quantity(part['inductance_h'], 'H')}"
    else:
        value, detail = "measured", str(part["file"])
    srf = format_quantity(part["srf_hz"], "Hz") if part["srf_hz"] else "-"
    return [kind, value, detail, str(part["count"]), srf]


@app.command()
@_guarded
def rails(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    out_dir: Path = typer.Option(Path("."), "--out", help="Folder for the rail plots (rail-NAME.png)."),
) -> None:
    """Each rail's parts with self-resonances, anti-resonance peaks, and a plot of |Z_dec| with the harmonics."""
    from .pipeline import rail_view
    from .plot import png_bytes, rail_figure

    result = run_estimate(load_board(board))
    if not result.board.rails:
        raise OutputError(f"{board}: rail: the board defines no [[rail]]")
    rows = result.rows
    for name, rail in result.board.rails.items():
        view = rail_view(result, name)
        summary = view.summary
        target = f", target {format_quantity(rail.target_ohm, 'ohm')}" if rail.target_ohm else ""
        table = Table(title=f"rail {esc(name)} ({rail.voltage_v:g} V{target})", title_style="bold")
        for col in ("part", "value", "detail", "count", "self-resonance"):
            table.add_column(col)
        for part in summary["parts"]:
            table.add_row(*map(esc, _part_cells(part)))
        out.print(table)
        for peak in summary["anti_resonances"]:
            lo, hi = peak["band_hz"]
            out.print(f"  anti-resonance {format_quantity(peak['frequency_hz'], 'Hz')}: "
                      f"{format_quantity(peak['impedance_ohm'], 'ohm')} (within 3 dB from "
                      f"{format_quantity(lo, 'Hz')} to {format_quantity(hi, 'Hz')})", markup=False)
        on_rail = np.isin(rows.source, [s.name for s in result.board.sources if s.rail == name])
        failing = on_rail & rows.flags["decoupling-insufficient"]
        out.print(f"  {int(failing.sum())} of {int(on_rail.sum())} harmonics drawn from this rail escape more than "
                  f"the guard band allows", markup=False)
        for i in np.flatnonzero(failing)[:10]:
            out.print(f"    {rows.source[i]} n={rows.harmonic[i]} {format_quantity(rows.frequency_hz[i], 'Hz')}: "
                      f"|Z_dec| {format_quantity(rows.decoupling_impedance_ohm[i], 'ohm')}, needs <= "
                      f"{format_quantity(rows.required_impedance_ohm[i], 'ohm')}", markup=False)
        plot_name = f"rail-{file_part(name)}.png"
        _write_into(out_dir, {plot_name: lambda view=view: png_bytes(rail_figure(result, view))})
        out.print(f"  plot: {Path(out_dir) / plot_name}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


def _parse_sets(sets: list[str]) -> dict[str, list]:
    """``KEY=V1,V2`` options into key -> values; plain numbers become numbers, the rest stays text."""
    changes = {}
    for item in sets:
        key, sep, values = item.partition("=")
        if not sep or not key.strip() or not values.strip():
            raise OutputError(f"--set {item!r}: write KEY=VALUE1,VALUE2, e.g. 'clock[cpu].rise_time=0.5 ns,1 ns'")
        changes[key.strip()] = [_plain(v.strip()) for v in values.split(",")]
    return changes


def _plain(text: str):
    for kind in (int, float):
        try:
            return kind(text)
        except ValueError:
            pass
    return text


def _progress(total: int, what: str):
    from rich.progress import Progress

    progress = Progress(console=err, transient=True)
    task = progress.add_task(what, total=total)
    return progress, (lambda count=1: progress.advance(task, count))


def _run_variants(board: Path, sets: list[str], zipped: bool):
    from .ensemble import process_pool
    from .explore import vary

    template = Template.load(board)
    changes = _parse_sets(sets)
    lengths = [len(v) for v in changes.values()]
    total = lengths[0] if zipped else int(np.prod(lengths))
    progress, advance = _progress(total, f"{total} variants")
    with progress:
        if total < 4:
            return vary(template, changes, "zip" if zipped else "cross", progress=advance)
        with process_pool() as pool:
            return vary(template, changes, "zip" if zipped else "cross", progress=advance, executor=pool)


@app.command("vary")
@_guarded
def vary_command(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    sets: list[str] = typer.Option(..., "--set", help="KEY=V1,V2,... e.g. 'clock[cpu].rise_time=0.5 ns,1 ns'; "
                                   "repeat for more keys."),
    zipped: bool = typer.Option(False, "--zip", help="Take the value lists side by side instead of crossing them."),
    out_dir: Optional[Path] = typer.Option(None, "--out", help="Write variants.csv and variants.png here."),
) -> None:
    """Compare design choices: the worst margin and counts of each variant, per detector."""
    from .plot import png_bytes, variants_figure
    from .report import variants_csv_text, variants_rows

    variants = _run_variants(board, sets, zipped)
    rows = variants_rows(variants)
    dets = variants[0].estimate.board.limit.detectors
    table = Table(title=f"{len(rows)} variants of {esc(variants[0].estimate.board.title)}", title_style="bold")
    for col in ("variant", "worst dB", "over", "guard", *(f"{d} worst" for d in dets)):
        table.add_column(col, justify="left" if col == "variant" else "right")
    guard = variants[0].estimate.board.guard_band_db
    for row in rows:
        worst = row["worst_margin_db"]
        style = _margin_style(float("nan") if worst is None else worst, guard)
        table.add_row(esc(row["variant"]), f"[{style}]{_fmt(float('nan') if worst is None else worst)}[/]",
                      str(row["over_limit"]), str(row["within_guard_band"]),
                      *(_fmt(float("nan") if row[f"worst_{d}"] is None else row[f"worst_{d}"]) for d in dets))
    out.print(table)
    if out_dir is not None:
        _write_into(out_dir, {"variants.csv": lambda: variants_csv_text(variants),
                              "variants.png": lambda: png_bytes(variants_figure(variants))})
    out.print(f"[dim]{CAUTION}[/]")


@app.command("solve")
@_guarded
def solve_command(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    key: str = typer.Option(..., "--value", help="Key path to solve for, e.g. 'clock[cpu].rise_time'."),
    span: str = typer.Option(..., "--range", help="Search range 'LOW..HIGH' with units, e.g. '0.2 ns..5 ns'."),
    points: int = typer.Option(17, "--points", min=5, max=200, help="Scan points before refining."),
    whole_board: bool = typer.Option(False, "--whole-board",
                                     help="Judge every source's harmonics, not only the source the key belongs to."),
) -> None:
    """Find the value at which the board just keeps the guard band (fastest edge, least spread, largest loop)."""
    from .explore import solve

    low, sep, high = span.partition("..")
    if not sep:
        raise OutputError(f"--range {span!r}: write LOW..HIGH, e.g. '0.2 ns..5 ns'")
    template = Template.load(board)
    scope = None if whole_board else scope_of(key)
    progress, advance = _progress(points + 40, f"solving {key}")
    try:
        with progress:
            solution = solve(template, key, low, high, points, progress=advance, scope=scope)
    except ValueError as problem:
        if isinstance(problem, BoardError):
            raise
        raise OutputError(f"--range {span!r}: {problem}") from None
    judged = f"the harmonics of {solution.scope}" if solution.scope else "every harmonic on the board"
    out.print(f"[bold]{esc(key)}[/] = [bold]{esc(solution.text)}[/] keeps the guard band on {esc(judged)} "
              f"({solution.direction}).")
    if solution.binding:
        out.print(f"  binding: {solution.binding}, margin {solution.margin_db:+.2f} dB", markup=False)
    out.print(f"  {'monotone' if solution.monotone else 'NOT monotone'} over the scan of {len(solution.scanned)} "
              f"points; crossings at {', '.join(f'{c:.4g}' for c in solution.crossings) or 'none'}", markup=False)
    if solution.note:
        out.print(f"  {solution.note}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


@app.command("plan")
@_guarded
def plan_command(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    everything: bool = typer.Option(False, "--all", help="Every harmonic, not only those over or near the limit."),
    out_dir: Optional[Path] = typer.Option(None, "--out", help="Write testplan.csv and testplan.md here."),
) -> None:
    """The pre-compliance test plan: what to measure first, with band, RBW, detector and expected reading."""
    from .plan import plan_rows
    from .report import plan_csv_text, plan_markdown_text

    result = run_estimate(load_board(board))
    plan = plan_rows(result, everything)
    unit = result.board.limit.unit
    table = Table(title=f"Test plan: {esc(result.board.title)} ({len(plan)} frequencies, worst first)",
                  title_style="bold", caption="notes below the table", caption_style="dim")
    for col in ("#", "source", "n", "frequency MHz", "band", "RBW", "det", f"expect {unit}", "margin"):
        table.add_column(col, justify="left" if col in ("source", "band", "det") else "right")
    for row in plan:
        freq = (f"{row['band_lo_hz'] / 1e6:.6g}-{row['band_hi_hz'] / 1e6:.6g}"
                if row["band_hi_hz"] > row["band_lo_hz"] else f"{row['frequency_hz'] / 1e6:.6g}")
        table.add_row(str(row["priority"]), esc(row["source"]), str(row["harmonic"]), freq, row["cispr_band"],
                      format_quantity(row["rbw_hz"], "Hz"), row["detectors"], f"{row['expected']:.1f}",
                      f"{row['margin_db']:.1f}")
    out.print(table)
    for row in plan:
        if row["note"]:
            out.print(f"  #{row['priority']}: {row['note']}", markup=False)
    if out_dir is not None:
        _write_into(out_dir, {"testplan.csv": lambda: plan_csv_text(result, plan),
                              "testplan.md": lambda: plan_markdown_text(result, plan)})
    out.print(f"[dim]{CAUTION}[/]")


@app.command("report")
@_guarded
def report_command(
    board: Path = typer.Argument(..., help="Board file (TOML)."),
    out_path: Path = typer.Option(..., "--out", help="The HTML file to write."),
    sets: Optional[list[str]] = typer.Option(None, "--set", help="Variants to include, as for `emispec vary`."),
    zipped: bool = typer.Option(False, "--zip", help="Take the --set value lists side by side."),
    everything: bool = typer.Option(False, "--all", help="Test plan with every harmonic."),
) -> None:
    """One self-contained HTML report: verdict, margins, plots, variants and test plan."""
    from .plan import plan_rows
    from .report import html_text

    result = run_estimate(load_board(board))
    variants = _run_variants(board, sets, zipped) if sets else None
    text = html_text(result, plan_rows(result, everything), variants)
    _write_into(out_path.parent, {out_path.name: lambda: text})
    out.print(f"report: {out_path}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


def _version(value: bool) -> None:
    if value:
        out.print(f"emispec {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version."),
) -> None:
    pass


def main() -> None:
    app()
