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
from rich.table import Table

from . import __version__
from .board import BoardError, load_board
from .limits import LimitError, bundled_limits, load_limit
from .margin import estimate as run_estimate
from .receiver import band_names
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


SHORT_FLAGS = {"over-limit": "OVER", "within-guard-band": "guard", "near-field": "near", "spectral-null": "null",
               "loop-electrically-large": "big-loop", "decoupling-insufficient": "decap",
               "above-target-impedance": ">Zt", "near-anti-resonance": "anti-res"}


def _short_flag(flag: str) -> str:
    return "+" + flag.split(":", 1)[1] if flag.startswith("overlaps:") else SHORT_FLAGS.get(flag, flag)


def _margin_style(margin: float, guard: float) -> str:
    if not margin == margin:
        return "dim"
    return "bold red" if margin < 0 else "yellow" if margin < guard else "green"


def _verdict_style(verdict: str) -> str:
    return "bold red" if verdict.startswith("FAILS") else "bold yellow" if verdict.startswith("MARGINAL") else "bold green"


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
        err.print(result.verdict(), markup=False)
        return
    _print_table(result, rows)


def _write(action, where: str) -> None:
    try:
        action()
    except OSError as problem:
        raise OutputError(f"{where}: cannot write output ({problem.strerror or problem}); nothing was written") from None


def _print_table(result, count: int) -> None:
    rows, board = result.rows, result.board
    shown = len(rows) if count == 0 else min(count, len(rows))
    unit = board.limit.unit
    table = Table(title=f"{board.title}\nworst {shown} of {len(rows)} harmonics against {board.limit.name} ({unit})",
                  title_style="bold", caption="reading, limit, margin: the detector with the least margin. SSC dB: what the spread "
                  "buys there. flags: OVER the limit, inside the guard band, near field, null (spectral "
                  "null), +name (another source within one RBW), decap (decoupling lets too much escape), >Zt "
                  "(above the target impedance), anti-res (near an anti-resonance). --json and --out give "
                  "every detector.", caption_style="dim")
    for name, justify in (("source", "left"), ("n", "right"), ("MHz", "right"), ("band", "left"),
                          ("det", "left"), ("read", "right"), ("limit", "right"),
                          ("margin", "right"), ("SSC dB", "right"), ("flags", "left")):
        table.add_column(name, justify=justify, no_wrap=name != "flags", overflow="fold")
    bands = band_names(rows.frequency_hz[:shown])
    for i in range(shown):
        det = rows.worst_detector[i]
        reading = rows.readings[det][i] if det else max(rows.readings[d][i] for d in board.limit.detectors)
        limit = rows.limits[det][i] if det else float("nan")
        margin = rows.worst_margin_db[i]
        ssc = _fmt(rows.spread_reduction_db[det][i]) if det and rows.spread[i] else "-"
        table.add_row(
            str(rows.source[i]), str(rows.harmonic[i]), f"{rows.frequency_hz[i] / 1e6:.6g}", str(bands[i]),
            det or "-", _fmt(reading), _fmt(limit), f"[{_margin_style(margin, board.guard_band_db)}]{_fmt(margin)}[/]",
            ssc,
            " ".join(_short_flag(flag) for flag in rows.flag_list(i)),
        )
    out.print(table)
    verdict = result.verdict()
    out.print(f"[{_verdict_style(verdict)}]{verdict}[/]")
    out.print(f"[dim]{CAUTION}[/]")


@app.command()
@_guarded
def limits(name: Optional[str] = typer.Argument(None, help="Show this limit's points (bundled name or file).")) -> None:
    """List the bundled limit lines, or show one limit's points."""
    if name is not None:
        limit = load_limit(name)
        out.print(f"[bold]{limit.title}[/] ({limit.name})\nsource: {limit.source}\n"
                  f"{limit.measurement}" + (f" at {limit.distance_m:g} m" if limit.distance_m else "")
                  + f", {limit.unit}", markup=True)
        for det, line in limit.lines.items():
            points = ", ".join(f"{f / 1e6:g} MHz {y:g}" for f, y in zip(line.frequency_hz, line.level_db))
            out.print(f"  {det}: {points}", markup=False)
        return
    table = Table(title="Bundled limits", title_style="bold", box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, padding=(0, 1), collapse_padding=True)
    table.add_column("name", no_wrap=True, min_width=31)
    for col in ("measured", "unit", "detectors", "span MHz"):
        table.add_column(col, no_wrap=True)
    sources = []
    for key in bundled_limits():
        limit = load_limit(key)
        lo, hi = limit.span_hz
        measured = limit.measurement + (f" {limit.distance_m:g} m" if limit.distance_m else "")
        table.add_row(key, measured, limit.unit, " ".join(limit.detectors), f"{lo / 1e6:g}-{hi / 1e6:g}")
        sources.append(f"[bold]{key}[/]: {limit.source}")
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
    from .decoupling import rail_summary
    from .plot import png_bytes, rail_figure

    result = run_estimate(load_board(board))
    if not result.board.rails:
        raise OutputError(f"{board}: rail: the board defines no [[rail]]")
    rows = result.rows
    for name, rail in result.board.rails.items():
        summary = rail_summary(rail, result.span_hz)
        target = f", target {format_quantity(rail.target_ohm, 'ohm')}" if rail.target_ohm else ""
        table = Table(title=f"rail {name} ({rail.voltage_v:g} V{target})", title_style="bold")
        for col in ("part", "value", "detail", "count", "self-resonance"):
            table.add_column(col)
        for part in summary["parts"]:
            table.add_row(*_part_cells(part))
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
        target_path = Path(out_dir) / f"rail-{file_part(name)}.png"

        def draw(path=target_path, name=name):
            Path(out_dir).mkdir(parents=True, exist_ok=True)
            atomic_write(path, png_bytes(rail_figure(result, name)))

        _write(draw, str(target_path))
        out.print(f"  plot: {target_path}", markup=False)
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
