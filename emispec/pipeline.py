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

from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from .board import Board
from .schema import BoardError
from .coupling import common_mode_current
from .decoupling import ABOVE_TARGET, DECOUPLING_INSUFFICIENT, NEAR_ANTI_RESONANCE, impedance_for_escape, rail_summary
from .flags import declare
from .limits import upper_frequency_hz
from .readings import PASSES, combine, read_rows, row_max, sweep_lines
from .receiver import BANDS, REACH_RBW, repeats_fast, band_index, resolution_bandwidth_hz, sweep
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
    "CableView",
    "cable_view",
    "antenna_cables",
    "analysis_span_hz",
    "source_gains",
    "path_readings",
    "estimate",
    "board_lines",
    "readings_at",
    "Stage",
    "read_board",
    "tuning_of",
    "row_limits",
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
        read = int(np.isfinite(r.worst_margin_db).sum())  # rows with a reading: nulls and rows off every line not
        return Verdict(kind, read, self.over_limit, self.within_guard_band, self.board.guard_band_db, worst)

    def verdict(self) -> str:
        """The verdict in one line (see :func:`emispec.columns.verdict_text`)."""
        from .columns import verdict_text

        return verdict_text(self.outcome)


def highest_frequency_hz(board: Board) -> float:
    """The highest internal frequency for the standards' upper-frequency rule.

    The highest instantaneous frequency of any modelled source (a down-spread clock peaks at f0, a centre
    spread at f0 (1 + deviation/2), an up spread at f0 (1 + deviation)), or the board's
    ``highest_internal_frequency`` where that is higher (a PLL's oscillator no source models); infinite
    where the board says it is unknown, which gives the rule's widest span.
    """
    modelled = max(s.frequency_hz * (s.spread.centre_factor + s.spread.deviation / 2 if s.spread else 1.0)
                   for s in board.sources)
    return modelled if board.highest_frequency_hz is None else max(modelled, board.highest_frequency_hz)


def analysis_span_hz(board: Board) -> tuple[float, float]:
    """Frequency span to analyse: the limit's lines, cut at the standard's upper frequency and the board's cap."""
    lo, hi = board.limit.span_hz
    hi = min(hi, upper_frequency_hz(board.limit.upper_frequency, highest_frequency_hz(board)))
    if board.max_frequency_hz is not None:
        hi = min(hi, board.max_frequency_hz)
    return lo, hi


def _harmonic_range(source: Source, lo: float, hi: float) -> tuple[int, int]:
    """First and last harmonic whose occupied band touches [lo, hi] (last < first: none), without listing them."""
    f0 = source.frequency_hz
    low_factor = high_factor = 1.0
    if source.spread is not None:
        low_factor = source.spread.centre_factor - source.spread.deviation / 2
        high_factor = source.spread.centre_factor + source.spread.deviation / 2
    first = max(1, int(np.ceil(lo / (f0 * high_factor) * (1 - 1e-12))))
    last = int(np.floor(hi / (f0 * low_factor) * (1 + 1e-12)))
    return first, last


def _harmonic_numbers(source: Source, lo: float, hi: float) -> np.ndarray:
    """Harmonics whose occupied band touches [lo, hi]."""
    first, last = _harmonic_range(source, lo, hi)
    return np.arange(first, last + 1, dtype=np.int64)


def _escape(board: Board, source: Source, path_name: str, frequency_hz) -> np.ndarray:
    """Complex fraction of the rail current that leaves through this path's termination."""
    return board.rails[source.rail].escape(frequency_hz, board.paths[path_name].termination(frequency_hz))


def _quantities_here(board: Board, source: Source, name: str, f, quantities: dict) -> dict:
    """What path ``name`` reads: the source's quantities, and for an escape path the rail current that leaves."""
    if board.paths[name].input != "escape":
        return quantities
    return {**quantities, "escape": quantities["rail"] * np.abs(_escape(board, source, name, f))}


def path_readings(board: Board, source: Source, frequency_hz, quantities: dict[str, np.ndarray]) -> dict:
    """Each of the source's paths: its reading (linear, in the limit's unit) of the source's quantities.

    ``quantities`` holds the RMS magnitudes of the source's voltage, current and rail current at each
    frequency.  Escape paths read the rail current times the part that the rail's decoupling lets through to
    their termination.
    """
    f = np.asarray(frequency_hz, dtype=float)
    return {name: board.paths[name].reading(f, _quantities_here(board, source, name, f, quantities),
                                            board.limit.distance_m)
            for name in source.paths}


def cable_currents(board: Board, source: Source, frequency_hz, quantities: dict) -> dict[str, np.ndarray]:
    """The common-mode current at the base of each of the source's cables [A RMS]."""
    f = np.asarray(frequency_hz, dtype=float)
    out = {}
    for name in source.paths:
        current = common_mode_current(board.paths[name], f, _quantities_here(board, source, name, f, quantities))
        if current is not None:
            out[name] = current
    return out


def source_gains(board: Board, source: Source, frequency_hz) -> dict[str, np.ndarray]:
    """Each path's reading per unit (1 V, 1 A) of every quantity: what the path does to a source, alone."""
    f = np.asarray(frequency_hz, dtype=float)
    ones = np.ones(f.shape)
    return path_readings(board, source, f, {"voltage": ones, "current": ones, "rail": ones})


def _total_gain(gains: dict[str, np.ndarray], combine: str = "power") -> np.ndarray:
    """Paths of one source add in power (their relative phase is unknown), or in amplitude (``"coherent"``:
    the worst case, up to +6 dB with two equal paths)."""
    if combine == "coherent":
        return sum(np.asarray(g) for g in gains.values())
    return np.sqrt(sum(g**2 for g in gains.values()))


def _path_flags(board: Board, source: Source, f: np.ndarray) -> dict[str, np.ndarray]:
    """Each path's validity flags, OR-ed over the source's paths."""
    flags: dict[str, np.ndarray] = {}
    for name in source.paths:
        for flag, mask in board.paths[name].flags(f, board.limit.distance_m).items():
            flags[flag] = flags[flag] | mask if flag in flags else np.asarray(mask, bool)
    return flags


def _tuning_grid(lo_hz: np.ndarray, hi_hz: np.ndarray, step_hz: np.ndarray):
    """Tuning points over each [lo, hi]: its ends and the multiples of ``step_hz`` between them.

    The inner points sit on one absolute lattice, not on one spaced from ``lo``: a row whose band moves
    (another spread deviation) is then read at the points it was read at before, which a memo of readings
    (:class:`Reuse`) finds.  Returns the points and, for each, the index of the row it belongs to.
    """
    first = np.floor(lo_hz / step_hz).astype(np.int64) + 1
    last = np.ceil(hi_hz / step_hz).astype(np.int64) - 1
    inner = np.maximum(last - first + 1, 0)
    counts = inner + 1 + (hi_hz > lo_hz)
    owner = np.repeat(np.arange(lo_hz.size), counts)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    k = np.arange(owner.size) - starts[owner]
    points = np.where(k == 0, lo_hz[owner], (first[owner] + k - 1) * step_hz[owner])
    points = np.where(k == counts[owner] - 1, hi_hz[owner], points)
    return points, owner


@dataclass(frozen=True)
class _SourcePart:
    """One source's harmonics on their way through the pipeline."""

    lines: SourceLines
    source: Source
    n: np.ndarray
    f: np.ndarray
    band_lo: np.ndarray
    band_hi: np.ndarray
    levels: dict[str, np.ndarray]  # RMS magnitudes of voltage, current and rail current the margins use
    readings: dict[str, np.ndarray]  # each path's reading at n f0 (linear, limit unit)
    tuning: np.ndarray
    owner: np.ndarray
    unspread: SourceLines | None
    rbw: np.ndarray
    unit: SourceLines  # the lines of unit harmonics (RMS 1, the harmonics' phases), before any path
    line_owner: np.ndarray  # the row each line of ``unit`` belongs to

    @property
    def total(self) -> np.ndarray:
        return _total_gain(self.readings, self.source.combine)

    @property
    def live(self) -> np.ndarray:
        """The harmonic reaches the receiver through some path (not a null of what every path reads)."""
        return self.total > 0


class _Recent:
    """The most recently used entries, at most ``size`` of them and about ``budget_bytes`` of numpy arrays."""

    def __init__(self, size: int, budget_bytes: int) -> None:
        self.size, self.budget_bytes = size, budget_bytes
        self.entries: OrderedDict = OrderedDict()
        self.bytes: dict = {}

    def get(self, key, build):
        """``entries[key]``, built on a miss."""
        if key in self.entries:
            self.entries.move_to_end(key)
            return self.entries[key]
        self.entries[key] = value = build()
        self.grown(key)
        return value

    def grown(self, key) -> None:
        """Entry ``key`` has a new size; the least recently used entries go while there are too many."""
        self.bytes[key] = _array_bytes(self.entries[key])
        while len(self.entries) > 1 and (len(self.entries) > self.size or sum(self.bytes.values()) > self.budget_bytes):
            del self.bytes[self.entries.popitem(last=False)[0]]


class Reuse:
    """Work shared by estimates of many boards built from one template (see :mod:`emispec.ensemble`).

    A source equal to one of an earlier board, with the same path, rail and
    limit objects, has the same harmonics, path gains and line spectrum; they
    are looked up here instead of computed again.  Sources compare by value,
    so one that comes back (a value of one key recurring while another key
    varies) finds its lines again.  What the receiver reads of a source's
    spread lines at each tuning frequency is kept too, so those lines are read
    only at points they were not read at before.  A point's reading depends on
    nothing but the lines and the point (:func:`emispec.receiver.sweep`), so
    results are identical to estimates without it.
    """

    def __init__(self, size: int = 64, budget_bytes: int = 256 << 20) -> None:
        # a count and a size: a spread source that a study moves in every sample makes a new part and a new
        # entry of readings each time (tens of MB for a 250-harmonic clock), and none of them comes back
        self._parts = _Recent(size, budget_bytes)
        self._readings = _Recent(size, budget_bytes)  # (id(lines), detectors) -> [lines, sorted points, readings]

    def part(self, board: Board, source: Source, lo: float, hi: float) -> _SourcePart:
        deps = (board.limit, board.rails.get(source.rail), *(board.paths[p] for p in source.paths))
        key = (_value_key(source), tuple(id(d) for d in deps), lo, hi)
        # the entry holds what its key names by identity, so no id is reused while it lives
        return self._parts.get(key, lambda: (source, deps, _source_part(board, source, lo, hi)))[2]

    def read(self, lines: SourceLines, points: np.ndarray, detectors) -> dict[str, np.ndarray]:
        """What each detector reads of ``lines`` at ``points``, as :func:`emispec.readings.sweep_lines` returns
        it (remembered for spread lines, whose readings are the costly ones)."""
        if not lines.modulated:
            return sweep_lines(lines, points, detectors)
        detectors = tuple(detectors)
        key = (id(lines), detectors)
        entry = self._readings.get(key, lambda: [lines, np.array([]), {d: np.array([]) for d in detectors}])
        _, known, values = entry
        order = np.argsort(points, kind="stable")
        sorted_points = points[order]
        where = np.minimum(np.searchsorted(known, sorted_points), max(known.size - 1, 0))
        seen = (known[where] == sorted_points) if known.size else np.zeros(points.size, bool)
        new = np.unique(sorted_points[~seen])
        if new.size:
            fresh = sweep_lines(lines, new, detectors)
            at = np.searchsorted(known, new)  # both sorted: inserting keeps the order without sorting again
            entry[1] = known = np.insert(known, at, new)
            entry[2] = values = {d: np.insert(values[d], at, fresh[d]) for d in detectors}
            self._readings.grown(key)
            where = np.searchsorted(known, sorted_points)
        out = {}
        for d in detectors:
            out[d] = np.empty(points.size)
            out[d][order] = values[d][where]
        return out


def _array_bytes(value, depth: int = 3) -> int:
    """Bytes of the numpy arrays in ``value``: inside lists, tuples, dicts and dataclasses, ``depth`` levels down."""
    if isinstance(value, np.ndarray):
        return value.nbytes
    if depth == 0:
        return 0
    if isinstance(value, dict):
        value = value.values()
    elif hasattr(value, "__dataclass_fields__"):
        value = [getattr(value, name) for name in value.__dataclass_fields__]
    elif not isinstance(value, (list, tuple)):
        return 0
    return sum(_array_bytes(v, depth - 1) for v in value)


def _value_key(source: Source):
    """A source by its values where it can be hashed (a value that comes back finds its part again), else by
    identity."""
    try:
        hash(source)
    except TypeError:
        return ("id", id(source))
    return source


def _phase(harmonics: dict[str, np.ndarray]) -> np.ndarray:
    """Unit phasors of the source's first quantity: the voltage of a clock, the current of a pulse train."""
    primary = np.where(np.isfinite(harmonics["voltage"]), harmonics["voltage"], harmonics["current"])
    return np.exp(1j * np.angle(primary))


def _source_part(board: Board, source: Source, lo: float, hi: float) -> _SourcePart:
    spread, f0 = source.spread, source.frequency_hz
    n = _harmonic_numbers(source, lo, hi)
    f = n * f0
    harmonics = source.harmonics(n)
    levels = {k: np.abs(v) for k, v in harmonics.items()}
    phase = _phase(harmonics)
    readings = path_readings(board, source, f, levels)
    unmodulated = SourceLines(source.name, source.reference, f0, f, phase * _total_gain(readings, source.combine))
    if spread is None:
        lines, unspread = unmodulated, None
        unit, line_owner = SourceLines(source.name, source.reference, f0, f, phase), np.arange(n.size)
        band_lo = band_hi = f
        tuning, owner = f.copy(), np.arange(n.size)
        rbw = resolution_bandwidth_hz(f)
    else:
        line_hz, amp, line_owner = harmonic_lines(spread, f0, n, phase)
        order = np.argsort(line_hz, kind="stable")
        line_hz, amp, line_owner = line_hz[order], amp[order], line_owner[order]
        at_lines = path_readings(board, source, line_hz, {k: v[line_owner] for k, v in levels.items()})
        lines = SourceLines(source.name, source.reference, spread.rate_hz, line_hz,
                            amp * _total_gain(at_lines, source.combine), modulated=True)
        unit = SourceLines(source.name, source.reference, spread.rate_hz, line_hz, amp, modulated=True)
        unspread = unmodulated
        band_lo, band_hi = occupied_band_hz(spread, f0, n)
        rbw = resolution_bandwidth_hz(0.5 * (band_lo + band_hi))
        tuning, owner = _tuning_grid(band_lo - rbw / 2, band_hi + rbw / 2, rbw / 2)
    return _SourcePart(lines, source, n, f, band_lo, band_hi, levels, readings, tuning, owner, unspread, rbw, unit,
                       line_owner)


def _escape_share(board: Board, part: _SourcePart, rail: str, i: np.ndarray) -> np.ndarray:
    """The power fraction of rows ``i`` of this source's reading that passes through escape paths of ``rail``."""
    escaping = np.zeros(i.shape)
    if part.source.rail != rail or part.f.size == 0:
        return escaping
    total = part.total[i]
    with np.errstate(invalid="ignore", divide="ignore"):
        for p, g in part.readings.items():
            if board.paths[p].input == "escape":
                escaping += (g[i] / total) ** 2
    return np.nan_to_num(escaping)


def _nearest(sorted_hz: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Index of the nearest value of ``sorted_hz`` to each of ``x``."""
    i = np.clip(np.searchsorted(sorted_hz, x), 1, max(sorted_hz.size - 1, 1))
    left = np.clip(i - 1, 0, sorted_hz.size - 1)
    right = np.clip(i, 0, sorted_hz.size - 1)
    return np.where(np.abs(x - sorted_hz[left]) <= np.abs(sorted_hz[right] - x), left, right)


def _decoupling_columns(board: Board, parts: list[_SourcePart], k: int, readings, best: dict, limit: dict,
                        span_hz) -> dict:
    """|Z_dec|, its worst value within the part tolerances, suppression, the required |Z_dec|, and the rail flags.

    Required impedance: at the tuning point where the row reads most (per detector), every source's reading
    there is split into what passes through escape paths of this rail (E, which scales with the escape
    fraction) and the rest (O: other paths, other rails, sources without a rail).  The escape part may rise
    to sqrt(T^2 - O^2) with T the limit minus the guard band; inverting the escape fraction of the row's
    dominant escape path (at the present phase of Z_dec) gives the largest |Z_dec| that keeps the row there.
    Contributions are split in power, so sources that add in amplitude (a shared reference) count their
    coherent excess as fixed: the answer errs low, on the safe side.
    """
    part = parts[k]
    source, f, rows = part.source, part.f, part.n.size
    none = np.full(rows, np.nan)
    flags = {name: np.zeros(rows, bool) for name in (DECOUPLING_INSUFFICIENT, ABOVE_TARGET, NEAR_ANTI_RESONANCE)}
    empty = dict(decoupling_impedance_ohm=none, decoupling_impedance_max_ohm=none, suppression_db=none,
                 required_impedance_ohm=none, flags=flags)
    if source.rail is None:
        return empty
    rail = board.rails[source.rail]
    z_dec = rail.decoupling_impedance(f)
    escaping = [p for p in source.paths if board.paths[p].input == "escape"]
    if escaping:
        fractions = {p: _escape(board, source, p, f) for p in escaping}
        suppression = np.min([-20 * np.log10(np.abs(d)) for d in fractions.values()], axis=0)
    else:  # no escape path: against a short at the connector
        suppression = -20 * np.log10(np.abs(rail.escape(f, np.zeros(f.shape))))
    required = np.full(rows, np.inf)
    if escaping:
        total = part.total
        with np.errstate(invalid="ignore", divide="ignore"):
            share = {p: np.nan_to_num(part.readings[p] / total) for p in escaping}
        dominant = max(escaping, key=lambda p: np.nanmax(share[p]) if share[p].size else -1)
        d_now = np.abs(fractions[dominant])
        coefficients = rail.escape_coefficients(f, board.paths[dominant].termination(f))
        for det, (value, index) in best.items():
            found = index >= 0
            escape = np.zeros(rows)
            for s, other in enumerate(parts):
                r_s = np.where(found, readings.per_source[s][det][np.maximum(index, 0)], 0.0)
                if other is part:
                    e_s = _escape_share(board, other, rail.name, np.arange(rows))
                elif other.f.size:
                    e_s = _escape_share(board, other, rail.name,
                                        _nearest(other.f, readings.points[np.maximum(index, 0)]))
                else:
                    continue
                escape += r_s**2 * e_s
            target = from_db(limit[det] - board.guard_band_db, 1e-6)
            with np.errstate(invalid="ignore", divide="ignore"):
                fixed = np.maximum(value**2 - escape, 0.0)
                allowed = np.sqrt(np.maximum(target**2 - fixed, 0.0)) / np.sqrt(escape)
                root = impedance_for_escape(allowed * d_now, z_dec, *coefficients)
            ok = found & np.isfinite(target) & (escape > 0)
            required = np.where(ok, np.fmin(required, root), required)
    required = np.where(np.isinf(required), np.nan, required)
    worst = rail.worst_impedance(f)
    flags[DECOUPLING_INSUFFICIENT] = np.abs(z_dec) > np.nan_to_num(required, nan=np.inf)
    flags[NEAR_ANTI_RESONANCE] = worst > np.nan_to_num(required, nan=np.inf)
    if rail.target_ohm is not None:
        flags[ABOVE_TARGET] = (np.abs(z_dec) > rail.target_ohm) & (f <= rail.target_up_to_hz)
    flags = {k: v & part.live for k, v in flags.items()}
    return dict(decoupling_impedance_ohm=np.abs(z_dec), decoupling_impedance_max_ohm=worst,
                suppression_db=suppression, required_impedance_ohm=required, flags=flags)


def _read_at(sources: list[SourceLines], tuning: np.ndarray, detectors):
    """Each source's readings at the tuning frequencies, and all sources combined."""
    per_source = [sweep(s.line_hz, s.line_amplitude, s.grid_hz, tuning, detectors) for s in sources]
    return per_source, combine(per_source, [s.reference for s in sources], detectors)


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


def work(board: Board) -> list[dict]:
    """What an estimate of the board costs, per source, before any of it is done.

    Each entry: the source, its key path prefix, its harmonics in the span, its spectral lines (a spread
    harmonic n has about 2 beta_n + 8 beta_n^(1/3) + 32 of them, beta_n = n delta f0 / (2 fm)), and the
    receiver's cells: tuning points (two per RBW across each spread band) times the lines each one reaches.
    """
    lo, hi = analysis_span_hz(board)
    out = []
    for source in board.sources:
        first, last = _harmonic_range(source, lo, hi)
        count = max(last - first + 1, 0)
        lines, cells, steps = float(count), 32.0 * count, 0.0
        if source.spread is not None and 0 < count <= BUDGET["harmonics"] * 100:
            n = np.arange(first, last + 1, dtype=np.int64)
            beta = source.spread.beta(source.frequency_hz, n)
            per_harmonic = 2 * beta + 8 * np.cbrt(beta) + 32
            f = n * source.frequency_hz
            rbw = resolution_bandwidth_hz(f)
            points = f * source.spread.deviation / (rbw / 2) + 3
            reach = np.minimum(per_harmonic, 2 * REACH_RBW * rbw / source.spread.rate_hz)
            fft = np.maximum(32, 4 * reach)  # each tuning point takes an FFT about 4x the lines it reaches
            lines, cells = float(per_harmonic.sum()), float(np.sum(points * fft))
            # a modulation too slow for the detectors' closed forms is stepped in time, sample by sample, for
            # about 25 periods per group of tuning points and 6 reading passes
            # (a band's tuning points reach past its harmonic by the deviation and an RBW: across a CISPR band
            # edge, such as 30 MHz at the top of a conducted span, they are read with the next band's detector)
            top = f * (1 + source.spread.deviation) + rbw
            rbw_top = resolution_bandwidth_hz(top)
            closed = np.array([repeats_fast(1 / source.spread.rate_hz, band) for band in BANDS])  # per band
            slow = ~(closed[band_index(f)] & closed[band_index(top)])
            fft_top = np.maximum(32, 4 * np.minimum(per_harmonic, 2 * REACH_RBW * np.maximum(rbw, rbw_top)
                                                    / source.spread.rate_hz))
            steps = float(np.sum(fft_top[slow & (f <= 1e9)])) * 25 * 6
        out.append({"source": source, "key": f"{source.section}[{source.name}]", "harmonics": count,
                    "lines": lines, "cells": cells, "steps": steps, "span_hz": (lo, hi)})
    return out


#: What one estimate may cost before it is refused (raise with ``budget``): about two seconds with its outputs
#: and well under 1 GB on a 2-core machine.  ``steps``: detector samples stepped in Python (slow modulation
#: only; measured: 3e5 of them took 2.5-2.9 s with the outputs).
BUDGET = {"harmonics": 3e4, "lines": 4e6, "cells": 1e7, "steps": 2.5e5}


def check_budget(board: Board, budget: float = 1.0) -> None:
    """Refuse, with the key to blame and the likely fix, an estimate whose work is beyond ``budget`` x :data:`BUDGET`.

    Raises
    ------
    BoardError
        Naming the source's frequency (too many harmonics: a missing unit such as "16" for "16 MHz") or its spread
        rate (too many spectral lines or tuning points: a rate of Hz rather than kHz).
    """
    from .units import format_quantity

    items = work(board)
    totals = {k: sum(w[k] for w in items) for k in BUDGET}
    for what, total in totals.items():
        allowed = BUDGET[what] * budget
        if total <= allowed:
            continue
        worst = max(items, key=lambda w: w[what])
        source, hi = worst["source"], worst["span_hz"][1]
        if what == "harmonics":
            key, value = f"{worst['key']}.frequency", format_quantity(source.frequency_hz, "Hz")
            hint = (f"{value} gives {worst['harmonics']:.3g} harmonics up to {format_quantity(hi, 'Hz')}"
                    + (f"; did you mean {source.frequency_hz:g} MHz?" if source.frequency_hz < 1e3 else ""))
        else:
            key, value = f"{worst['key']}.spread.rate", format_quantity(source.spread.rate_hz, "Hz")
            words = {"lines": "spectral lines", "cells": "receiver cells", "steps": "detector steps"}[what]
            hint = (f"a spread at {value} gives {worst[what]:.3g} {words} up to {format_quantity(hi, 'Hz')}"
                    + (f"; did you mean {source.spread.rate_hz:g} kHz?" if source.spread.rate_hz < 1e3 else ""))
        raise BoardError(board.file, key, f"{hint} (the estimate's budget is {allowed:.3g} {what}; raise it with "
                         f"--budget if you mean it)")


def _check_span(board: Board, lo: float, hi: float) -> None:
    """Refuse an estimate with nothing to read: a span cut below its start, or no harmonic of any source in it."""
    from .units import format_quantity

    if hi < lo:
        raise BoardError(board.file, "max_frequency", f"{format_quantity(hi, 'Hz')} is below the limit's span, which "
                         f"starts at {format_quantity(lo, 'Hz')}", board.max_frequency_hz)
    if not any(np.subtract(*_harmonic_range(s, lo, hi)[::-1]) >= 0 for s in board.sources):
        sources = ", ".join(f"{s.name} {format_quantity(s.frequency_hz, 'Hz')}" for s in board.sources)
        raise BoardError(board.file, "limit", f"nothing to estimate: no source has a harmonic between "
                         f"{format_quantity(lo, 'Hz')} and {format_quantity(hi, 'Hz')} (the analysed span; sources: "
                         f"{sources})")


def _check_finite(board: Board, columns: list[dict]) -> None:
    """A value that overflowed is an input problem, not missing data: name the source it came from."""
    for source, c in zip(board.sources, columns):
        values = [c["line_dbuv"], c["line_dbua"], *c["readings"].values()]
        if any(np.isinf(v).any() for v in values):
            raise BoardError(board.file, f"{source.section}[{source.name}]", "its levels overflow; check its swing, "
                             "load, current and the gains of its paths")


@dataclass(frozen=True)
class Stage:
    """A board read by the receiver, before its columns: the span, each source's part and its rows' readings.

    What :func:`estimate` builds its columns from, and what :mod:`emispec.risk` starts its samples from.
    """

    board: Board
    span_hz: tuple[float, float]
    parts: list
    read: list


def board_parts(board: Board, reuse: Reuse | None = None, step=None, budget: float = 1.0):
    """Check the board's span and budget and compute every source's part (steps 1 to 4): the span and the parts."""
    lo, hi = analysis_span_hz(board)
    _check_span(board, lo, hi)
    check_budget(board, budget)
    step = step or (lambda: None)
    parts = []
    for source in board.sources:
        parts.append(reuse.part(board, source, lo, hi) if reuse is not None else _source_part(board, source, lo, hi))
        step()
    return (lo, hi), parts


def read_board(board: Board, reuse: Reuse | None = None, step=None, budget: float = 1.0) -> Stage:
    """Check the board's span and budget, compute every source's part and read every row (steps 1 to 5)."""
    span, parts = board_parts(board, reuse, step, budget)
    read = read_rows([p.lines for p in parts], [p.lines.reference for p in parts], [tuning_of(p) for p in parts],
                     board.limit.detectors, step, reader=reuse.read if reuse is not None else None)
    return Stage(board, span, parts, read)


def tuning_of(part: _SourcePart) -> dict:
    """A part's first tuning points and each row's tuning range, as :func:`emispec.readings.read_rows` takes them."""
    return dict(points=part.tuning, owner=part.owner, lo_hz=part.band_lo - part.rbw / 2,
                hi_hz=part.band_hi + part.rbw / 2, rbw_hz=part.rbw, searched=part.source.spread is not None)


def row_limits(board: Board, rows) -> dict[str, np.ndarray]:
    """The lowest limit over each row's tuning points, per detector (NaN where no line of that detector applies)."""
    detectors = board.limit.detectors
    levels = board.limit.levels(rows.points) if rows.points.size else {d: np.array([]) for d in detectors}
    return {d: -row_max(-levels[d], rows.owner, rows.count) for d in detectors}


def estimate(board: Board, reuse: Reuse | None = None, progress=None, budget: float = 1.0) -> Estimate:
    """Every source harmonic's reading, limit and margin, worst first.

    Parameters
    ----------
    board : Board
        A validated board (see :func:`emispec.board.load_board`).
    reuse : Reuse, optional
        Work shared with estimates of other boards of the same template.
    progress : callable, optional
        Called as ``progress(done, total)`` while the estimate runs.
    budget : float
        Multiplies :data:`BUDGET`, the work an estimate may take (see :func:`check_budget`).

    Returns
    -------
    Estimate
    """
    detectors = board.limit.detectors
    total = 2 * len(board.sources) + PASSES
    done = [0]

    def step():
        done[0] += 1
        if progress is not None:
            progress(done[0], total)

    stage = read_board(board, reuse, step, budget)
    parts, read = stage.parts, stage.read
    done[0] = len(board.sources) + PASSES
    overlaps = _overlap_flags(parts)
    columns = []
    for k, (part, rows) in enumerate(zip(parts, read)):
        best = {d: rows.best(d) for d in detectors}
        own = {d: row_max(rows.per_source[k][d], rows.owner, part.n.size) for d in detectors}
        columns.append(_source_columns(board, parts, k, rows, own, best, row_limits(board, rows), overlaps[k],
                                       stage.span_hz))
        step()
    _check_finite(board, columns)
    return Estimate(board, stage.span_hz, assemble_rows(columns, detectors, board.guard_band_db),
                    tuple(p.lines for p in parts))


def _dominant(part: _SourcePart) -> np.ndarray:
    """The path that carries most of each row's own reading (None where no path reads anything)."""
    names = list(part.readings)
    if not names:
        return np.full(part.n.size, None, dtype=object)
    stacked = np.vstack([part.readings[p] for p in names])
    best = np.argmax(np.nan_to_num(stacked, nan=-1.0), axis=0)
    return np.where(part.live, np.array(names, dtype=object)[best], None)


def _source_columns(board: Board, parts: list[_SourcePart], k: int, readings, own: dict, best: dict, limit: dict,
                    overlaps: dict, span_hz) -> dict:
    """The columns of one source's rows.

    ``own`` is the source's own reading per detector, ``best`` what the receiver reads at the row's best
    tuning point from all sources (and where), ``limit`` the lowest limit over the row's tuning points (NaN
    where no line of that detector applies).
    """
    part = parts[k]
    rows, detectors = part.n.size, board.limit.detectors
    # a harmonic on a spectral null has no reading of its own, whatever else sits at its frequency
    reading = {d: np.where(part.live, best[d][0], 0.0) for d in detectors}
    total = part.total
    with np.errstate(invalid="ignore", divide="ignore"):
        share = {p: g / total for p, g in part.readings.items()}
    reduction = {d: np.full(rows, np.nan) for d in detectors}
    if part.unspread is not None:
        plain = sweep(part.unspread.line_hz, part.unspread.line_amplitude, part.unspread.grid_hz, part.f, detectors)
        reduction = {d: db_micro(plain[d]) - db_micro(own[d]) for d in detectors}
    flags = _path_flags(board, part.source, part.f)
    flags[SPECTRAL_NULL] = ~part.live
    flags.update(part.source.row_flags(part.n))
    flags.update(overlaps)
    rail = _decoupling_columns(board, parts, k, readings, best, limit, span_hz)
    flags.update(rail.pop("flags"))
    source = part.source
    cables = cable_currents(board, source, part.f, part.levels)
    exact = source.exact(part.n)
    bound = source.bounds(part.f)
    return dict(
        source=np.full(rows, source.name, dtype=object),
        harmonic=part.n,
        frequency_hz=part.f,
        band_lo_hz=np.asarray(part.band_lo, dtype=float),
        band_hi_hz=np.asarray(part.band_hi, dtype=float),
        spread=np.full(rows, source.spread is not None),
        harmonics=np.full(rows, source.mode, dtype=object),
        line_dbuv=db_micro(part.levels["voltage"]),
        line_dbua=db_micro(part.levels["current"]),
        rail_dbua=db_micro(part.levels["rail"]) if source.rail is not None else np.full(rows, np.nan),
        line_envelope_dbuv=db_micro(bound["voltage"]),
        line_exact_dbuv=db_micro(exact["voltage"]),
        line_envelope_dbua=db_micro(bound["current"]),
        line_exact_dbua=db_micro(exact["current"]),
        path_readings={p: {d: db_micro(own[d] * share[p]) for d in detectors} for p in part.readings},
        cable_current_dbua={p: db_micro(i) for p, i in cables.items()},
        readings={d: db_micro(reading[d]) for d in detectors},
        own_readings={d: db_micro(np.where(part.live, own[d], 0.0)) for d in detectors},
        dominant_path=_dominant(part),
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
    return readings_at(est.board, est.lines, tuning, detectors)


def board_lines(board: Board, reuse: Reuse | None = None) -> tuple[SourceLines, ...]:
    """Every source's lines over the analysed span, without reading any row (what a scan is compared with)."""
    lo, hi = analysis_span_hz(board)
    _check_span(board, lo, hi)
    check_budget(board)
    return tuple((reuse.part(board, s, lo, hi) if reuse is not None else _source_part(board, s, lo, hi)).lines
                 for s in board.sources)


def readings_at(board: Board, lines, tuning_hz, detectors=SWEPT_DETECTORS) -> dict[str, Trace]:
    """What the receiver reads of all sources together at the tuning frequencies, one trace per detector (dB of
    the limit's unit, NaN where nothing is read)."""
    tuning = np.asarray(tuning_hz, dtype=float)
    _, combined = _read_at(list(lines), tuning, detectors)
    unit = board.limit.unit
    return {d: Trace(tuning, db_micro(v), unit, d, origin="swept receiver") for d, v in combined.items()}


def envelope_traces(est: Estimate, frequency_hz) -> dict[str, Trace]:
    """Each source's unspread spectral envelope carried through its paths, in dB of the limit's unit."""
    f = np.asarray(frequency_hz, dtype=float)
    out = {}
    for source in est.board.sources:
        level = db_micro(_total_gain(path_readings(est.board, source, f, source.bounds(f)), source.combine))
        out[source.name] = Trace(f, level, est.board.limit.unit, origin="envelope")
    return out


@dataclass(frozen=True)
class CableView:
    """What a cable plot shows of an antenna cable: its response per volt of common-mode drive on a grid, its
    series resonances, and the common-mode current of every harmonic that drives it."""

    name: str
    length_m: float
    distance_m: float
    frequency_hz: np.ndarray
    current_dbua_per_v: np.ndarray  # |I| at the base per volt, dB(uA/V)
    field_dbuv_m_per_v: np.ndarray  # |E| at the limit's distance per volt, dB(uV/m per V)
    resonances_hz: np.ndarray
    harmonics: dict  # source name -> (frequency_hz, common-mode current dBuA)


def antenna_cables(board: Board) -> list[str]:
    """The board's cables modelled as antennas (the paths with resonances)."""
    return [name for name, path in board.paths.items() if hasattr(path, "resonances_hz")]


def cable_view(est: Estimate, name: str, points: int = 3000) -> CableView:
    """An antenna cable's response over the analysed span and its harmonics' common-mode currents."""
    path = est.board.paths[name]
    lo, hi = est.span_hz
    grid = np.geomspace(lo, hi, points)
    distance = est.board.limit.distance_m
    rows = est.rows
    currents = rows.cable_current_dbua.get(name, np.full(len(rows), np.nan))
    harmonics = {}
    for source in est.board.sources:
        mine = (rows.source == source.name) & np.isfinite(currents)
        if name in source.paths and mine.any():
            harmonics[source.name] = (rows.frequency_hz[mine], currents[mine])
    return CableView(name, path.length_m, distance, grid, db_micro(path.admittance(grid)),
                     db_micro(path.field_per_volt(grid, distance)), path.resonances_hz(lo, hi), harmonics)


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
