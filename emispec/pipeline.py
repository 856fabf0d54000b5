"""From a board to a margin table: every source harmonic, read by the receiver through its paths.

The pipeline, in the order a board travels through it:

1. **Span** (:func:`analysis_span_hz`): the limit's lines, cut where the
   standard stops measuring (by the highest source frequency) and at the
   board's ``max_frequency``.
2. **Harmonics** of each source whose occupied band touches the span, as
   complex RMS phasors of the source's own quantity (:mod:`emispec.sources`).
3. **Paths** (:func:`source_gains`): each path's level in the limit's unit per
   unit of that quantity; escape paths through the rail's current divider
   (:mod:`emispec.coupling`, :mod:`emispec.decoupling`).  Paths of one source
   add in power.
4. **Lines**: the harmonics times the path gain, spread into their
   frequency-modulated line spectra where the source is spread
   (:mod:`emispec.spread`); one :class:`SourceLines` per source.
5. **Receiver** (:mod:`emispec.receiver`): each row is read at tuning
   frequencies.  An unmodulated harmonic is tuned onto exactly; a spread
   harmonic on a grid of half a resolution bandwidth across its occupied band
   plus half a bandwidth either side, then again a quarter bandwidth either
   side of every local maximum within 1.5 dB of the row's best (per
   detector).  The row's reading is the maximum over its tuning points.
   Sources add in power, except sources that name the same ``reference``:
   those add in amplitude (worst case).
6. **Limits and margins**: the lowest limit level over the row's tuning
   points, margin = limit - reading per detector, decoupling columns and
   flags; rows sorted worst first (:mod:`emispec.rows`).

:func:`swept_spectrum`, :func:`envelope_traces` and :func:`rail_view` compute
what the plots and the report draw, so that those only format.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .board import Board
from .decoupling import (ABOVE_TARGET, DECOUPLING_INSUFFICIENT, NEAR_ANTI_RESONANCE, anti_resonances,
                         escape_fraction, impedance_for_escape, rail_summary)
from .flags import declare
from .limits import upper_frequency_hz
from .receiver import BANDS, resolution_bandwidth_hz, sweep
from .rows import Rows, Verdict, Worst, assemble_rows
from .sources import Source
from .spread import harmonic_lines, occupied_band_hz
from .trace import Trace
from .units import db_micro, from_db

__all__ = [
    "SourceLines",
    "Estimate",
    "Reuse",
    "RailView",
    "analysis_span_hz",
    "source_gains",
    "estimate",
    "swept_spectrum",
    "envelope_traces",
    "rail_view",
    "SWEPT_DETECTORS",
]

SPECTRAL_NULL = declare("spectral-null", "null", "spectral null", 20)
SWEPT_DETECTORS = ("PK", "QP", "AV")


@dataclass(frozen=True)
class SourceLines:
    """A source's spectral lines in the limit's unit, ascending, as the receiver sees them."""

    name: str
    reference: str | None
    grid_hz: float
    line_hz: np.ndarray
    line_amplitude: np.ndarray
    modulated: bool = False


@dataclass(frozen=True)
class Estimate:
    """Result of :func:`estimate`: the board, the analysed span, the rows and the sources' lines."""

    board: Board
    span_hz: tuple[float, float]
    rows: Rows
    lines: tuple[SourceLines, ...] = field(default=(), repr=False)

    @property
    def source_paths(self) -> dict[str, tuple[str, ...]]:
        return {s.name: s.paths for s in self.board.sources}

    @property
    def over_limit(self) -> int:
        return int(self.rows.flags["over-limit"].sum())

    @property
    def within_guard_band(self) -> int:
        return int(self.rows.flags["within-guard-band"].sum())

    @property
    def worst_index(self) -> int | None:
        return 0 if len(self.rows) and np.isfinite(self.rows.worst_margin_db[0]) else None

    @property
    def outcome(self) -> Verdict:
        """The verdict as a value: kind, counts and the worst row."""
        i, r = self.worst_index, self.rows
        worst = None if i is None else Worst(str(r.source[i]), int(r.harmonic[i]), float(r.frequency_hz[i]),
                                             float(r.worst_margin_db[i]), str(r.worst_detector[i]))
        kind = ("no-data" if worst is None else "fails" if self.over_limit else
                "marginal" if self.within_guard_band else "meets")
        return Verdict(kind, len(r), self.over_limit, self.within_guard_band, self.board.guard_band_db, worst)

    def verdict(self) -> str:
        """The verdict in one line (see :func:`emispec.columns.verdict_text`)."""
        from .columns import verdict_text

        return verdict_text(self.outcome)


def analysis_span_hz(board: Board) -> tuple[float, float]:
    """Frequency span to analyse: the limit's lines, cut at the standard's upper frequency and the board's cap."""
    lo, hi = board.limit.span_hz
    highest = max(source.frequency_hz * (1 + (source.spread.deviation if source.spread else 0))
                  for source in board.sources)
    hi = min(hi, upper_frequency_hz(board.limit.upper_frequency, highest))
    if board.max_frequency_hz is not None:
        hi = min(hi, board.max_frequency_hz)
    return lo, hi


def _harmonic_numbers(source: Source, lo: float, hi: float) -> np.ndarray:
    """Harmonics whose occupied band touches [lo, hi]."""
    f0 = source.frequency_hz
    low_factor = high_factor = 1.0
    if source.spread is not None:
        low_factor = source.spread.centre_factor - source.spread.deviation / 2
        high_factor = source.spread.centre_factor + source.spread.deviation / 2
    first = max(1, int(np.ceil(lo / (f0 * high_factor) * (1 - 1e-12))))
    last = int(np.floor(hi / (f0 * low_factor) * (1 + 1e-12)))
    return np.arange(first, last + 1, dtype=np.int64)


def _escape(board: Board, source: Source, path_name: str, frequency_hz) -> np.ndarray:
    """Complex fraction of the rail current that leaves through this path's termination."""
    rail = board.rails[source.rail]
    z_path = rail.supply_impedance(frequency_hz) + board.paths[path_name].termination(frequency_hz)
    return escape_fraction(rail.decoupling_impedance(frequency_hz), z_path)


def source_gains(board: Board, source: Source, frequency_hz) -> dict[str, np.ndarray]:
    """Each of the source's paths: limit-unit level per unit of the source's own quantity.

    The quantity is the clock voltage for a clock and the pulse current for a
    current source; escape paths see the part of the current that the rail's
    decoupling lets through to their termination.
    """
    f = np.asarray(frequency_hz, dtype=float)
    per_unit = source.per_unit(f)
    gains = {}
    for name in source.paths:
        path = board.paths[name]
        quantities = dict(per_unit)
        if path.input == "escape":
            quantities["escape"] = per_unit["current"] * np.abs(_escape(board, source, name, f))
        gains[name] = path.reading(f, quantities, board.limit.distance_m)
    return gains


def _total_gain(gains: dict[str, np.ndarray]) -> np.ndarray:
    """Paths of one source add in power (their relative phase is unknown)."""
    return np.sqrt(sum(g**2 for g in gains.values()))


def _path_flags(board: Board, source: Source, f: np.ndarray) -> dict[str, np.ndarray]:
    """Each path's validity flags, OR-ed over the source's paths."""
    flags: dict[str, np.ndarray] = {}
    for name in source.paths:
        for flag, mask in board.paths[name].flags(f, board.limit.distance_m).items():
            flags[flag] = flags[flag] | mask if flag in flags else np.asarray(mask, bool)
    return flags


def _tuning_grid(lo_hz: np.ndarray, hi_hz: np.ndarray, step_hz: np.ndarray):
    """Evenly spaced tuning points over each [lo, hi] with steps of at most ``step_hz``.

    Returns the points and, for each, the index of the row it belongs to.
    """
    counts = np.ceil((hi_hz - lo_hz) / step_hz).astype(np.int64) + 1
    owner = np.repeat(np.arange(lo_hz.size), counts)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    k = np.arange(owner.size) - starts[owner]
    spacing = (hi_hz - lo_hz) / np.maximum(counts - 1, 1)
    return lo_hz[owner] + k * spacing[owner], owner


@dataclass(frozen=True)
class _SourcePart:
    """One source's harmonics on their way through the pipeline."""

    lines: SourceLines
    source: Source
    n: np.ndarray
    f: np.ndarray
    band_lo: np.ndarray
    band_hi: np.ndarray
    magnitude: np.ndarray  # |harmonic| of the source's own quantity (RMS)
    per_unit: dict[str, np.ndarray]
    gains: dict[str, np.ndarray]
    tuning: np.ndarray
    owner: np.ndarray
    unspread: SourceLines | None
    rbw: np.ndarray

    @property
    def live(self) -> np.ndarray:
        """The harmonic exists (not a spectral null of the source's waveform)."""
        return self.magnitude > 0


class Reuse:
    """Work shared by estimates of many boards built from one template (see :mod:`emispec.ensemble`).

    A source whose entry, paths, rail and limit are the same objects as in an
    earlier board has the same harmonics, path gains and line spectrum; they
    are looked up here instead of computed again.  Results are identical to
    estimates without it.
    """

    def __init__(self, size: int = 64) -> None:
        self.size = size
        self._parts: dict = {}

    def part(self, board: Board, source: Source, lo: float, hi: float) -> _SourcePart:
        deps = (source, board.limit, board.rails.get(source.rail), *(board.paths[p] for p in source.paths))
        key = (tuple(id(d) for d in deps), lo, hi)
        hit = self._parts.get(key)
        if hit is None:
            if len(self._parts) >= self.size:
                self._parts.pop(next(iter(self._parts)))
            hit = self._parts[key] = (deps, _source_part(board, source, lo, hi))
        return hit[1]


def _source_part(board: Board, source: Source, lo: float, hi: float) -> _SourcePart:
    spread, f0 = source.spread, source.frequency_hz
    n = _harmonic_numbers(source, lo, hi)
    f = n * f0
    phasor = source.phasors(n)
    gains = source_gains(board, source, f)
    unmodulated = SourceLines(source.name, source.reference, f0, f, phasor * _total_gain(gains))
    if spread is None:
        lines, unspread = unmodulated, None
        band_lo = band_hi = f
        tuning, owner = f.copy(), np.arange(n.size)
        rbw = resolution_bandwidth_hz(f)
    else:
        line_hz, amp, _ = harmonic_lines(spread, f0, n, phasor)
        order = np.argsort(line_hz, kind="stable")
        line_hz = line_hz[order]
        amp = amp[order] * _total_gain(source_gains(board, source, line_hz))
        lines = SourceLines(source.name, source.reference, spread.rate_hz, line_hz, amp, modulated=True)
        unspread = unmodulated
        band_lo, band_hi = occupied_band_hz(spread, f0, n)
        rbw = resolution_bandwidth_hz(0.5 * (band_lo + band_hi))
        tuning, owner = _tuning_grid(band_lo - rbw / 2, band_hi + rbw / 2, rbw / 2)
    return _SourcePart(lines, source, n, f, band_lo, band_hi, np.abs(phasor), source.per_unit(f), gains, tuning,
                       owner, unspread, rbw)


def _decoupling_columns(board: Board, part: _SourcePart, own: dict, share: dict, limit: dict, span_hz) -> dict:
    """|Z_dec|, suppression, the largest |Z_dec| that keeps the guard band, and the rail flags.

    The escape paths' readings scale with |Z_dec / (Z_dec + Z_path)|.  Holding
    the other paths fixed, the escape part may rise to what the limit minus the
    guard band leaves; inverting the divider of the dominant escape path (with
    the present phase of Z_dec) gives the required |Z_dec|.
    """
    source, f, rows = part.source, part.f, part.n.size
    none = np.full(rows, np.nan)
    flags = {name: np.zeros(rows, bool) for name in (DECOUPLING_INSUFFICIENT, ABOVE_TARGET, NEAR_ANTI_RESONANCE)}
    if source.rail is None:
        return dict(decoupling_impedance_ohm=none, suppression_db=none, required_impedance_ohm=none, flags=flags)
    rail = board.rails[source.rail]
    z_dec = rail.decoupling_impedance(f)
    escaping = [p for p in source.paths if board.paths[p].input == "escape"]
    if escaping:
        fractions = {p: _escape(board, source, p, f) for p in escaping}
        suppression = np.min([-20 * np.log10(np.abs(d)) for d in fractions.values()], axis=0)
    else:  # no escape path: against a short at the connector
        suppression = -20 * np.log10(np.abs(escape_fraction(z_dec, rail.supply_impedance(f))))
    required = np.full(rows, np.inf)
    if escaping:
        dominant = max(escaping, key=lambda p: np.nanmax(share[p]) if np.isfinite(share[p]).any() else -1)
        d_now = np.abs(fractions[dominant])
        z_path = rail.supply_impedance(f) + board.paths[dominant].termination(f)
        for det in own:
            target = from_db(limit[det] - board.guard_band_db, 1e-6)
            escape = np.sqrt(sum((own[det] * share[p]) ** 2 for p in escaping))
            other = np.sqrt(sum((own[det] * share[p]) ** 2 for p in source.paths if p not in escaping))
            with np.errstate(invalid="ignore", divide="ignore"):
                allowed = np.sqrt(np.maximum(target**2 - other**2, 0.0)) / escape
                root = impedance_for_escape(allowed * d_now, z_dec, z_path)
            required = np.where(np.isfinite(target) & (escape > 0), np.fmin(required, root), required)
    required = np.where(np.isinf(required), np.nan, required)
    flags[DECOUPLING_INSUFFICIENT] = np.abs(z_dec) > np.nan_to_num(required, nan=np.inf)
    if rail.target_ohm is not None:
        flags[ABOVE_TARGET] = np.abs(z_dec) > rail.target_ohm
    grid = np.geomspace(span_hz[0] / 10, span_hz[1] * 2, 4000)
    for _, _, lo, hi in anti_resonances(grid, rail.decoupling_impedance(grid)):
        flags[NEAR_ANTI_RESONANCE] |= (f >= lo) & (f <= hi)
    flags = {k: v & part.live for k, v in flags.items()}
    return dict(decoupling_impedance_ohm=np.abs(z_dec), suppression_db=suppression, required_impedance_ohm=required,
                flags=flags)


def _combine(per_source: list[dict[str, np.ndarray]], references: list[str | None], detectors):
    """Sources sharing a reference add in amplitude (worst case); the groups add in power."""
    groups: dict[object, dict[str, np.ndarray]] = {}
    for k, (reading, ref) in enumerate(zip(per_source, references)):
        key = ref if ref is not None else ("own", k)
        if key in groups:
            groups[key] = {d: groups[key][d] + reading[d] for d in detectors}
        else:
            groups[key] = dict(reading)
    return {d: np.sqrt(sum(g[d] ** 2 for g in groups.values())) for d in detectors}


def _row_max(values: np.ndarray, owner: np.ndarray, rows: int) -> np.ndarray:
    """Maximum of each row's tuning-point values, ignoring NaN (NaN where a row has no value)."""
    out = np.full(rows, -np.inf)
    np.fmax.at(out, owner, values)
    return np.where(np.isneginf(out), np.nan, out)


def _read_at(sources: list[SourceLines], tuning: np.ndarray, detectors):
    """Each source's readings at the tuning frequencies, and all sources combined."""
    per_source = [sweep(s.line_hz, s.line_amplitude, s.grid_hz, tuning, detectors) for s in sources]
    return per_source, _combine(per_source, [s.reference for s in sources], detectors)


def _refinement(part: _SourcePart, combined_here: dict[str, np.ndarray]):
    """Extra tuning points a quarter RBW either side of each local maximum within 1.5 dB of its row's best.

    A reading varies smoothly over a tuning step of half the RBW, but its maximum
    can fall between two steps (by up to about 1.5 dB at the edges of a spread
    band); the quarter-RBW points around every candidate peak find it.
    """
    if part.source.spread is None or part.tuning.size == 0:
        return np.array([]), np.array([], dtype=np.int64)
    owner = part.owner
    same_prev = np.concatenate([[False], owner[1:] == owner[:-1]])
    same_next = np.concatenate([owner[:-1] == owner[1:], [False]])
    keep = np.zeros(owner.size, bool)
    for value in combined_here.values():  # each detector may peak elsewhere
        value = np.nan_to_num(value)
        prev = np.where(same_prev, np.roll(value, 1), -np.inf)
        nxt = np.where(same_next, np.roll(value, -1), -np.inf)
        best = np.nan_to_num(_row_max(value, owner, part.n.size))
        keep |= (value >= prev) & (value >= nxt) & (value > 0) & (value >= best[owner] * 10 ** (-1.5 / 20))
    rows = owner[keep]
    step = part.rbw[rows] / 4
    points = np.concatenate([part.tuning[keep] - step, part.tuning[keep] + step])
    owners = np.concatenate([rows, rows])
    # stay inside each row's own tuning range
    lo = (part.band_lo - part.rbw / 2)[owners]
    hi = (part.band_hi + part.rbw / 2)[owners]
    inside = (points >= lo) & (points <= hi)
    return points[inside], owners[inside]


def _overlap_flags(parts: list[_SourcePart]) -> list[dict[str, np.ndarray]]:
    """Rows whose band comes within one RBW of another source's (non-null) harmonic."""
    flags = []
    for part in parts:
        rbw = resolution_bandwidth_hz(part.f)
        mine = {}
        for other in parts:
            if other is part:
                continue
            lo_o, hi_o = other.band_lo[other.live], other.band_hi[other.live]
            order = np.argsort(lo_o)
            lo_o, hi_o = lo_o[order], np.maximum.accumulate(hi_o[order]) if hi_o.size else hi_o
            # the last band starting before our upper edge (+ RBW) must end after our lower edge (- RBW)
            k = np.searchsorted(lo_o, part.band_hi + rbw, side="right") - 1
            hit = (k >= 0) & (hi_o[np.maximum(k, 0)] >= part.band_lo - rbw) if lo_o.size else np.zeros(part.n.shape, bool)
            mine[f"overlaps:{other.source.name}"] = hit
        flags.append(mine)
    return flags


def _cat(arrays):
    return np.concatenate(arrays) if arrays else np.array([])


def estimate(board: Board, reuse: Reuse | None = None) -> Estimate:
    """Every source harmonic's reading, limit and margin, worst first.

    Parameters
    ----------
    board : Board
        A validated board (see :func:`emispec.board.load_board`).
    reuse : Reuse, optional
        Work shared with estimates of other boards of the same template.

    Returns
    -------
    Estimate
    """
    lo, hi = analysis_span_hz(board)
    detectors = board.limit.detectors
    parts = [reuse.part(board, source, lo, hi) if reuse is not None else _source_part(board, source, lo, hi)
             for source in board.sources]
    lines = [p.lines for p in parts]

    coarse = _cat([p.tuning for p in parts])
    coarse_seg = np.cumsum([0] + [p.tuning.size for p in parts])
    per_source, combined = _read_at(lines, coarse, detectors)
    refined = [_refinement(p, {d: combined[d][coarse_seg[k]:coarse_seg[k + 1]] for d in detectors})
               for k, p in enumerate(parts)]
    fine = _cat([r[0] for r in refined])
    fine_seg = np.cumsum([0] + [r[0].size for r in refined])
    per_source_fine, combined_fine = _read_at(lines, fine, detectors)
    limits_coarse = board.limit.levels(coarse) if coarse.size else {d: np.array([]) for d in detectors}
    limits_fine = board.limit.levels(fine) if fine.size else {d: np.array([]) for d in detectors}
    overlaps = _overlap_flags(parts)

    columns = []
    for k, part in enumerate(parts):
        a, b = slice(coarse_seg[k], coarse_seg[k + 1]), slice(fine_seg[k], fine_seg[k + 1])
        owner = np.concatenate([part.owner, refined[k][1]])

        def per_row(coarse_values, fine_values, a=a, b=b, owner=owner, rows=part.n.size):
            return _row_max(np.concatenate([coarse_values[a], fine_values[b]]), owner, rows)

        own = {d: per_row(per_source[k][d], per_source_fine[k][d]) for d in detectors}
        columns.append(_source_columns(board, part, own, {d: per_row(combined[d], combined_fine[d]) for d in detectors},
                                       {d: -per_row(-limits_coarse[d], -limits_fine[d]) for d in detectors},
                                       overlaps[k], (lo, hi)))
    rows = assemble_rows(columns, detectors, board.guard_band_db)
    return Estimate(board, (lo, hi), rows, tuple(lines))


def _source_columns(board: Board, part: _SourcePart, own: dict, combined: dict, limit: dict, overlaps: dict,
                    span_hz) -> dict:
    """The columns of one source's rows.

    ``own`` is the source's own reading per detector, ``combined`` what the
    receiver reads there from all sources, ``limit`` the lowest limit over the
    row's tuning points (NaN where no line of that detector applies).
    """
    rows, detectors = part.n.size, board.limit.detectors
    # a harmonic on a spectral null has no reading of its own, whatever else sits at its frequency
    reading = {d: np.where(part.live, combined[d], 0.0) for d in detectors}
    total = _total_gain(part.gains)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = {p: g / total for p, g in part.gains.items()}
    reduction = {d: np.full(rows, np.nan) for d in detectors}
    if part.unspread is not None:
        plain = sweep(part.unspread.line_hz, part.unspread.line_amplitude, part.unspread.grid_hz, part.f, detectors)
        reduction = {d: db_micro(plain[d]) - db_micro(own[d]) for d in detectors}
    flags = _path_flags(board, part.source, part.f)
    flags[SPECTRAL_NULL] = ~part.live
    flags.update(overlaps)
    rail = _decoupling_columns(board, part, own, share, limit, span_hz)
    flags.update(rail.pop("flags"))
    return dict(
        source=np.full(rows, part.source.name, dtype=object),
        harmonic=part.n,
        frequency_hz=part.f,
        band_lo_hz=np.asarray(part.band_lo, dtype=float),
        band_hi_hz=np.asarray(part.band_hi, dtype=float),
        spread=np.full(rows, part.source.spread is not None),
        line_dbuv=db_micro(part.magnitude * part.per_unit["voltage"]),
        line_dbua=db_micro(part.magnitude * part.per_unit["current"]),
        path_readings={p: {d: db_micro(own[d] * share[p]) for d in detectors} for p in part.gains},
        readings={d: db_micro(reading[d]) for d in detectors},
        spread_reduction_db=reduction,
        limits=limit,
        flags=flags,
        **rail,
    )


# ---------------------------------------------------------------- what the outputs draw


def swept_spectrum(est: Estimate, detectors=SWEPT_DETECTORS) -> dict[str, Trace]:
    """The receiver's swept readings over the analysed span, all sources together, one trace per detector.

    Tuning steps are half the resolution bandwidth of each CISPR band, plus a
    point exactly on every unmodulated line.  Levels are in dB of the limit's
    unit (NaN where nothing is read).
    """
    lo, hi = est.span_hz
    grids = []
    for band in BANDS:
        start, stop = max(lo, band.start_hz), min(hi, band.stop_hz)
        if start < stop:
            grids.append(np.arange(start, stop, band.rbw_hz / 2))
    exact = [s.line_hz for s in est.lines if not s.modulated]
    tuning = np.unique(np.concatenate(grids + [x[(x >= lo) & (x <= hi)] for x in exact] + [np.array([hi])]))
    _, combined = _read_at(list(est.lines), tuning, detectors)
    unit = est.board.limit.unit
    return {d: Trace(tuning, db_micro(v), unit, d, origin="swept receiver") for d, v in combined.items()}


def envelope_traces(est: Estimate, frequency_hz) -> dict[str, Trace]:
    """Each source's unspread spectral envelope carried through its paths, in dB of the limit's unit.

    Sources without an envelope (see :meth:`emispec.sources.Source.envelope`) are left out.
    """
    f = np.asarray(frequency_hz, dtype=float)
    out = {}
    for source in est.board.sources:
        bound = source.envelope(f)
        if bound is not None:
            level = db_micro(bound * _total_gain(source_gains(est.board, source, f)))
            out[source.name] = Trace(f, level, est.board.limit.unit, origin="envelope")
    return out


@dataclass(frozen=True)
class RailView:
    """What a rail plot and listing show: |Z_dec| and the supply path on a grid, the parts and the peaks."""

    name: str
    voltage_v: float
    target_ohm: float | None
    frequency_hz: np.ndarray
    decoupling_ohm: np.ndarray
    supply_ohm: np.ndarray
    summary: dict


def rail_view(est: Estimate, name: str, points: int = 3000) -> RailView:
    """The rail's impedances from a decade below to twice above the analysed span, with its summary."""
    rail = est.board.rails[name]
    lo, hi = est.span_hz
    grid = np.geomspace(lo / 10, hi * 2, points)
    return RailView(name, rail.voltage_v, rail.target_ohm, grid, np.abs(rail.decoupling_impedance(grid)),
                    np.abs(rail.supply_impedance(grid)), rail_summary(rail, est.span_hz))
