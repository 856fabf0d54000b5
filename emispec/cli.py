"""Command line: parse arguments, call the core, format.  No physics here.

Only typer and rich are imported at start; each command imports what it needs, so ``--version`` and ``--help``
answer at once.
"""

from __future__ import annotations

import functools
import re
import sys
import threading
from pathlib import Path
from typing import Optional

import typer
from rich import box
from rich.console import Console
from rich.markup import escape as esc
from rich.table import Table

from . import CAUTION, __version__
from .errors import InputError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help=f"Estimate clock-harmonic emissions of a board and their margins to a limit line.\n\n{CAUTION}",
)
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)

BOARD = typer.Argument(..., metavar="BOARD.toml", help="Board file (TOML).", show_default=False)
BUDGET = typer.Option(1.0, "--budget", metavar="FACTOR", min=0.01, max=1000.0,
                      help="Multiply the work an estimate may take before it is refused (default 1).")


class OptionError(InputError):
    """A command-line option that cannot be used (exit 2)."""


def _guarded(command):
    """Turn input problems into one line on stderr and exit 2, anything else into exit 1."""

    @functools.wraps(command)
    def wrapper(*args, **kwargs):
        try:
            return command(*args, **kwargs)
        except InputError as problem:
            err.print(f"error: {problem}", markup=False, soft_wrap=True)
            raise typer.Exit(2) from None
        except typer.Exit:
            raise
        except KeyboardInterrupt:
            err.print("interrupted; nothing more was written", markup=False)
            raise typer.Exit(130) from None
        except Exception as problem:  # noqa: BLE001 - the last line of defence
            err.print(f"internal error: {type(problem).__name__}: {problem} (please report it)", markup=False,
                      soft_wrap=True)
            raise typer.Exit(1) from None

    return wrapper


def _fmt(x) -> str:
    return "-" if x is None or not x == x else f"{x:.1f}"


def _margin_style(margin: float, guard: float) -> str:
    if not margin == margin:
        return "dim"
    return "bold red" if margin < 0 else "yellow" if margin < guard else "green"


_VERDICT_STYLE = {"fails": "bold red", "marginal": "bold yellow", "meets": "bold green", "no-data": "bold"}


class _SlowProgress:
    """A progress bar that appears only when the work has taken more than ``delay`` seconds."""

    def __init__(self, what: str, delay: float = 1.0):
        self.what, self.delay = what, delay
        self.progress = self.task = None
        self.done, self.total = 0, None
        self.lock = threading.Lock()
        self.timer = threading.Timer(delay, self._show)
        self.timer.daemon = True

    def _show(self):
        from rich.progress import Progress

        with self.lock:
            self.progress = Progress(console=err, transient=True)
            self.task = self.progress.add_task(self.what, total=self.total, completed=self.done)
            self.progress.start()

    def update(self, done, total=None):
        with self.lock:
            self.done, self.total = done, total if total is not None else self.total
            if self.progress is not None:
                self.progress.update(self.task, completed=done, total=self.total)

    def advance(self, count: int = 1):
        self.update(self.done + count)

    def __enter__(self):
        self.timer.start()
        return self

    def __exit__(self, *exc):
        self.timer.cancel()
        with self.lock:
            if self.progress is not None:
                self.progress.stop()


def _estimate(board: Path, budget: float = 1.0):
    from .board import load_board
    from .pipeline import estimate

    loaded = load_board(board)
    with _SlowProgress("estimating") as bar:
        return estimate(loaded, progress=bar.update, budget=budget)


@app.command()
@_guarded
def estimate(
    board: Path = BOARD,
    json_path: Optional[str] = typer.Option(None, "--json", metavar="PATH",
                                            help="Write the JSON result to PATH, or '-' for stdout."),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write CSV, Markdown, JSON and the plots into DIR."),
    rows: int = typer.Option(20, "--rows", metavar="N", min=0,
                             help="How many of the worst rows to show (terminal and Markdown; 0: all)."),
    budget: float = BUDGET,
) -> None:
    """Estimate every harmonic's reading and margin, worst first (BOARD.toml: the board file)."""
    from .outputs import write_file
    from .report import json_text, write_outputs

    result = _estimate(board, budget)
    if json_path:
        write_file(json_path, json_text(result))
    if out_dir is not None:
        write_outputs(result, out_dir, rows=rows or len(result.rows))
    if json_path == "-":
        from .columns import verdict_text

        err.print(verdict_text(result.outcome), markup=False)
        return
    _print_table(result, rows)


def _print_legend() -> None:
    from .flags import FLAGS

    legend = "; ".join(f"{f.short} {f.meaning}" for f in sorted(FLAGS.values(), key=lambda f: f.rank)
                       if f.name not in ("over-limit", "within-guard-band"))  # the margin's colour says those
    out.print(f"[dim]read, limit, margin: the detector with the least margin (red: over the limit, yellow: inside "
              f"the guard band); path: the one carrying most of the reading; SSC dB: what the spread buys. "
              f"Flags: {esc(legend)}; +name (+N) other sources within one RBW. --json and --out give every "
              "detector and every path.[/]")


def _print_table(result, count: int) -> None:
    from .columns import column_values, columns_for, header_cells, text_cells, verdict_text

    rows, board = result.rows, result.board
    shown = len(rows) if count == 0 else min(count, len(rows))
    columns = columns_for(result, "term")
    wide = out.width >= 110
    if not wide:  # keep an 80-column table to one line a row
        columns = [c for c in columns if c.name not in ("cispr_band", "worst_ssc")]
    table = Table(title=f"{esc(board.title)}\nworst {shown} of {len(rows)} harmonics against "
                  f"{esc(board.limit.name)} ({board.limit.unit})", title_style="bold", title_justify="left",
                  box=box.SIMPLE_HEAD, pad_edge=False, padding=(0, 1), collapse_padding=True)
    for c, head in zip(columns, header_cells(result, columns, "term")):
        left = c.kind in ("text", "flags")
        table.add_column(head, justify="left" if left else "right", no_wrap=c.kind not in ("flags",),
                         overflow="fold")
    values = column_values(result, columns)
    margin_at = [c.name for c in columns].index("worst_margin_db")
    for i in range(shown):
        cells = [esc(cell) for cell in text_cells(result, columns, values, i, "term-wide" if wide else "term")]
        cells[margin_at] = f"[{_margin_style(rows.worst_margin_db[i], board.guard_band_db)}]{cells[margin_at]}[/]"
        table.add_row(*cells)
    out.print(table)
    _print_legend()
    outcome = result.outcome
    out.print(f"[{_VERDICT_STYLE[outcome.kind]}]{esc(verdict_text(outcome))}[/]")
    out.print(f"[dim]{CAUTION}[/]")


@app.command()
@_guarded
def limits(name: Optional[str] = typer.Argument(None, metavar="[NAME]",
                                                help="Show this limit's points (bundled name or file).")) -> None:
    """List the bundled limit lines, or show one limit's points (NAME: a bundled name or a file)."""
    from .limits import bundled_limits, load_limit

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
    from .units import format_quantity

    kind = part["kind"]
    if kind == "capacitor":
        value = format_quantity(part["capacitance_f"], "F")
        detail = f"ESR {format_quantity(part['esr_ohm'], 'ohm')}, L {format_quantity(part['inductance_h'], 'H')}"
    elif kind == "plane":
        value = format_quantity(part["capacitance_f"], "F")
        detail = "plane pair" + (f", tan delta {part['loss_tangent']:g}" if part["loss_tangent"] else "")
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
    board: Path = BOARD,
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write rail-NAME.png (|Z_dec| with the harmonics) into DIR."),
    budget: float = BUDGET,
) -> None:
    """Each rail's parts with self-resonances, anti-resonance peaks, and the harmonics it fails to short."""
    import numpy as np

    from .outputs import write_set
    from .pipeline import rail_view
    from .plot import png_bytes, rail_figure
    from .report import file_part
    from .units import format_quantity

    result = _estimate(board, budget)
    if not result.board.rails:
        raise OptionError(f"{board}: rail: the board defines no [[rail]]")
    rows = result.rows
    plots = {}
    for name, rail in result.board.rails.items():
        view = rail_view(result, name)
        summary = view.summary
        target = f", target {format_quantity(rail.target_ohm, 'ohm')}" if rail.target_ohm else ""
        table = Table(title=f"rail {esc(name)} ({rail.voltage_v:g} V{target})", title_style="bold",
                      title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False)
        for col in ("part", "value", "detail", "count", "self-resonance"):
            table.add_column(col)
        for part in summary["parts"]:
            table.add_row(*map(esc, _part_cells(part)))
        out.print(table)
        if summary["package"]:
            pkg = summary["package"]
            out.print(f"  package: {format_quantity(pkg['inductance_h'], 'H')}, "
                      f"{format_quantity(pkg['die_capacitance_f'], 'F')} on the die, resonance "
                      f"{format_quantity(pkg['resonance_hz'], 'Hz')}", markup=False)
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
            required = rows.required_impedance_ohm[i]
            need = (f"needs <= {format_quantity(required, 'ohm')}" if required > 0 else
                    "no |Z_dec| is enough: its other contributions alone exceed the limit minus the guard band")
            out.print(f"    {rows.source[i]} n={rows.harmonic[i]} {format_quantity(rows.frequency_hz[i], 'Hz')}: "
                      f"|Z_dec| {format_quantity(rows.decoupling_impedance_ohm[i], 'ohm')}, {need}", markup=False)
        plots[f"rail-{file_part(name)}.png"] = lambda view=view: png_bytes(rail_figure(result, view))
    if out_dir is not None:
        for path in write_set(out_dir, plots):
            out.print(f"plot: {path}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


def _plain(text: str):
    """A --set value as a board file would carry it: true/false, a whole number, a number, or text."""
    if text in ("true", "false"):
        return text == "true"
    if re.fullmatch(r"[-+]?\d{1,15}", text):
        return int(text)
    try:
        return float(text)
    except ValueError:
        return text


def _parse_sets(sets: list[str]) -> dict[str, list]:
    """``KEY=V1,V2`` options into key -> values."""
    changes: dict[str, list] = {}
    for item in sets:
        key, sep, values = item.partition("=")
        key = key.strip()
        if not sep or not key or not values.strip():
            raise OptionError(f"--set {item!r}: write KEY=VALUE1,VALUE2, e.g. 'clock[cpu].rise_time=0.5 ns,1 ns'")
        if key in changes:
            raise OptionError(f"--set {key}: given twice; give each key once with all its values")
        changes[key] = [_plain(v.strip()) for v in values.split(",")]
    return changes


#: Variants one command may run before it is refused (raise with --budget).
MAX_VARIANTS = 1000


def _run_variants(board: Path, sets: list[str], zipped: bool, workers: int | None, budget: float = 1.0):
    import numpy as np

    from .ensemble import process_pool
    from .explore import vary
    from .parameters import Template

    template = Template.load(board)
    changes = _parse_sets(sets)
    lengths = [len(v) for v in changes.values()]
    total = lengths[0] if zipped else int(np.prod(lengths))
    if total > MAX_VARIANTS * budget:
        raise OptionError(f"--set: {' x '.join(map(str, lengths))} values make {total} variants; the budget is "
                          f"{MAX_VARIANTS * budget:g} (raise it with --budget, or use --zip to pair the lists)")
    with _SlowProgress(f"{total} variants", delay=0.0) as bar:
        bar.update(0, total)
        if total < 4 or workers == 1:
            return vary(template, changes, "zip" if zipped else "cross", progress=bar.advance)
        with process_pool(workers) as pool:
            return vary(template, changes, "zip" if zipped else "cross", progress=bar.advance, executor=pool)


WORKERS = typer.Option(None, "--workers", metavar="N", min=1, max=256,
                       help="Processes to run the variants on (default: one per core).")


@app.command("vary")
@_guarded
def vary_command(
    board: Path = BOARD,
    sets: list[str] = typer.Option(..., "--set", metavar="KEY=V1,V2,...",
                                   help="Values of one key, e.g. 'clock\\[sdram_clk].rise_time=0.5 ns,1 ns'; repeat "
                                        "--set for more keys."),
    zipped: bool = typer.Option(False, "--zip", help="Take the value lists side by side instead of crossing them."),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR", help="Write variants.csv and variants.png."),
    workers: Optional[int] = WORKERS,
    budget: float = BUDGET,
) -> None:
    """Compare design choices: the worst margin, where it is, and counts of each variant, per detector."""
    from .outputs import write_set
    from .plot import png_bytes, variants_figure
    from .report import variants_csv_text, variants_rows

    variants = _run_variants(board, sets, zipped, workers, budget)
    rows = variants_rows(variants)
    guard = variants[0].estimate.board.guard_band_db
    keys = [k for k in rows[0] if k not in ("worst_margin_db", "worst_at", "over_limit", "within_guard_band")
            and not k.startswith(("worst_margin_", "over_", "guard_"))]
    detectors = [k[len("worst_margin_"):-len("_db")] for k in rows[0] if k.startswith("worst_margin_")
                 and k != "worst_margin_db"]
    table = Table(title=f"{len(rows)} variants of {esc(variants[0].estimate.board.title)}", title_style="bold",
                  title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False, padding=(0, 1), collapse_padding=True)
    for col in (*keys, "worst dB", "worst at", "over", "guard", *(f"{d.upper()} dB" for d in detectors)):
        table.add_column(esc(col), justify="left" if col in keys or col == "worst at" else "right")
    for row in rows:
        style = _margin_style(float("nan") if row["worst_margin_db"] is None else row["worst_margin_db"], guard)
        table.add_row(*(esc(row[k]) for k in keys), f"[{style}]{_fmt(row['worst_margin_db'])}[/]",
                      esc(row["worst_at"] or "-"), str(row["over_limit"]), str(row["within_guard_band"]),
                      *(_fmt(row[f"worst_margin_{d}_db"]) for d in detectors))
    out.print(table)
    out.print("[dim]worst dB: the least margin of each variant (all detectors); over / guard: harmonics over the "
              "limit / inside the guard band; per detector: its least margin (- where the limit has no such "
              "line).[/]")
    if out_dir is not None:
        write_set(out_dir, {"variants.csv": lambda: variants_csv_text(variants),
                            "variants.png": lambda: png_bytes(variants_figure(variants))})
    out.print(f"[dim]{CAUTION}[/]")


def _split_range(span: str) -> tuple[str, str]:
    parts = span.split("..")
    if "..." in span or len(parts) != 2 or not all(p.strip() for p in parts):
        raise OptionError(f"--range {span!r}: write LOW..HIGH with two dots, e.g. '0.2 ns..5 ns'")
    return parts[0].strip(), parts[1].strip()


@app.command("solve")
@_guarded
def solve_command(
    board: Path = BOARD,
    key: str = typer.Option(..., "--value", metavar="KEY", help="Key path to solve for, e.g. "
                                                                 "'clock\\[sdram_clk].rise_time'."),
    span: str = typer.Option(..., "--range", metavar="LOW..HIGH", help="Search range with units, e.g. "
                                                                       "'0.2 ns..5 ns'."),
    points: int = typer.Option(17, "--points", metavar="N", min=5, max=200, help="Scan points before refining."),
    whole_board: bool = typer.Option(False, "--whole-board",
                                     help="Judge every row as read, not only the source the key belongs to."),
) -> None:
    """Find the value at which the board just keeps the guard band (fastest edge, least spread, largest loop)."""
    from .explore import solve
    from .parameters import Template, scope_of

    low, high = _split_range(span)
    template = Template.load(board)
    scope = None if whole_board else scope_of(key)
    try:
        with _SlowProgress(f"solving {key}", delay=0.0) as bar:
            bar.update(0, points + 40)
            solution = solve(template, key, low, high, points, progress=bar.advance, scope=scope)
    except ValueError as problem:
        if isinstance(problem, InputError):
            raise
        raise OptionError(f"--range {span!r}: {problem}") from None
    judged = f"the harmonics of {solution.scope}" if solution.scope else "every harmonic on the board"
    if solution.value is None:
        out.print(f"[bold]{esc(key)}[/]: no value in {esc(low)}..{esc(high)} keeps the guard band on {esc(judged)}.")
    else:
        out.print(f"[bold]{esc(key)}[/] = [bold]{esc(solution.text)}[/] keeps the guard band on {esc(judged)} "
                  f"({solution.direction}).")
    if solution.binding:
        out.print(f"  binding: {solution.binding}, margin {solution.margin_db:+.2f} dB", markup=False)
    count = len(solution.crossings)
    if solution.value is not None and count:
        crossings = ", ".join(f"{c:.4g} {solution.unit}".strip() for c in solution.crossings)
        out.print(f"  {'monotone' if solution.monotone else 'NOT monotone'} over the scan of {len(solution.scanned)} "
                  f"points; {count} crossing{'s' if count > 1 else ''} at {crossings}", markup=False)
    if solution.note:
        out.print(f"  {solution.note}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


@app.command("plan")
@_guarded
def plan_command(
    board: Path = BOARD,
    everything: bool = typer.Option(False, "--all", help="Every harmonic, not only those over or near the limit."),
    top: int = typer.Option(10, "--top", metavar="N", min=1,
                            help="Where nothing is over or near the limit, the N closest rows."),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR", help="Write testplan.csv and testplan.md."),
    budget: float = BUDGET,
) -> None:
    """The pre-compliance test plan: what to measure first, with band, RBW, detector and expected reading."""
    from .outputs import write_set
    from .plan import plan_rows, resonance_lines
    from .report import plan_csv_text, plan_markdown_text
    from .units import format_quantity

    result = _estimate(board, budget)
    plan = plan_rows(result, everything, top)
    passing = not everything and not (result.over_limit or result.within_guard_band)
    unit = result.board.limit.unit
    title = (f"Test plan: {esc(result.board.title)} ({len(plan)} closest frequencies; all keep the guard band)"
             if passing else f"Test plan: {esc(result.board.title)} ({len(plan)} frequencies, worst first)")
    table = Table(title=title, title_style="bold", title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False,
                  padding=(0, 1), collapse_padding=True)
    for col in ("#", "source", "n", "MHz", "RBW", "det", f"expect {unit}", "margin", "path"):
        table.add_column(col, justify="left" if col in ("source", "det", "path") else "right")
    for row in plan:
        freq = (f"{row['band_lo_hz'] / 1e6:.6g}-{row['band_hi_hz'] / 1e6:.6g}"
                if row["band_hi_hz"] > row["band_lo_hz"] else f"{row['frequency_hz'] / 1e6:.6g}")
        table.add_row(str(row["priority"]), esc(row["source"]), str(row["harmonic"]), freq,
                      format_quantity(row["rbw_hz"], "Hz"), row["detectors"], f"{row['expected']:.1f}",
                      f"{row['margin_db']:.1f}", esc(row["path"] or "-"))
    out.print(table)
    for row in plan:
        if row["note"]:
            out.print(f"  #{row['priority']}: {row['note']}", markup=False)
    for line in resonance_lines(result):
        out.print(line, markup=False)
    if out_dir is not None:
        write_set(out_dir, {"testplan.csv": lambda: plan_csv_text(result, plan),
                            "testplan.md": lambda: plan_markdown_text(result, plan, passing)})
    out.print(f"[dim]{CAUTION}[/]")


SCAN = typer.Argument(..., metavar="SCAN", help="Receiver or analyser export (CSV/TSV; see README, 'Measured "
                      "scans').", show_default=False)
DETECTOR = typer.Option(None, "--detector", metavar="DET", help="Detector of a single unnamed level column: PK "
                        "(default), QP, AV or RMS-AV.")
SCAN_UNIT = typer.Option(None, "--unit", metavar="UNIT", help="Level unit when the header names none: dBuV/m, "
                         "dBuV, dBuA or dBm.")
FREQUENCY_UNIT = typer.Option(None, "--frequency-unit", metavar="UNIT", help="Frequency unit of a scan without a "
                              "header (default Hz): Hz, kHz, MHz or GHz.")
CORRECTIONS = typer.Option(None, "--correction", metavar="FILE", help="A correction table (frequency, dB) added to "
                           "every level: antenna factor and cable loss positive, preamp gain negative; repeatable.")
SCAN_DISTANCE = typer.Option(None, "--distance", metavar="DIST", help="Where the scan was taken ('10 m'; default: a "
                             "'distance' line in the file, else the limit's distance).")


@app.command("report")
@_guarded
def report_command(
    board: Path = BOARD,
    out_path: Path = typer.Option(..., "--out", metavar="FILE.html", help="The HTML file to write."),
    sets: Optional[list[str]] = typer.Option(None, "--set", metavar="KEY=V1,V2,...",
                                             help="Variants to include, as for `emispec vary`."),
    zipped: bool = typer.Option(False, "--zip", help="Take the --set value lists side by side."),
    everything: bool = typer.Option(False, "--all", help="Test plan with every harmonic."),
    rows: int = typer.Option(20, "--rows", metavar="N", min=1, help="How many of the worst rows the table shows."),
    workers: Optional[int] = WORKERS,
    samples: int = typer.Option(1000, "--samples", metavar="N", min=10, max=1_000_000,
                                help="Monte Carlo samples for the tolerance section (boards with "
                                     "\\[\\[tolerance]] entries)."),
    seed: int = typer.Option(1, "--seed", metavar="S", min=0, max=2**63 - 1, help="Seed of those samples."),
    scan: Optional[Path] = typer.Option(None, "--scan", metavar="SCAN", help="A measured scan to overlay and match "
                                        "(as for `emispec compare`)."),
    detector: Optional[str] = DETECTOR,
    unit: Optional[str] = SCAN_UNIT,
    frequency_unit: Optional[str] = FREQUENCY_UNIT,
    corrections: Optional[list[Path]] = CORRECTIONS,
    distance: Optional[str] = SCAN_DISTANCE,
    budget: float = BUDGET,
) -> None:
    """One self-contained HTML report: verdict, margins, plots, variants, tolerances, a measured scan and test
    plan."""
    from .outputs import write_file
    from .plan import plan_rows
    from .report import html_text
    from .scan import compare

    result = _estimate(board, budget)
    matched = None
    if scan is not None:
        matched = compare(result, _scan(scan, result.board.limit, detector, unit, frequency_unit, corrections,
                                        distance))
    variants = _run_variants(board, sets, zipped, workers, budget) if sets else None
    plan = plan_rows(result, everything, top=10)
    passing = not everything and not (result.over_limit or result.within_guard_band)
    risk = _study(board, samples, seed, None, None, budget)
    write_file(out_path, html_text(result, plan, variants, rows, passing=passing, risk=risk, scan=matched))
    out.print(f"report: {out_path}", markup=False)
    out.print(f"[dim]{CAUTION}[/]")


#: Margin cells (samples x rows) one study may hold before it is refused (raise with --budget): 500 MB.
MAX_RISK_CELLS = 125_000_000


def _study(board: Path, samples: int, seed: int, workers: int | None, scheduler: str | None, budget: float):
    """The tolerance study of ``board``: None when the board has no [[tolerance]]."""
    import contextlib

    from .ensemble import dask_client
    from .parameters import Template
    from .pipeline import estimate
    from .risk import SLOW_PIECE, Model, ModelPool, study
    from .tolerances import read_tolerances

    template = Template.load(board)
    tolerances = read_tolerances(template)
    if not tolerances:
        return None
    model = Model(template, tolerances)
    nominal = estimate(template.nominal)
    rows = len(nominal.rows)
    if samples * rows > MAX_RISK_CELLS * budget:
        raise OptionError(f"--samples {samples}: {samples} samples of {rows} harmonics would hold "
                          f"{samples * rows:.3g} margins; the budget is {MAX_RISK_CELLS * budget:.3g} (use fewer "
                          "samples, or raise it with --budget)")
    remote = workers is not None or scheduler is not None
    with contextlib.ExitStack() as stack:
        if remote:
            client = stack.enter_context(dask_client(workers, scheduler))
        elif model.slow and samples > SLOW_PIECE:  # samples that read sources again: every core of this machine
            client = stack.enter_context(ModelPool(model))
        else:
            client = None
        with _SlowProgress(f"{samples} samples", delay=0.0) as bar:
            bar.update(0, samples)
            return study(template, tolerances, samples, seed, executor=client, progress=bar.advance, model=model,
                         nominal=nominal)


def _percent(p: float, ci) -> str:
    from .report import percent_text

    return percent_text(p, ci)


@app.command("risk")
@_guarded
def risk_command(
    board: Path = BOARD,
    samples: int = typer.Option(2000, "--samples", metavar="N", min=10, max=10_000_000,
                                help="Monte Carlo samples of the tolerances."),
    seed: int = typer.Option(1, "--seed", metavar="S", min=0, max=2**63 - 1,
                             help="Seed of the draws; the same seed gives the same numbers."),
    json_path: Optional[str] = typer.Option(None, "--json", metavar="PATH",
                                            help="Write the JSON result to PATH, or '-' for stdout."),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write risk.json, risk.csv, risk-samples.csv and the plots into DIR."),
    rows: int = typer.Option(10, "--rows", metavar="N", min=1, help="How many harmonics the table shows."),
    workers: Optional[int] = typer.Option(None, "--workers", metavar="N", min=1, max=256,
                                          help="Run on a local Dask cluster of N processes (pip install "
                                               "'emispec\\[cluster]')."),
    scheduler: Optional[str] = typer.Option(None, "--scheduler", metavar="ADDRESS",
                                            help="Run on the Dask cluster whose scheduler is at ADDRESS "
                                                 "(tcp://HOST:PORT)."),
    budget: float = BUDGET,
) -> None:
    """The chance of failing: Monte Carlo over the board's \\[\\[tolerance]] entries, per harmonic and for the board."""
    from .outputs import write_file, write_set
    from .report import risk_files, risk_json_text

    if workers is not None and scheduler is not None:
        raise OptionError("--workers and --scheduler: give one (a local cluster, or an existing one)")
    result = _study(board, samples, seed, workers, scheduler, budget)
    if result is None:
        raise OptionError(f"{board}: the board has no [[tolerance]] entries; add one per uncertain key (README, "
                          "'Tolerances')")
    if json_path:
        write_file(json_path, risk_json_text(result))
    if out_dir is not None:
        for path in write_set(out_dir, risk_files(result)):
            (err if json_path == "-" else out).print(f"wrote {path}", markup=False)
    s = result.summary()
    if json_path == "-":
        err.print(f"P(fail) {_percent(s['p_fail'], s['p_fail_ci'])}", markup=False)
        return
    _print_risk(result, s, rows)


def _print_risk(result, s: dict, count: int) -> None:
    from .parameters import key_label

    board = result.template.nominal
    out.print(f"[bold]{esc(board.title)}[/]: {result.samples} samples (seed {result.seed}) of "
              f"{len(result.tolerances)} tolerance{'s' if len(result.tolerances) > 1 else ''} against "
              f"{esc(board.limit.name)}")
    for t in result.tolerances:
        out.print(f"  {t.key}: {t.text()}" + (f" (group {t.group})" if t.group else ""), markup=False)
    style = "bold red" if s["p_fail"] > 0 else "bold yellow" if s["p_guard"] > 0 else "bold green"
    out.print(f"[{style}]P(fail)[/] {_percent(s['p_fail'], s['p_fail_ci'])}: some harmonic over the limit")
    out.print(f"P(guard band) {_percent(s['p_guard'], s['p_guard_ci'])}: none over, the worst within "
              f"{board.guard_band_db:g} dB")
    w, nominal = s["worst_margin_db"], result.nominal_worst
    if w["p50"] is not None:
        out.print(f"worst margin: 5 % {w['p05']:+.1f} dB, 50 % {w['p50']:+.1f} dB, 95 % {w['p95']:+.1f} dB"
                  + (f" (nominal board {nominal:+.1f} dB)" if nominal is not None else ""))
    if s["drivers"]:
        out.print("driven by: " + ", ".join(f"{d['key']} {100 * d['share']:.0f} %" for d in s["drivers"][:4]),
                  markup=False)
    heads = ("source", "n", "MHz", "nom", "5 %", "50 %", "95 %", "fail", "guard")
    cells, drivers = [], []
    for r in result.row_table()[:count]:
        m = r["margin_db"]
        driver = r["drivers"][0] if r["drivers"] else None
        cells.append([r["source"], str(r["harmonic"]), f"{r['frequency_hz'] / 1e6:.5g}", _fmt(r["nominal_margin_db"]),
                      *(_fmt(m[k]) for k in ("p05", "p50", "p95")), f"{100 * r['p_fail']:.3g}%",
                      f"{100 * r['p_guard']:.3g}%"])
        drivers.append(f"{100 * driver['share']:.0f}% {key_label(driver['key'])}" if driver else "-")
    # the numbers keep their width; the driver takes what is left of the terminal
    used = sum(max([len(h)] + [len(c[i]) for c in cells]) + 2 for i, h in enumerate(heads))
    table = Table(title=f"Harmonics most likely to fail (of {len(result.keys)})", title_style="bold",
                  title_justify="left", box=box.SIMPLE_HEAD, pad_edge=False, padding=(0, 1), collapse_padding=True)
    for col in heads:
        table.add_column(col, justify="left" if col == "source" else "right", no_wrap=True)
    table.add_column("driver", no_wrap=True, overflow="ellipsis", max_width=max(8, out.width - used - 2))
    guard = board.guard_band_db
    for r, c, driver in zip(result.row_table(), cells, drivers):
        styled = [f"[{_margin_style(r['margin_db'][k] if r['margin_db'][k] is not None else float('nan'), guard)}]"
                  f"{v}[/]" for k, v in zip(("p05", "p50", "p95"), c[4:7])]
        table.add_row(esc(c[0]), *c[1:4], *styled, *c[7:], esc(driver))
    out.print(table)
    out.print("[dim]nom / 5 % / 50 % / 95 %: margin in dB of the nominal board and of the samples' percentiles; "
              "fail / guard: share of the samples over the limit / inside the guard band; driver: the input with "
              "the largest share of the margin's rank variance (squared Spearman correlation).[/]")
    out.print(f"[dim]{CAUTION}[/]")


@app.command("waveform")
@_guarded
def waveform_command(
    capture: Path = typer.Argument(..., metavar="FILE", help="Time-domain capture: CSV/TSV, ngspice wrdata or "
                                   "ASCII raw; or an IBIS file (.ibs) for its edge rates.", show_default=False),
    model: Optional[str] = typer.Option(None, "--model", metavar="NAME",
                                        help="IBIS file: the [Model] to show (needed when it holds several)."),
    column: Optional[str] = typer.Option(None, "--column", metavar="NAME",
                                         help="The voltage column to analyse (needed when there are several)."),
    bandwidth: Optional[str] = typer.Option(None, "--bandwidth", metavar="FREQ",
                                            help="Scope or probe bandwidth ('1 GHz'): no harmonic above it counts "
                                                 "as measured."),
    json_path: Optional[str] = typer.Option(None, "--json", metavar="PATH",
                                            help="Write the JSON result to PATH, or '-' for stdout."),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write waveform.json, waveform-harmonics.csv, waveform-clock.toml "
                                                "and waveform.png into DIR (an IBIS file: ibis.json)."),
    rows: int = typer.Option(15, "--rows", metavar="N", min=0, help="How many harmonics the table shows (0: all)."),
) -> None:
    """What a scope capture or simulator output says: frequency, duty, edges, swing, overshoot, ringing, harmonics;
    or an IBIS model's edge rates."""
    if capture.suffix.lower() == ".ibs" or model is not None:
        _ibis_command(capture, model, json_path, out_dir)
        return
    from .capture import analyse
    from .outputs import write_file, write_set
    from .readers import read_capture
    from .report import clock_snippet, waveform_dict, waveform_files, waveform_json_text
    from .units import QuantityError, parse_quantity

    try:
        bandwidth_hz = parse_quantity(bandwidth, "frequency") if bandwidth is not None else None
    except QuantityError as problem:
        raise OptionError(f"--bandwidth {bandwidth!r}: {problem}") from None
    if bandwidth_hz is not None and not bandwidth_hz > 0:
        raise OptionError(f"--bandwidth {bandwidth!r}: must be > 0 Hz")
    data = read_capture(capture, column)
    analysis = analyse(data.time_s, data.voltage_v, data.file, bandwidth_hz)
    if json_path:
        write_file(json_path, waveform_json_text(analysis, data.file, data.column))
    if out_dir is not None:
        for path in write_set(out_dir, waveform_files(analysis, data.file, data.column)):
            (err if json_path == "-" else out).print(f"wrote {path}", markup=False)
    if json_path == "-":
        return
    s = waveform_dict(analysis, data.file, data.column)
    ns = lambda x: f"{x * 1e9:.4g} ns"  # noqa: E731
    ringing = "none found" if s["ringing_hz"] is None else (
        f"{s['ringing_hz'] / 1e6:.4g} MHz, damping ratio {s['ringing_damping']:.3g}")
    for name, value in (
            ("capture", f"{data.file} ({data.column}), {s['periods']} whole periods, one sample every "
                        f"{ns(s['sample_interval_s'])}"),
            ("frequency", f"{s['frequency_hz'] / 1e6:.7g} MHz (fit of every 50 % crossing)"),
            ("duty cycle", f"{100 * s['duty_cycle']:.2f} %"),
            ("rise / fall 10-90", f"{ns(s['rise_time_s'])} / {ns(s['fall_time_s'])}"),
            ("rise / fall 20-80", f"{ns(s['rise_time_2080_s'])} / {ns(s['fall_time_2080_s'])}"),
            ("swing", f"{s['swing_v']:.4g} V ({s['low_v']:.4g} V to {s['high_v']:.4g} V, histogram levels)"),
            ("overshoot / undershoot", f"{100 * s['overshoot']:.1f} % / {100 * s['undershoot']:.1f} %"),
            ("ringing", ringing),
            ("measured up to", f"harmonic {s['limit_harmonic']} ({s['limit_hz'] / 1e6:.4g} MHz)")):
        out.print(f"{name:>24}  {value}", markup=False, soft_wrap=True)
    table = Table(box=box.SIMPLE_HEAD)
    for head in ("n", "MHz", "capture dBuV", "trapezoid dBuV", "difference dB"):
        table.add_column(head, justify="right")
    for h in s["harmonics"][:rows or None]:
        m, z = h["level_dbuv"], h["trapezoid_dbuv"]
        table.add_row(str(h["n"]), f"{h['frequency_hz'] / 1e6:.6g}", _fmt(m), _fmt(z),
                      _fmt(None if m is None or z is None else m - z))
    out.print(table)
    out.print("the fitted trapezoid, to paste into a board file:", markup=False)
    out.print(clock_snippet(analysis), markup=False)
    out.print(f"[dim]{CAUTION}[/]")


_FIXTURE_UNITS = {"r": "ohm", "v": "V", "l": "H", "c": "F"}


def _ibis_command(path: Path, name: str | None, json_path: str | None, out_dir: Path | None) -> None:
    import json

    from .ibis import read_ibis
    from .outputs import write_file, write_set
    from .report import ibis_dict
    from .units import format_quantity

    models = read_ibis(path)
    outputs = [m for m in models.values() if m.rise is not None or m.fall is not None]
    if name is None:
        if len(outputs) != 1:
            raise OptionError(f"--model: {path} holds {len(outputs)} models with a [Ramp]: "
                              f"{', '.join(m.name for m in outputs) or 'none'}; name one")
        name = outputs[0].name
    if name not in models:
        raise OptionError(f"--model {name!r}: not in {path}; it holds: {', '.join(models) or 'no model'}")
    s = ibis_dict(models[name], str(path))
    text = json.dumps(s, indent=1, allow_nan=False) + "\n"
    if json_path:
        write_file(json_path, text)
    if out_dir is not None:
        for written in write_set(out_dir, {"ibis.json": lambda: text}):
            (err if json_path == "-" else out).print(f"wrote {written}", markup=False)
    if json_path == "-":
        return
    out.print(f"{path}: model {name} ({s['model_type'] or 'Model_type not stated'})", markup=False)
    if not s["ramps"]:
        out.print("no [Ramp]: this model states no edge rate (not an output)", markup=False)
    else:
        table = Table(title=f"[Ramp] into R_load {s['r_load_ohm']:g} ohm", title_justify="left",
                      box=box.SIMPLE_HEAD)
        for head in ("edge", "corner", "dV V", "20-80 ns", "V/ns", "10-90 ns", "0-100 ns"):
            table.add_column(head, justify="left" if head in ("edge", "corner") else "right")
        for r in s["ramps"]:
            table.add_row(r["edge"], r["corner"], f"{r['dv_v']:.4g}", f"{r['dt_s'] * 1e9:.4g}",
                          f"{r['slew_v_per_s'] * 1e-9:.4g}", f"{r['time_1090_s'] * 1e9:.4g}",
                          f"{r['time_0100_s'] * 1e9:.4g}")
        out.print(table)
        out.print("[dim]dV is the 20-80 % part of the swing into R_load and 20-80 its time; 10-90 and 0-100 are "
                  "those of the same linear ramp (x 4/3 and / 0.6).[/]")
    for w in s["waveforms"]:
        fixture = ", ".join(f"{k[0].upper()}{k[1:]} {format_quantity(v, _FIXTURE_UNITS[k[0]])}"
                            for k, v in w["fixture"].items())
        times = ", ".join(f"{c} {t * 1e9:.4g} ns" for c, t in w["time_1090_s"].items() if t is not None)
        out.print(f"[{w['edge'].title()} Waveform] into {fixture or 'no fixture stated'}: 10-90 {times or 'not reached'}",
                  markup=False, soft_wrap=True)
    out.print(f'in a board file: rise_time = {{ ibis = "{path.name}", model = "{name}" }} (the fastest corner; '
              'corner = "typ" | "min" | "max" picks one; the falling ramp follows unless fall_time is given)',
              markup=False, soft_wrap=True)
    out.print(f"[dim]{CAUTION}[/]")


def _scan(path: Path, limit, detector, unit, frequency_unit, corrections, distance):
    """A scan file read and referred to the limit (unit, corrections, distance)."""
    from .readers import FREQUENCY_UNITS, read_scan
    from .receiver import DETECTORS
    from .scan import prepare
    from .trace import Trace
    from .units import QuantityError, parse_quantity

    if detector is not None and detector.upper() not in DETECTORS:
        raise OptionError(f"--detector {detector!r}: allowed: {', '.join(DETECTORS)}")
    if frequency_unit is not None and frequency_unit.lower() not in FREQUENCY_UNITS:
        raise OptionError(f"--frequency-unit {frequency_unit!r}: allowed: Hz, kHz, MHz, GHz")
    try:
        distance_m = parse_quantity(distance, "length") if distance is not None else None
    except QuantityError as problem:
        raise OptionError(f"--distance {distance!r}: {problem}") from None
    data = read_scan(path, detector.upper() if detector else None, unit, frequency_unit)
    tables = []
    for file in corrections or ():
        c = read_scan(file, unit="dB", what="correction")
        tables.append((c.file, Trace(c.frequency_hz, next(iter(c.levels.values())), "dB", outside="nan")))
    return prepare(data, limit, tables, distance_m)


def _print_comparison(c, rows: int) -> None:
    from .report import compare_dict

    s = compare_dict(c)
    unit = c.scan.unit
    out.print(f"scan {c.scan.file}: {s['scan']['points']} points, {c.scan.detector} "
              f"({', '.join(s['scan']['detectors'])}), {unit}", markup=False, soft_wrap=True)
    for note in c.scan.notes:
        out.print(f"  {note}", markup=False, soft_wrap=True)
    table = Table(title=f"Measured peaks matched to harmonics ({len(s['matches'])})", title_justify="left",
                  box=box.SIMPLE_HEAD)
    for head in ("source", "n", "MHz", "predicted", "measured", "diff dB"):
        table.add_column(head, justify="left" if head == "source" else "right")
    ordered = sorted(s["matches"], key=lambda m: -abs(m["difference_db"] or 0))
    for m in ordered[:rows or None]:
        table.add_row(esc(m["source"]), str(m["harmonic"]), f"{m['frequency_hz'] / 1e6:.3f}",
                      _fmt(m["predicted_db"]), _fmt(m["measured_db"]), _fmt(m["difference_db"]))
    out.print(table)
    if s["unexplained"]:
        out.print("unexplained peaks (ambient, or a source the board does not model): " + ", ".join(
            f"{u['frequency_hz'] / 1e6:.3f} MHz {u['measured_db']:.1f}" for u in s["unexplained"][:rows or None]),
            markup=False, soft_wrap=True)
    if s["not_seen"]:
        out.print("predicted over the measured floor but not in the scan: " + ", ".join(
            f"{n['source']} n={n['harmonic']} {n['frequency_hz'] / 1e6:.3f} MHz ({n['predicted_db']:.1f} against "
            f"floor {n['floor_db']:.1f})" for n in s["not_seen"][:rows or None]), markup=False, soft_wrap=True)
    res = s["residual_db"]
    out.print(f"measured - predicted over the matched peaks: median {_fmt(res['median'])} dB, RMS "
              f"{_fmt(res['rms'])} dB", markup=False)


@app.command("compare")
@_guarded
def compare_command(
    board: Path = BOARD,
    scan: Path = SCAN,
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write compare.json, compare-peaks.csv and compare.png into DIR."),
    json_path: Optional[str] = typer.Option(None, "--json", metavar="PATH",
                                            help="Write the JSON result to PATH, or '-' for stdout."),
    rows: int = typer.Option(20, "--rows", metavar="N", min=0, help="How many matches the table shows (0: all)."),
    detector: Optional[str] = DETECTOR,
    unit: Optional[str] = SCAN_UNIT,
    frequency_unit: Optional[str] = FREQUENCY_UNIT,
    corrections: Optional[list[Path]] = CORRECTIONS,
    distance: Optional[str] = SCAN_DISTANCE,
    budget: float = BUDGET,
) -> None:
    """A measured scan against the board: its peaks matched to harmonics, the unexplained and the not seen."""
    import json

    from .outputs import write_file, write_set
    from .report import compare_dict, compare_files
    from .scan import compare

    result = _estimate(board, budget)
    measured = _scan(scan, result.board.limit, detector, unit, frequency_unit, corrections, distance)
    c = compare(result, measured)
    if json_path:
        write_file(json_path, json.dumps(compare_dict(c), indent=1, allow_nan=False) + "\n")
    if out_dir is not None:
        for path in write_set(out_dir, compare_files(result, c)):
            (err if json_path == "-" else out).print(f"wrote {path}", markup=False)
    if json_path == "-":
        return
    _print_comparison(c, rows)
    out.print(f"[dim]{CAUTION}[/]")


@app.command("fit")
@_guarded
def fit_command(
    board: Path = BOARD,
    scan: Path = SCAN,
    free: list[str] = typer.Option(..., "--free", metavar="KEY", help="A key to fit, e.g. 'path[eth_cable].ratio'; "
                                   "repeat for more.", show_default=False),
    out_dir: Optional[Path] = typer.Option(None, "--out", metavar="DIR",
                                           help="Write fitted.toml (the board with the fitted values), fit.json and "
                                                "fit.png into DIR."),
    json_path: Optional[str] = typer.Option(None, "--json", metavar="PATH",
                                            help="Write the JSON result to PATH, or '-' for stdout."),
    detector: Optional[str] = DETECTOR,
    unit: Optional[str] = SCAN_UNIT,
    frequency_unit: Optional[str] = FREQUENCY_UNIT,
    corrections: Optional[list[Path]] = CORRECTIONS,
    distance: Optional[str] = SCAN_DISTANCE,
    budget: float = BUDGET,
) -> None:
    """Fit free keys of the board to a measured scan (robust least squares in dB over the matched peaks)."""
    import json

    from .outputs import write_file, write_set
    from .parameters import Template, edited_board_text, key_label, raw_value, written_like
    from .pipeline import estimate
    from .readers import read_text
    from .report import fit_dict, scan_png
    from .scan import fit

    if len(set(free)) != len(free):
        raise OptionError("--free: a key is given twice")
    template = Template.load(board)
    nominal = estimate(template.nominal, budget=budget)
    measured = _scan(scan, template.nominal.limit, detector, unit, frequency_unit, corrections, distance)
    result = fit(template, measured, free, nominal)
    values = dict(zip(result.keys, result.fitted))
    s = fit_dict(result)
    text = json.dumps(s, indent=1, allow_nan=False) + "\n"
    if json_path:
        write_file(json_path, text)
    if out_dir is not None:
        fitted = estimate(template.board_at(values), budget=budget)
        files = {"fitted.toml": lambda: edited_board_text(read_text(board, "board file").text, values, str(board)),
                 "fit.json": lambda: text,
                 "fit.png": lambda: scan_png(nominal, result.before, fitted)}
        for path in write_set(out_dir, files):
            (err if json_path == "-" else out).print(f"wrote {path}", markup=False)
    if json_path == "-":
        return
    table = Table(title=f"Fitted to {len(s['matched'])} matched peaks of {measured.file} ({measured.detector})",
                  title_justify="left", box=box.SIMPLE_HEAD)
    for head in ("key", "nominal", "fitted", "+-", "constrained by"):
        table.add_column(head, justify="left" if head in ("key", "constrained by") else "right",
                         no_wrap=head != "constrained by")
    for key, p in s["parameters"].items():
        declared, raw = template.parameter(key).declaration, raw_value(template.data, key)

        def show(v):
            return "-" if v is None else str(written_like(declared, raw, v, 4))

        by = p["constrained_by"]
        shown = ", ".join(f"{c['source']} n={c['harmonic']} ({100 * c['share']:.0f}%)" for c in by[:3])
        table.add_row(esc(key_label(key)), show(p["nominal"]), show(p["fitted"]),
                      show(p["stderr"]) if p["unit"] == "dB" or p["stderr"] is None else
                      f"{100 * p['stderr'] / p['fitted']:.2g} %",
                      esc(shown + (f" and {len(by) - 3} more" if len(by) > 3 else "")))
    out.print(table)
    before, after = s["residual_db"]["before"], s["residual_db"]["after"]
    out.print(f"measured - predicted: median {_fmt(before['median'])} dB, RMS {_fmt(before['rms'])} dB before; "
              f"median {_fmt(after['median'])} dB, RMS {_fmt(after['rms'])} dB after", markup=False, soft_wrap=True)
    if s["unexplained"]:
        out.print(f"{len(s['unexplained'])} measured peaks no source explains were left out", markup=False)
    enveloped = sorted({str(n) for n in result.before.source} & {x.name for x in template.nominal.sources
                                                                  if x.mode == "envelope"})
    if enveloped:
        out.print(f"note: {', '.join(enveloped)} use the spectral envelope; a fitted coupling absorbs the envelope's "
                  'excess over the real harmonics (harmonics = "exact" fits the physics)', markup=False,
                  soft_wrap=True)
    if out_dir is None:
        out.print("--out DIR writes fitted.toml: the board with these values and everything else as written",
                  markup=False)
    out.print(f"[dim]{CAUTION}[/]")


def _version(value: bool) -> None:
    if value:
        print(f"emispec {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True, help="Print the version."),
) -> None:
    pass


def main() -> None:
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
