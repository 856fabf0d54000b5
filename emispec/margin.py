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

from .board import Board, Clock, Current
from .coupling import CablePath, LoopPath, near_field
from .decoupling import anti_resonances, escape_fraction
from .limits import upper_frequency_hz
from .receiver import BANDS, resolution_bandwidth_hz, sweep
from .spread import harmonic_lines, occupied_band_hz
from .units import db_micro, from_db
from .waveform import envelope, harmonic_phasors, load_current, rms, triangle_pulse_phasors

__all__ = [
    "FLAGS",
    "SourceLines",
    "Rows",
    "Estimate",
    "analysis_span_hz",
    "source_gains",
    "clock_envelope_dbu",
    "estimate",
    "swept_spectrum",
]

FLAGS = ("over-limit", "within-guard-band", "near-field", "loop-electrically-large", "spectral-null",
         "decoupling-insufficient", "above-target-impedance", "near-anti-resonance")
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
    decoupling_impedance_ohm: np.ndarray
    required_impedance_ohm: np.ndarray
    suppression_db: np.ndarray

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
    highest = max(source.frequency_hz * (1 + (source.spread.deviation if source.spread else 0))
                  for source in board.sources)
    hi = min(hi, upper_frequency_hz(board.limit.upper_frequency, highest))
    if board.max_frequency_hz is not None:
        hi = min(hi, board.max_frequency_hz)
    return lo, hi


def _harmonic_numbers(source: Clock | Current, lo: float, hi: float) -> np.ndarray:
    """Harmonics whose occupied band touches [lo, hi]."""
    f0 = source.frequency_hz
    low_factor = high_factor = 1.0
    if source.spread is not None:
        low_factor = source.spread.centre_factor - source.spread.deviation / 2
        high_factor = source.spread.centre_factor + source.spread.deviation / 2
    first = max(1, int(np.ceil(lo / (f0 * high_factor) * (1 - 1e-12))))
    last = int(np.floor(hi / (f0 * low_factor) * (1 + 1e-12)))
    return np.arange(first, last + 1, dtype=np.int64)


def _current_per_unit(source: Clock | Current, frequency_hz) -> np.ndarray:
    """Source current per unit of the source's own amplitude: 1/|Z_load| for a clock, 1 for a current."""
    if isinstance(source, Current):
        return np.ones(np.shape(frequency_hz))
    if not source.has_load:
        return np.full(np.shape(frequency_hz), np.nan)
    return load_current(np.ones(np.shape(frequency_hz)), frequency_hz, source.load_resistance_ohm,
                        source.load_capacitance_f)


def _escape(board: Board, source: Clock | Current, path_name: str, frequency_hz) -> np.ndarray:
    """Complex fraction of the rail current that leaves through this path's termination."""
    rail = board.rails[source.rail]
    z_path = rail.supply_impedance(frequency_hz) + board.paths[path_name].termination(frequency_hz)
    return escape_fraction(rail.decoupling_impedance(frequency_hz), z_path)


def source_gains(board: Board, source: Clock | Current, frequency_hz) -> dict[str, np.ndarray]:
    """Each of the source's paths: limit-unit level per unit of the source's amplitude.

    The amplitude is the clock voltage for a clock and the pulse current for a
    current source; escape paths see the part of the current that the rail's
    decoupling lets through to their termination.
    """
    f = np.asarray(frequency_hz, dtype=float)
    current = _current_per_unit(source, f)
    voltage = np.ones(f.shape) if isinstance(source, Clock) else np.full(f.shape, np.nan)
    gains = {}
    for name in source.paths:
        path = board.paths[name]
        quantities = {"voltage": voltage, "current": current}
        if path.input == "escape":
            quantities["escape"] = current * np.abs(_escape(board, source, name, f))
        gains[name] = path.reading(f, quantities, board.limit.distance_m)
    return gains


def _total_gain(gains: dict[str, np.ndarray]) -> np.ndarray:
    """Paths of one source add in power (their relative phase is unknown)."""
    return np.sqrt(sum(g**2 for g in gains.values()))


def clock_envelope_dbu(board: Board, clock: Clock, frequency_hz) -> np.ndarray:
    """The unspread spectral envelope carried through the clock's paths, in dB of the limit's unit."""
    v = rms(envelope(clock.wave, frequency_hz))
    return db_micro(v * _total_gain(source_gains(board, clock, frequency_hz)))


def _path_flags(board: Board, source: Clock | Current, f: np.ndarray) -> dict[str, np.ndarray]:
    near = np.zeros(f.shape, bool)
    large = np.zeros(f.shape, bool)
    wavelength = 299_792_458.0 / f
    for name in source.paths:
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
class _SourcePart:
    lines: SourceLines
    source: Clock | Current
    n: np.ndarray
    f: np.ndarray
    band_lo: np.ndarray
    band_hi: np.ndarray
    v_rms: np.ndarray
    i_rms: np.ndarray
    live: np.ndarray  # the harmonic exists (not a spectral null of the source's waveform)
    gains: dict[str, np.ndarray]
    tuning: np.ndarray
    owner: np.ndarray
    unspread: SourceLines | None
    rbw: np.ndarray


def _phasors(source: Clock | Current, n: np.ndarray) -> np.ndarray:
    """RMS complex harmonics of the source's own amplitude (clock voltage or pulse current)."""
    if isinstance(source, Clock):
        peak = harmonic_phasors(source.wave, n)
    else:
        peak = triangle_pulse_phasors(source.peak_a, source.width_s, source.frequency_hz, n, source.per,
                                      source.duty)
    return peak / np.sqrt(2)


def _source_part(board: Board, source: Clock | Current, lo: float, hi: float) -> _SourcePart:
    spread, f0 = source.spread, source.frequency_hz
    n = _harmonic_numbers(source, lo, hi)
    f = n * f0
    phasor = _phasors(source, n)
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
    magnitude = np.abs(phasor)
    current = magnitude * _current_per_unit(source, f)
    voltage = magnitude if isinstance(source, Clock) else np.full(f.shape, np.nan)
    return _SourcePart(lines, source, n, f, band_lo, band_hi, voltage, current, magnitude > 0, gains, tuning, owner,
                       unspread, rbw)


def _decoupling_columns(board: Board, part: _SourcePart, own: dict, share: dict, limit: dict, span_hz):
    """|Z_dec|, suppression, the largest |Z_dec| that keeps the guard band, and the rail flags.

    The escape paths' readings scale with |Z_dec / (Z_dec + Z_path)|.  Holding
    the other paths fixed, the escape part may rise to what the limit minus the
    guard band leaves; inverting the divider of the dominant escape path (with
    the present phase of Z_dec) gives the required |Z_dec|.
    """
    source, f, rows = part.source, part.f, part.n.size
    none = np.full(rows, np.nan)
    flags = {name: np.zeros(rows, bool) for name in FLAGS[5:]}
    if source.rail is None:
        return none, none, none, flags
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
                d = allowed * d_now
                rotated = (z_path * np.exp(-1j * np.angle(z_dec))).real
                a, b, c = 1 - d**2, -2 * d**2 * rotated, -(d**2) * np.abs(z_path) ** 2
                root = np.where(a > 0, (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a), np.inf)
            required = np.where(np.isfinite(target) & (escape > 0), np.fmin(required, root), required)
    required = np.where(np.isinf(required), np.nan, required)
    flags["decoupling-insufficient"] = np.abs(z_dec) > np.nan_to_num(required, nan=np.inf)
    if rail.target_ohm is not None:
        flags["above-target-impedance"] = np.abs(z_dec) > rail.target_ohm
    grid = np.geomspace(span_hz[0] / 10, span_hz[1] * 2, 4000)
    for _, _, lo, hi in anti_resonances(grid, rail.decoupling_impedance(grid)):
        flags["near-anti-resonance"] |= (f >= lo) & (f <= hi)
    flags = {k: v & part.live for k, v in flags.items()}
    return np.abs(z_dec), suppression, required, flags


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
    parts = [_source_part(board, source, lo, hi) for source in board.sources]

    def cat(arrays):
        return np.concatenate(arrays) if arrays else np.array([])

    coarse = cat([p.tuning for p in parts])
    coarse_seg = np.cumsum([0] + [p.tuning.size for p in parts])
    per_source, combined = _read_at([p.lines for p in parts], coarse, detectors)
    refined = [_refinement(p, {d: combined[d][coarse_seg[k]:coarse_seg[k + 1]] for d in detectors})
               for k, p in enumerate(parts)]
    fine = cat([r[0] for r in refined])
    fine_seg = np.cumsum([0] + [r[0].size for r in refined])
    per_source_fine, combined_fine = _read_at([p.lines for p in parts], fine, detectors)
    limits_coarse = board.limit.levels(coarse) if coarse.size else {d: np.array([]) for d in detectors}
    limits_fine = board.limit.levels(fine) if fine.size else {d: np.array([]) for d in detectors}
    overlaps = _overlap_flags(parts)

    columns = []
    for k, part in enumerate(parts):
        a, b = slice(coarse_seg[k], coarse_seg[k + 1]), slice(fine_seg[k], fine_seg[k + 1])
        rows = part.n.size
        owner = np.concatenate([part.owner, refined[k][1]])

        def per_row(coarse_values, fine_values, a=a, b=b, owner=owner, rows=rows):
            return _row_max(np.concatenate([coarse_values[a], fine_values[b]]), owner, rows)

        own = {d: per_row(per_source[k][d], per_source_fine[k][d]) for d in detectors}
        # a harmonic on a spectral null has no reading of its own, whatever else sits at its frequency
        live = part.live
        reading = {d: np.where(live, per_row(combined[d], combined_fine[d]), 0.0) for d in detectors}
        # the lowest limit over the row's tuning points (NaN where no line of that detector applies)
        limit = {d: -per_row(-limits_coarse[d], -limits_fine[d]) for d in detectors}
        total = _total_gain(part.gains)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = {p: g / total for p, g in part.gains.items()}
        reduction = {d: np.full(rows, np.nan) for d in detectors}
        if part.unspread is not None:
            plain = sweep(part.unspread.line_hz, part.unspread.line_amplitude, part.unspread.grid_hz, part.f,
                          detectors)
            reduction = {d: db_micro(plain[d]) - db_micro(own[d]) for d in detectors}
        flags = _path_flags(board, part.source, part.f)
        flags["spectral-null"] = ~live
        flags.update(overlaps[k])
        z_dec, suppression, required, rail_flags = _decoupling_columns(board, part, own, share, limit, (lo, hi))
        flags.update(rail_flags)
        columns.append(dict(
            source=np.full(rows, part.source.name, dtype=object),
            harmonic=part.n,
            frequency_hz=part.f,
            band_lo_hz=np.asarray(part.band_lo, dtype=float),
            band_hi_hz=np.asarray(part.band_hi, dtype=float),
            spread=np.full(rows, part.source.spread is not None),
            line_dbuv=db_micro(part.v_rms),
            line_dbua=db_micro(part.i_rms),
            path_readings={p: {d: db_micro(own[d] * share[p]) for d in detectors} for p in part.gains},
            readings={d: db_micro(reading[d]) for d in detectors},
            spread_reduction_db=reduction,
            limits=limit,
            flags=flags,
            decoupling_impedance_ohm=z_dec,
            required_impedance_ohm=required,
            suppression_db=suppression,
        ))
    rows = _assemble(columns, board, detectors)
    return Estimate(board, (lo, hi), rows, {s.name: s.paths for s in board.sources}, tuple(p.lines for p in parts))


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
        decoupling_impedance_ohm=srt(stack("decoupling_impedance_ohm")),
        required_impedance_ohm=srt(stack("required_impedance_ohm")),
        suppression_db=srt(stack("suppression_db")),
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
    _, combined = _read_at(list(est.sources), tuning, detectors)
    return tuning, {d: db_micro(v) for d, v in combined.items()}
