"""Plots of estimates.  Functions take result objects and the data the pipeline computed for them, and return
the figure; nothing here computes physics."""

from __future__ import annotations

import io

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")  # files only; never needs a display
matplotlib.rcParams["text.parse_math"] = False  # user text ("Rev $A^$") is text, never mathtext

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .columns import verdict_text  # noqa: E402
from .pipeline import CableView, Estimate, RailView  # noqa: E402
from .trace import Trace  # noqa: E402

__all__ = ["PALETTE", "SOURCE_COLORS", "spectrum_figure", "swept_figure", "rail_figure", "cable_figure",
           "variants_figure",
           "waveform_figure", "scan_figure", "png_bytes", "svg_text"]

#: emispec's detector palette: colour, limit-line style and reading marker per detector (README, "Plots").
PALETTE = {
    "PK": {"color": "#7b3294", "line": "-.", "marker": "^", "zorder": 3},
    "QP": {"color": "#1f5fa8", "line": "-", "marker": "o", "zorder": 3},
    "AV": {"color": "#3a8f4a", "line": "--", "marker": "s", "zorder": 2},
    "RMS-AV": {"color": "#a67c00", "line": ":", "marker": "D", "zorder": 2},
}
_OTHER = {"color": "#555555", "line": "-", "marker": "o", "zorder": 2}
#: Colours of sources and variants; none of them is the red of the over-limit marks.
SOURCE_COLORS = ("#1b9e77", "#6a51a3", "#e08214", "#2c7fb8", "#8c510a", "#e7298a", "#66a61e", "#737373",
                 "#17becf", "#b8a000")
OVER_COLOR = "#d7191c"
CAUTION_SHORT = "Estimate only; compliance is decided by accredited measurement."
MARKERS = "os^vD<>ph*"


def _style(detector: str) -> dict:
    return PALETTE.get(detector, _OTHER)


def _source_label(source) -> str:
    """``sdram_clk (100 MHz)``; a pulse train per edge shows its pulse rate: ``mcu_core (pulses at 48 MHz)``."""
    per = getattr(source, "per", None)
    if per is not None:
        rate = source.frequency_hz * (2 if per == "edge" else 1)
        return f"{source.name} (pulses at {rate / 1e6:g} MHz)"
    return f"{source.name} ({source.frequency_hz / 1e6:g} MHz)"


def png_bytes(figure, dpi: int = 120) -> bytes:
    """The figure as PNG bytes; the figure is closed."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi)
    plt.close(figure)
    return buffer.getvalue()


def spectrum_figure(est: Estimate, envelopes: dict[str, Trace]):
    """Each harmonic's reading on the detector with the least margin (marker by detector), the sources' envelopes
    through their paths, each detector's limit line and guard band, and over-limit marks.

    Returns
    -------
    matplotlib.figure.Figure
    """
    board, limit, rows = est.board, est.board.limit, est.rows
    lo, hi = est.span_hz
    grid = np.geomspace(lo, hi, 2000)
    fig, ax = plt.subplots(figsize=(12, 6), layout="constrained")
    detectors = limit.detectors
    reading = np.full(len(rows), np.nan)
    for det in detectors:
        reading = np.where(rows.worst_detector == det, rows.readings[det], reading)
    for k, source in enumerate(board.sources):
        color = SOURCE_COLORS[k % len(SOURCE_COLORS)]
        mine = rows.source == source.name
        ax.vlines(rows.frequency_hz[mine], -200, reading[mine], color=color, lw=0.8, alpha=0.5)
        for det in detectors:
            here = mine & (rows.worst_detector == det)
            if here.any():
                ax.plot(rows.frequency_hz[here], reading[here], _style(det)["marker"], ms=3.5, color=color,
                        label=f"{_source_label(source)}, {det}")
        if source.name in envelopes:  # the source's envelope through its paths (unspread)
            trace = envelopes[source.name]
            ax.plot(trace.frequency_hz, trace.level_db, "--", lw=0.8, color=color, alpha=0.8,
                    label=f"{source.name} envelope")
    limit_max = _limit_lines(ax, est, grid)
    over = rows.flags["over-limit"]
    if over.any():
        ax.plot(rows.frequency_hz[over], reading[over], "x", color=OVER_COLOR, ms=9, mew=2, label="over the limit",
                zorder=5)
    finite = reading[np.isfinite(reading)]
    top = max(limit_max, finite.max() if finite.size else limit_max) + 10
    ax.set_ylim(top - 100, top)
    _finish(fig, ax, est, "readings on the detector with the least margin")
    return fig


def _finish(fig, ax, est: Estimate, what: str) -> None:
    lo, hi = est.span_hz
    _mhz_axis(ax)
    ax.set_xlim(lo, hi)
    ax.set_ylabel(f"Reading [{est.board.limit.unit}]")
    ax.set_title(f"{est.board.title}: {what} against {est.board.limit.name}\n{verdict_text(est.outcome)}", fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    _legend(fig, ax)
    fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=7)


def _mhz_axis(ax) -> None:
    """A log frequency axis in Hz labelled in MHz at 1, 2, 5 per decade (plain numbers, no mathtext)."""
    ax.set_xscale("log")
    ax.xaxis.set_major_locator(matplotlib.ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda x, _: f"{x / 1e6:g}"))
    ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    ax.set_xlabel("Frequency [MHz]")


def _legend(fig, ax) -> None:
    """A legend beside the plot, in as many columns as it needs to stay the height of the figure."""
    entries = len(ax.get_legend_handles_labels()[0])
    fig.legend(fontsize=7 if entries > 14 else 8, loc="outside right upper", ncols=max(1, -(-entries // 28)))


def _limit_lines(ax, est: Estimate, grid) -> float:
    """Draw each detector's limit and guard-band line; return the highest limit level."""
    board, limit = est.board, est.board.limit
    levels = limit.levels(grid)
    for det in (d for d in limit.detectors if np.isfinite(levels[d]).sum() > 1):
        style = _style(det)["line"]
        ax.plot(grid, levels[det], style, color="black", lw=1.6, label=f"limit {det}")
        if board.guard_band_db > 0:
            ax.plot(grid, levels[det] - board.guard_band_db, style, color="gray", lw=0.9,
                    label=f"limit {det} - {board.guard_band_db:g} dB guard band")
    return max(np.nanmax(v) for v in levels.values() if np.isfinite(v).any())


def swept_figure(est: Estimate, swept: dict[str, Trace]):
    """Swept receiver readings (PK, QP, AV) of all sources together against the limit.

    Returns
    -------
    matplotlib.figure.Figure
    """
    lo, hi = est.span_hz
    fig, ax = plt.subplots(figsize=(12, 6), layout="constrained")
    top = -np.inf
    for det, trace in swept.items():  # AV under QP under PK: the lower readings stay visible
        level = trace.level_db
        style = _style(det)
        ax.plot(trace.frequency_hz, level, lw=0.8, color=style["color"], zorder=style["zorder"],
                label=f"swept {det}")
        if np.isfinite(level).any():
            top = max(top, np.nanmax(level))
    limit_max = _limit_lines(ax, est, np.geomspace(lo, hi, 4000))
    top = max(top, limit_max) + 10
    ax.set_ylim(top - 100, top)
    _finish(fig, ax, est, "swept receiver readings")
    return fig


def rail_figure(est: Estimate, rail: RailView):
    """|Z_dec| of one rail against frequency, with the harmonics drawn from it and what they need.

    Marks each harmonic of the sources on the rail at |Z_dec|, the required
    impedance of each harmonic (the largest |Z_dec| that keeps the guard band),
    the target impedance and the supply path.

    Returns
    -------
    matplotlib.figure.Figure
    """
    board = est.board
    rail_name = rail.name
    lo, hi = est.span_hz
    grid = rail.frequency_hz
    fig, ax = plt.subplots(figsize=(12, 6), layout="constrained")
    ax.loglog(grid, rail.decoupling_ohm, color="black", lw=1.6, label="|Z_dec| at the IC pins")
    ax.loglog(grid, rail.supply_ohm, color="gray", lw=0.9, ls="--", label="|Z| of the supply path")
    if rail.target_ohm is not None:
        ax.axhline(rail.target_ohm, color="tab:orange", lw=1.2, label=f"target {rail.target_ohm:g} ohm")
    rows = est.rows
    names = [s.name for s in board.sources if s.rail == rail_name]
    for k, name in enumerate(names):
        emitting = np.isfinite(np.fmax.reduce([rows.readings[d] for d in board.limit.detectors]))
        mine = (rows.source == name) & np.isfinite(rows.decoupling_impedance_ohm) & emitting
        color = SOURCE_COLORS[[s.name for s in board.sources].index(name) % len(SOURCE_COLORS)]
        ax.plot(rows.frequency_hz[mine], rows.decoupling_impedance_ohm[mine], "o", ms=3, color=color,
                label=f"{name} harmonics")
        need = mine & np.isfinite(rows.required_impedance_ohm)
        ax.plot(rows.frequency_hz[need], rows.required_impedance_ohm[need], "v", ms=5, color=color, mfc="none",
                label=f"{name}: required |Z_dec|")
    failing = rows.flags["decoupling-insufficient"] & np.isin(rows.source, names)
    if failing.any():
        ax.plot(rows.frequency_hz[failing], rows.decoupling_impedance_ohm[failing], "x", color=OVER_COLOR, ms=8,
                mew=2, label="decoupling insufficient")
    ax.axvspan(lo, hi, color="tab:blue", alpha=0.05, label="analysed span")
    ax.set_xlim(grid[0], grid[-1])
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda x, _: f"{x / 1e6:g}"))
    ax.yaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda y, _: f"{y:g}"))
    ax.set_xlabel("Frequency [MHz]")
    ax.set_ylabel("|Z| [ohm]")
    ax.set_title(f"{board.title}: rail {rail_name} ({rail.voltage_v:g} V)", fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    _legend(fig, ax)
    fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=7)
    return fig


def cable_figure(est: Estimate, cable: CableView):
    """An antenna cable: its current and field per volt of common-mode drive, its series resonances, and the
    common-mode current of each harmonic that drives it.

    Returns
    -------
    matplotlib.figure.Figure
    """
    board = est.board
    names = [s.name for s in board.sources]
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(12, 7), sharex=True, layout="constrained")
    top.plot(cable.frequency_hz, cable.current_dbua_per_v, color="black", lw=1.6,
             label="current at the base [dBuA per V]")
    top.plot(cable.frequency_hz, cable.field_dbuv_m_per_v, color="tab:blue", lw=1.2, ls="--",
             label=f"field at {cable.distance_m:g} m [dBuV/m per V]")
    top.set_ylabel("per volt of common-mode drive [dB]")
    for name, (f, level) in cable.harmonics.items():
        color = SOURCE_COLORS[names.index(name) % len(SOURCE_COLORS)]
        bottom.plot(f, level, "o", ms=3, color=color, label=f"{name} harmonics")
    bottom.set_ylabel("common-mode current [dBuA]")
    for k, f in enumerate(cable.resonances_hz):
        for ax in (top, bottom):
            ax.axvline(f, color="tab:red", lw=0.8, alpha=0.6, label="series resonances" if k == 0 and ax is top
                       else None)
        top.annotate(f"{f / 1e6:.4g}", (f, 1.0), xycoords=("data", "axes fraction"), fontsize=7, ha="center",
                     va="bottom", color="tab:red")
    for ax in (top, bottom):
        _mhz_axis(ax)
        ax.grid(True, which="both", alpha=0.3)
    top.set_xlabel("")
    bottom.set_xlim(cable.frequency_hz[0], cable.frequency_hz[-1])
    top.set_title(f"{board.title}: cable {cable.name} ({cable.length_m:g} m) as an antenna, resonances in MHz\n",
                  fontsize=10)
    handles, labels = [], []
    for ax in (top, bottom):
        h, lab = ax.get_legend_handles_labels()
        handles += h
        labels += lab
    fig.legend(handles, labels, fontsize=8, loc="outside right upper")
    fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=7)
    return fig


def variants_figure(variants):
    """Each variant's harmonic readings (the highest detector) against the limit, overlaid.

    Returns
    -------
    matplotlib.figure.Figure
    """
    est0 = variants[0].estimate
    lo, hi = est0.span_hz
    fig, ax = plt.subplots(figsize=(12, 6), layout="constrained")
    top = -np.inf
    for k, variant in enumerate(variants):  # colour and marker together: 100 distinct styles
        rows = variant.estimate.rows
        reading = np.fmax.reduce([rows.readings[d] for d in variant.estimate.board.limit.detectors])
        seen = np.isfinite(reading)
        ax.plot(rows.frequency_hz[seen], reading[seen], MARKERS[(k // len(SOURCE_COLORS)) % len(MARKERS)], ms=4,
                mfc="none", color=SOURCE_COLORS[k % len(SOURCE_COLORS)],
                label=f"{variant.label}: worst {variant.worst_margin_db():+.1f} dB")
        if seen.any():
            top = max(top, reading[seen].max())
    limit_max = _limit_lines(ax, est0, np.geomspace(lo, hi, 2000))
    top = max(top, limit_max) + 10
    ax.set_ylim(top - 80, top)
    _finish(fig, ax, est0, "variants")
    ax.set_title(f"{est0.board.title}: {len(variants)} variants against {est0.board.limit.name}", fontsize=10)
    return fig


def risk_figure(result):
    """The board's worst margin over the samples: histogram and cumulative share, against the limit (0 dB)
    and the guard band.

    Returns
    -------
    matplotlib.figure.Figure
    """
    worst = result.worst[np.isfinite(result.worst)]
    guard = result.guard_band_db
    summary = result.summary()
    fig, ax = plt.subplots(figsize=(10, 5), layout="constrained")
    if worst.size:
        ax.hist(worst, bins=int(np.clip(np.sqrt(worst.size), 10, 60)), color=SOURCE_COLORS[3], alpha=0.75,
                label=f"worst margin of each of {result.samples} samples")
    ax.axvline(0.0, color=OVER_COLOR, lw=1.6, label="limit (margin 0 dB)")
    if guard > 0:
        ax.axvline(guard, color="gray", lw=1.0, ls="--", label=f"guard band ({guard:g} dB)")
    if result.nominal_worst is not None:
        ax.axvline(result.nominal_worst, color="black", lw=1.0, ls=":",
                   label=f"nominal board ({result.nominal_worst:+.1f} dB)")
    ax.set_xlabel(f"Worst margin of the board [dB] (negative: over the limit)\n{CAUTION_SHORT}", fontsize=9)
    ax.set_ylabel("Samples")
    cdf = ax.twinx()
    if worst.size:
        x = np.sort(worst)
        cdf.plot(x, np.arange(1, x.size + 1) / x.size, color="black", lw=1.2, label="share of samples at or below")
    cdf.set_ylim(0, 1)
    cdf.set_ylabel("Share of samples at or below")
    ax.set_title(f"{result.template.nominal.title}: P(fail) {100 * summary['p_fail']:.3g} %, P(guard band) "
                 f"{100 * summary['p_guard']:.3g} % ({result.samples} samples, seed {result.seed})", fontsize=10)
    ax.grid(True, alpha=0.3)
    handles = ax.get_legend_handles_labels()[0] + cdf.get_legend_handles_labels()[0]
    labels = ax.get_legend_handles_labels()[1] + cdf.get_legend_handles_labels()[1]
    fig.legend(handles, labels, fontsize=8, loc="outside right upper")
    return fig


def risk_drivers_figure(result):
    """What drives the board's worst margin: each independent draw's share (squared rank correlation) and the
    sign of its effect.

    Returns
    -------
    matplotlib.figure.Figure
    """
    drivers = result.summary()["drivers"]
    fig, ax = plt.subplots(figsize=(10, 1.2 + 0.4 * max(len(drivers), 1)), layout="constrained")
    labels = [d["key"] for d in drivers][::-1]
    shares = [100 * d["share"] for d in drivers][::-1]
    colors = [OVER_COLOR if d["rho"] < 0 else SOURCE_COLORS[0] for d in drivers][::-1]
    ax.barh(range(len(drivers)), shares, color=colors)
    ax.set_yticks(range(len(drivers)), labels, fontsize=8)
    ax.set_xlim(0, 100)
    ax.set_xlabel("Share of the worst margin's rank variance [%] (red: a higher value lowers the margin)"
                  f"\n{CAUTION_SHORT}", fontsize=9)
    ax.set_title(f"{result.template.nominal.title}: what drives the worst margin", fontsize=10)
    ax.grid(True, axis="x", alpha=0.3)
    if not drivers:
        ax.text(50, 0, "no input correlates with the worst margin", ha="center", va="center")
    return fig


def svg_text(figure) -> str:
    """The figure as an inline <svg> element (text drawn as paths); the figure is closed."""
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "path", "svg.hashsalt": "emispec"}):
        figure.savefig(buffer, format="svg")
    plt.close(figure)
    text = buffer.getvalue()
    return text[text.index("<svg"):]


def waveform_figure(summary: dict):
    """A capture's harmonics against its fitted trapezoid's (RMS dBuV), from ``emispec.waveform/1``."""
    rows = summary["harmonics"]
    f = np.array([h["frequency_hz"] for h in rows])
    level = np.array([np.nan if h["level_dbuv"] is None else h["level_dbuv"] for h in rows])
    trapezoid = np.array([np.nan if h["trapezoid_dbuv"] is None else h["trapezoid_dbuv"] for h in rows])
    fig, ax = plt.subplots(figsize=(8, 4.5), layout="constrained")
    ax.plot(f, trapezoid, "s", mfc="none", color=SOURCE_COLORS[1], label="fitted trapezoid")
    ax.plot(f, level, "o", ms=4, color=SOURCE_COLORS[0], label="capture")
    if summary["noise_floor_dbuv"] is not None:
        ax.axhline(summary["noise_floor_dbuv"], color="#999999", ls=":", label="capture's noise floor")
    if summary["ringing_hz"]:
        ax.axvline(summary["ringing_hz"], color=SOURCE_COLORS[2], ls="--",
                   label=f"ringing {summary['ringing_hz'] / 1e6:.4g} MHz")
    _mhz_axis(ax)
    ax.set_ylabel("harmonic [dBuV, RMS]")
    ax.set_title(f"{summary['file']} ({summary['column']}): harmonics up to the capture's limit, "
                 f"{summary['limit_hz'] / 1e6:.4g} MHz", fontsize=9)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8)
    fig.text(0.01, 0.005, CAUTION_SHORT, fontsize=7)
    return fig


#: The measured trace: near-black, so the predictions (in the detector colours) stand out against it.
MEASURED_COLOR = "#222222"


def scan_figure(est: Estimate, comparison, swept: dict[str, Trace], fitted_swept: dict[str, Trace] | None = None):
    """A measured scan over the prediction: the scan's traces, the predicted swept readings per detector, each
    predicted harmonic, the limit and guard band, the measured floor, the matched and unexplained peaks.

    Returns
    -------
    matplotlib.figure.Figure
    """
    scan = comparison.scan
    rows = est.rows
    fig, ax = plt.subplots(figsize=(12, 6), layout="constrained")
    for det, trace in scan.traces.items():
        ax.plot(trace.frequency_hz, trace.level_db, lw=0.7, color=MEASURED_COLOR,
                alpha=1.0 if det == scan.detector else 0.45, zorder=2, label=f"measured {det}")
    ax.plot(scan.frequency_hz, comparison.floor_db, ":", lw=0.9, color="gray", label="measured floor")
    for det, trace in swept.items():
        ax.plot(trace.frequency_hz, trace.level_db, lw=0.8, color=_style(det)["color"], alpha=0.8, zorder=3,
                label=f"predicted swept {det}")
    for det, trace in (fitted_swept or {}).items():
        ax.plot(trace.frequency_hz, trace.level_db, "--", lw=0.8, color=_style(det)["color"], zorder=3,
                label=f"fitted swept {det}")
    det = scan.detector
    if det in rows.readings:
        for k, source in enumerate(est.board.sources):
            mine = rows.source == source.name
            ax.plot(rows.frequency_hz[mine], rows.readings[det][mine], _style(det)["marker"], ms=3,
                    color=SOURCE_COLORS[k % len(SOURCE_COLORS)], label=f"{_source_label(source)}, {det}")
    if comparison.peak_hz.size:
        ax.plot(comparison.peak_hz, comparison.measured[det], "o", mfc="none", ms=8, color=MEASURED_COLOR, zorder=4,
                label="matched peak")
    if comparison.unexplained_hz.size:
        ax.plot(comparison.unexplained_hz, comparison.unexplained_db, "*", ms=10, color=OVER_COLOR, zorder=5,
                label="unexplained peak")
    lo, hi = est.span_hz
    limit_max = _limit_lines(ax, est, np.geomspace(lo, hi, 4000))
    finite = scan.level_db[np.isfinite(scan.level_db)]
    top = max(limit_max, finite.max() if finite.size else limit_max) + 10
    ax.set_ylim(top - 100, top)
    _finish(fig, ax, est, f"scan {scan.file.rsplit('/', 1)[-1]}")
    return fig
