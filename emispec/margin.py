"""From a board to a margin table: every source harmonic, read by the receiver through its paths.

The pipeline is: source harmonics (waveform, spread) -> coupling paths
(coupling) -> spectral lines in the limit's unit -> swept receiver readings per
detector (receiver) -> limit levels (limits) -> margin = limit - reading.

Each row is one harmonic of one source.  Its reading on a detector is the
maximum, over the tuning frequencies in its occupied band, of what the
receiver reads there from all sources: an unmodulated harmonic is tuned onto
exactly; a spread harmonic is swept in steps of a quarter of the resolution
bandwidth across its band plus half a bandwidth either side.  Sources add in
power, except clocks that name the same ``reference``: those add in amplitude
(worst case).  The limit of a row is the lowest limit level over its tuning
frequencies, so that margin = limit - reading stays conservative across a
step.  Rows are columns of numpy arrays, sorted worst margin first; they
become dicts only at the output edge (report).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .board import Board, Clock
from .coupling import CablePath, LoopPath, near_field
from .limits import upper_frequency_hz
from .receiver import BANDS, resolution_bandwidth_hz, sweep
from .spread import harmonic_lines, occupied_band_hz
from .units import db_micro
from .waveform import envelope, harmonic_amplitudes, harmonic_phasors, load_current, rms

__all__ = [
    "FLAGS",
    "SourceLines",
    "Rows",
    "Estimate",
    "analysis_span_hz",
    "path_gains",
    "clock_envelope_dbu",
    "estimate",
    "swept_spectrum",
]

FLAGS = ("over-limit", "within-guard-band", "near-field", "loop-electrically-large", "spectral-null")
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
class Rows:
    """The margin table as columns, one entry per source harmonic, worst first.

    Levels are in dB of the limit's unit (dBuV/m, dBuV or dBuA); NaN marks a
    value that does not exist (a spectral null, a detector whose line does not
    cover the frequency, a current of a clock without a load).
    """

    source: np.ndarray
    harmonic: np.ndarray
    frequency_hz: np.ndarray
    band_lo_hz: np.ndarray
    band_hi_hz: np.ndarray
    spread: np.ndarray
    line_dbuv: np.ndarray
    line_dbua: np.ndarray
    path_readings: dict[str, dict[str, np.ndarray]]
    readings: dict[str, np.ndarray]
    spread_reduction_db: dict[str, np.ndarray]
    limits: dict[str, np.ndarray]
    margins: dict[str, np.ndarray]
    worst_margin_db: np.ndarray
    worst_detector: np.ndarray
    flags: dict[str, np.ndarray]

    def __len__(self) -> int:
        return len(self.harmonic)

    def flag_list(self, i: int) -> list[str]:
        return [name for name, mask in self.flags.items() if mask[i]]


@dataclass(frozen=True)
class Estimate:
    """Result of :func:`estimate`: the board, the analysed span, the rows and the sources' lines."""

    board: Board
    span_hz: tuple[float, float]
    rows: Rows
    source_paths: dict[str, tuple[str, ...]]
    sources: tuple[SourceLines, ...]

    @property
    def over_limit(self) -> int:
        return int(self.rows.flags["over-limit"].sum())

    @property
    def within_guard_band(self) -> int:
        return int(self.rows.flags["within-guard-band"].sum())

    @property
    def worst_index(self) -> int | None:
        return 0 if len(self.rows) and np.isfinite(self.rows.worst_margin_db[0]) else None

    def verdict(self) -> str:
        """One line: how many harmonics are over, within the guard band, and the worst."""
        n, guard = len(self.rows), self.board.guard_band_db
        i = self.worst_index
        if i is None:
            return f"NO DATA: no harmonic falls where the limit has a line ({n} rows)"
        r = self.rows
        worst = (
            f"worst {r.worst_margin_db[i]:+.1f} dB at {r.frequency_hz[i] / 1e6:.6g} MHz "
            f"({r.source[i]} n={r.harmonic[i]}, {r.worst_detector[i]})"
        )
        if self.over_limit:
            return (
                f"FAILS: {self.over_limit} of {n} harmonics over the limit, {self.within_guard_band} within "
                f"the {guard:g} dB guard band; {worst}"
            )
        if self.within_guard_band:
            return f"MARGINAL: {self.within_guard_band} of {n} harmonics within the {guard:g} dB guard band; {worst}"
        return f"MEETS THE GUARD BAND: all {n} harmonics at least {guard:g} dB below the limit; {worst}"


def analysis_span_hz(board: Board) -> tuple[float, float]:
    """Frequency span to analyse: the limit's lines, cut at the standard's upper frequency and the board's cap."""
    lo, hi = board.limit.span_hz
    highest = max(clock.wave.frequency_hz * (1 + (clock.spread.deviation if clock.spread else 0))
                  for clock in board.clocks)
    hi = min(hi, upper_frequency_hz(board.limit.upper_frequency, highest))
    if board.max_frequency_hz is not None:
        hi = min(hi, board.max_frequency_hz)
    return lo, hi


def _harmonic_numbers(clock: Clock, lo: float, hi: float) -> np.ndarray:
    """Harmonics whose occupied band touches [lo, hi]."""
    f0 = clock.wave.frequency_hz
    low_factor = high_factor = 1.0
    if clock.spread is not None:
        low_factor = clock.spread.centre_factor - clock.spread.deviation / 2
        high_factor = clock.spread.centre_factor + clock.spread.deviation / 2
    first = max(1, int(np.ceil(lo / (f0 * high_factor) * (1 - 1e-12))))
    last = int(np.floor(hi / (f0 * low_factor) * (1 + 1e-12)))
    return np.arange(first, last + 1, dtype=np.int64)


def _current_per_volt(clock: Clock, frequency_hz) -> np.ndarray:
    if not clock.has_load:
        return np.full(np.shape(frequency_hz), np.nan)
    return load_current(np.ones(np.shape(frequency_hz)), frequency_hz, clock.load_resistance_ohm,
                        clock.load_capacitance_f)


def path_gains(board: Board, clock: Clock, frequency_hz) -> dict[str, np.ndarray]:
    """Each of the clock's paths: limit-unit level per volt of clock voltage harmonic."""
    f = np.asarray(frequency_hz, dtype=float)
    amps = _current_per_volt(clock, f)
    volts = np.ones(f.shape)
    return {name: board.paths[name].reading(f, volts, amps, board.limit.distance_m) for name in clock.paths}


def _total_gain(gains: dict[str, np.ndarray]) -> np.ndarray:
    """Paths of one source add in power (their relative phase is unknown)."""
    return np.sqrt(sum(g**2 for g in gains.values()))


def clock_envelope_dbu(board: Board, clock: Clock, frequency_hz) -> np.ndarray:
    """The unspread spectral envelope carried through the clock's paths, in dB of the limit's unit."""
    v = rms(envelope(clock.wave, frequency_hz))
    return db_micro(v * _total_gain(path_gains(board, clock, frequency_hz)))


def _path_flags(board: Board, clock: Clock, f: np.ndarray) -> dict[str, np.ndarray]:
    near = np.zeros(f.shape, bool)
    large = np.zeros(f.shape, bool)
    wavelength = 299_792_458.0 / f
    for name in clock.paths:
        path = board.paths[name]
        if isinstance(path, (LoopPath, CablePath)):
            near |= near_field(f, path.distance_m or board.limit.distance_m)
        if isinstance(path, LoopPath):
            # small-loop formula assumes a perimeter well below lambda; lambda/10 is
            # common practice, no source
            large |= 4 * np.sqrt(path.area_m2) > wavelength / 10
    return {"near-field": near, "loop-electrically-large": large}


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
class _ClockPart:
    lines: SourceLines
    clock: Clock
    n: np.ndarray
    f: np.ndarray
    band_lo: np.ndarray
    band_hi: np.ndarray
    v_rms: np.ndarray
    i_rms: np.ndarray
    gains: dict[str, np.ndarray]
    tuning: np.ndarray
    owner: np.ndarray
    unspread: SourceLines | None


def _clock_part(board: Board, clock: Clock, lo: float, hi: float) -> _ClockPart:
    wave, spread = clock.wave, clock.spread
    n = _harmonic_numbers(clock, lo, hi)
    f = n * wave.frequency_hz
    phasor = harmonic_phasors(wave, n) / np.sqrt(2)  # RMS
    gains = path_gains(board, clock, f)
    total = _total_gain(gains)
    unmodulated = SourceLines(clock.name, clock.reference, wave.frequency_hz, f, phasor * total)
    if spread is None:
        lines, unspread = unmodulated, None
        band_lo = band_hi = f
        tuning, owner = f.copy(), np.arange(n.size)
    else:
        line_hz, amp, _ = harmonic_lines(spread, wave.frequency_hz, n, phasor)
        order = np.argsort(line_hz, kind="stable")
        line_hz = line_hz[order]
        amp = amp[order] * _total_gain(path_gains(board, clock, line_hz))
        lines = SourceLines(clock.name, clock.reference, spread.rate_hz, line_hz, amp, modulated=True)
        unspread = unmodulated
        band_lo, band_hi = occupied_band_hz(spread, wave.frequency_hz, n)
        rbw = resolution_bandwidth_hz(0.5 * (band_lo + band_hi))
        tuning, owner = _tuning_grid(band_lo - rbw / 2, band_hi + rbw / 2, rbw / 4)
    return _ClockPart(lines, clock, n, f, band_lo, band_hi, np.abs(phasor), np.abs(phasor) *
                      _current_per_volt(clock, f), gains, tuning, owner, unspread)


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
    """Maximum of the tuning-point values of each row (owners are contiguous and ascending)."""
    starts = np.searchsorted(owner, np.arange(rows))
    return np.maximum.reduceat(values, starts) if values.size else np.zeros(rows)


def _overlap_flags(parts: list[_ClockPart]) -> list[dict[str, np.ndarray]]:
    """Rows whose band comes within one RBW of another source's (non-null) harmonic."""
    flags = []
    for part in parts:
        rbw = resolution_bandwidth_hz(part.f)
        mine = {}
        for other in parts:
            if other is part:
                continue
            live = other.v_rms > 0
            lo_o, hi_o = other.band_lo[live], other.band_hi[live]
            order = np.argsort(lo_o)
            lo_o, hi_o = lo_o[order], np.maximum.accumulate(hi_o[order]) if hi_o.size else hi_o
            # the last band starting before our upper edge (+ RBW) must end after our lower edge (- RBW)
            k = np.searchsorted(lo_o, part.band_hi + rbw, side="right") - 1
            hit = (k >= 0) & (hi_o[np.maximum(k, 0)] >= part.band_lo - rbw) if lo_o.size else np.zeros(part.n.shape, bool)
            mine[f"overlaps:{other.clock.name}"] = hit & (part.v_rms > 0)
        flags.append(mine)
    return flags


def estimate(board: Board) -> Estimate:
    """Every source harmonic's reading, limit and margin, worst first.

    Parameters
    ----------
    board : Board
        A validated board (see :func:`emispec.board.load_board`).

    Returns
    -------
    Estimate
    """
    lo, hi = analysis_span_hz(board)
    detectors = board.limit.detectors
    parts = [_clock_part(board, clock, lo, hi) for clock in board.clocks]
    tuning = np.concatenate([p.tuning for p in parts]) if parts else np.array([])
    segments = np.cumsum([0] + [p.tuning.size for p in parts])
    per_source = [sweep(p.lines.line_hz, p.lines.line_amplitude, p.lines.grid_hz, tuning, detectors)
                  for p in parts]
    combined = _combine(per_source, [p.clock.reference for p in parts], detectors)
    limit_at_tuning = board.limit.levels(tuning) if tuning.size else {d: np.array([]) for d in detectors}
    overlaps = _overlap_flags(parts)

    columns = []
    for k, part in enumerate(parts):
        seg = slice(segments[k], segments[k + 1])
        rows = part.n.size

        def per_row(values, seg=seg, part=part, rows=rows):
            return _row_max(values[seg], part.owner, rows)

        own = {d: per_row(per_source[k][d]) for d in detectors}
        # a harmonic on a spectral null has no reading of its own, whatever else sits at its frequency
        reading = {d: np.where(part.v_rms > 0, per_row(combined[d]), 0.0) for d in detectors}
        limit = {d: -per_row(-np.where(np.isnan(limit_at_tuning[d]), -np.inf, limit_at_tuning[d]))
                 for d in detectors}
        limit = {d: np.where(np.isinf(v), np.nan, v) for d, v in limit.items()}
        total = _total_gain(part.gains)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = {p: g / total for p, g in part.gains.items()}
        reduction = {d: np.full(rows, np.nan) for d in detectors}
        if part.unspread is not None:
            plain = sweep(part.unspread.line_hz, part.unspread.line_amplitude, part.unspread.grid_hz, part.f,
                          detectors)
            reduction = {d: db_micro(plain[d]) - db_micro(own[d]) for d in detectors}
        flags = _path_flags(board, part.clock, part.f)
        flags["spectral-null"] = part.v_rms == 0
        flags.update(overlaps[k])
        columns.append(dict(
            source=np.full(rows, part.clock.name, dtype=object),
            harmonic=part.n,
            frequency_hz=part.f,
            band_lo_hz=np.asarray(part.band_lo, dtype=float),
            band_hi_hz=np.asarray(part.band_hi, dtype=float),
            spread=np.full(rows, part.clock.spread is not None),
            line_dbuv=db_micro(part.v_rms),
            line_dbua=db_micro(part.i_rms),
            path_readings={p: {d: db_micro(own[d] * share[p]) for d in detectors} for p in part.gains},
            readings={d: db_micro(reading[d]) for d in detectors},
            spread_reduction_db=reduction,
            limits=limit,
            flags=flags,
        ))
    rows = _assemble(columns, board, detectors)
    return Estimate(board, (lo, hi), rows, {c.name: c.paths for c in board.clocks}, tuple(p.lines for p in parts))


def _assemble(columns: list[dict], board: Board, detectors) -> Rows:
    """Concatenate the sources' columns, compute margins and flags, sort worst first."""
    sizes = [c["harmonic"].size for c in columns]

    def cat(parts):
        return np.concatenate(parts) if parts else np.array([])

    def stack(key):
        return cat([c[key] for c in columns])

    def stack_dets(key):
        return {d: cat([c[key][d] for c in columns]) for d in detectors}

    f = stack("frequency_hz")
    readings, limits = stack_dets("readings"), stack_dets("limits")
    margins = {d: limits[d] - readings[d] for d in detectors}
    matrix = np.vstack([margins[d] for d in detectors]) if f.size else np.empty((len(detectors), 0))
    has_margin = np.isfinite(matrix).any(axis=0)
    filled = np.where(np.isfinite(matrix), matrix, np.inf)
    worst_idx = np.argmin(filled, axis=0)
    worst = np.where(has_margin, filled[worst_idx, np.arange(f.size)], np.nan)
    worst_det = np.where(has_margin, np.array(detectors, dtype=object)[worst_idx], None)

    paths = {p: {d: cat([c["path_readings"][p][d] if p in c["path_readings"] else np.full(s, np.nan)
                         for c, s in zip(columns, sizes)]) for d in detectors} for p in board.paths}
    flag_names = list(FLAGS[2:]) + sorted({k for c in columns for k in c["flags"] if k.startswith("overlaps:")})
    flags = {"over-limit": np.nan_to_num(worst, nan=np.inf) < 0}
    flags["within-guard-band"] = ~flags["over-limit"] & (np.nan_to_num(worst, nan=np.inf) < board.guard_band_db)
    for name in flag_names:
        flags[name] = cat([c["flags"].get(name, np.zeros(s, bool)) for c, s in zip(columns, sizes)]).astype(bool)

    order = np.lexsort((f, np.nan_to_num(worst, nan=np.inf)))

    def srt(x):
        return x[order]

    return Rows(
        source=srt(stack("source")),
        harmonic=srt(stack("harmonic")),
        frequency_hz=srt(f),
        band_lo_hz=srt(stack("band_lo_hz")),
        band_hi_hz=srt(stack("band_hi_hz")),
        spread=srt(stack("spread")).astype(bool),
        line_dbuv=srt(stack("line_dbuv")),
        line_dbua=srt(stack("line_dbua")),
        path_readings={p: {d: srt(x) for d, x in dets.items()} for p, dets in paths.items()},
        readings={d: srt(x) for d, x in readings.items()},
        spread_reduction_db={d: srt(x) for d, x in stack_dets("spread_reduction_db").items()},
        limits={d: srt(x) for d, x in limits.items()},
        margins={d: srt(x) for d, x in margins.items()},
        worst_margin_db=srt(worst),
        worst_detector=srt(worst_det),
        flags={k: srt(v) for k, v in flags.items()},
    )


def swept_spectrum(est: Estimate, detectors=SWEPT_DETECTORS) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """The receiver's swept readings over the analysed span, all sources together.

    Tuning steps are half the resolution bandwidth of each CISPR band, plus a
    point exactly on every unmodulated line.

    Returns
    -------
    frequency_hz : numpy.ndarray
    readings : dict
        Detector -> level in dB of the limit's unit (NaN where nothing is read).
    """
    lo, hi = est.span_hz
    grids = []
    for band in BANDS:
        start, stop = max(lo, band.start_hz), min(hi, band.stop_hz)
        if start < stop:
            grids.append(np.arange(start, stop, band.rbw_hz / 2))
    exact = [s.line_hz for s in est.sources if not s.modulated]
    tuning = np.unique(np.concatenate(grids + [x[(x >= lo) & (x <= hi)] for x in exact] + [np.array([hi])]))
    per_source = [sweep(s.line_hz, s.line_amplitude, s.grid_hz, tuning, detectors) for s in est.sources]
    combined = _combine(per_source, [s.reference for s in est.sources], detectors)
    return tuning, {d: db_micro(v) for d, v in combined.items()}
