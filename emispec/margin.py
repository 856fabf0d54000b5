"""From a board to a margin table: every source harmonic, read through its paths.

The pipeline is: source harmonics (waveform) -> coupling paths (coupling) ->
receiver readings per detector (receiver) -> limit levels (limits) ->
margin = limit - reading.  Rows are kept as columns of numpy arrays, sorted
worst margin first; they become dicts only at the output edge (report).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .board import Board, Clock
from .coupling import CablePath, LoopPath, near_field
from .limits import upper_frequency_hz
from .receiver import read_lines
from .units import db_micro
from .waveform import envelope, harmonic_amplitudes, load_current, rms

__all__ = ["Rows", "Estimate", "analysis_span_hz", "clock_path_levels", "clock_envelope_dbu", "estimate"]

FLAGS = ("over-limit", "within-guard-band", "near-field", "loop-electrically-large", "spectral-null")


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
    line_dbuv: np.ndarray
    line_dbua: np.ndarray
    path_readings: dict[str, dict[str, np.ndarray]]
    readings: dict[str, np.ndarray]
    limits: dict[str, np.ndarray]
    margins: dict[str, np.ndarray]
    worst_margin_db: np.ndarray
    worst_detector: np.ndarray
    flags: dict[str, np.ndarray]

    def __len__(self) -> int:
        return len(self.harmonic)

    def flag_list(self, i: int) -> list[str]:
        return [name for name in FLAGS if self.flags[name][i]]


@dataclass(frozen=True)
class Estimate:
    """Result of :func:`estimate`: the board, the analysed span and the rows."""

    board: Board
    span_hz: tuple[float, float]
    rows: Rows
    source_paths: dict[str, tuple[str, ...]]

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
    highest = max(clock.wave.frequency_hz for clock in board.clocks)
    hi = min(hi, upper_frequency_hz(board.limit.upper_frequency, highest))
    if board.max_frequency_hz is not None:
        hi = min(hi, board.max_frequency_hz)
    return lo, hi


def _harmonic_numbers(f0: float, lo: float, hi: float) -> np.ndarray:
    first = max(1, int(np.ceil(lo / f0 * (1 - 1e-12))))
    last = int(np.floor(hi / f0 * (1 + 1e-12)))
    return np.arange(first, last + 1, dtype=np.int64)


def _clock_current(clock: Clock, frequency_hz, voltage_rms):
    if not clock.has_load:
        return np.full_like(voltage_rms, np.nan)
    return load_current(voltage_rms, frequency_hz, clock.load_resistance_ohm, clock.load_capacitance_f)


def clock_path_levels(board: Board, clock: Clock, frequency_hz, voltage_rms) -> dict[str, np.ndarray]:
    """Linear RMS level in the limit's unit that each of the clock's paths delivers."""
    current = _clock_current(clock, frequency_hz, voltage_rms)
    return {
        name: board.paths[name].reading(frequency_hz, voltage_rms, current, board.limit.distance_m)
        for name in clock.paths
    }


def clock_envelope_dbu(board: Board, clock: Clock, frequency_hz) -> np.ndarray:
    """The spectral envelope carried through the clock's paths, in dB of the limit's unit."""
    v = rms(envelope(clock.wave, frequency_hz))
    levels = clock_path_levels(board, clock, frequency_hz, v)
    return db_micro(np.sqrt(sum(level**2 for level in levels.values())))


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


def _clock_columns(board: Board, clock: Clock, lo: float, hi: float) -> dict:
    n = _harmonic_numbers(clock.wave.frequency_hz, lo, hi)
    f = n * clock.wave.frequency_hz
    v = rms(harmonic_amplitudes(clock.wave, n))
    i = _clock_current(clock, f, v)
    detectors = board.limit.detectors
    levels = clock_path_levels(board, clock, f, v)
    path_readings = {
        name: {det: db_micro(x) for det, x in read_lines(f, level, detectors).items()}
        for name, level in levels.items()
    }
    combined = np.sqrt(sum(level**2 for level in levels.values()))
    readings = {det: db_micro(x) for det, x in read_lines(f, combined, detectors).items()}
    flags = _path_flags(board, clock, f)
    flags["spectral-null"] = v == 0
    return dict(
        source=np.full(n.shape, clock.name, dtype=object),
        harmonic=n,
        frequency_hz=f,
        line_dbuv=db_micro(v),
        line_dbua=db_micro(i),
        path_readings=path_readings,
        readings=readings,
        flags=flags,
    )


def _concat(parts: list[np.ndarray]) -> np.ndarray:
    return np.concatenate(parts) if parts else np.array([])


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
    columns = [_clock_columns(board, clock, lo, hi) for clock in board.clocks]
    sizes = [len(c["harmonic"]) for c in columns]
    detectors = board.limit.detectors

    def stack(key):
        return _concat([c[key] for c in columns])

    def stack_nested(key, inner_keys, outer_keys):
        return {
            outer: {inner: _concat([c[key].get(outer, {}).get(inner, np.full(s, np.nan))
                                    for c, s in zip(columns, sizes)]) for inner in inner_keys}
            for outer in outer_keys
        }

    f = stack("frequency_hz")
    readings = {det: _concat([c["readings"][det] for c in columns]) for det in detectors}
    path_readings = stack_nested("path_readings", detectors, list(board.paths))
    limits = board.limit.levels(f) if len(f) else {det: np.array([]) for det in detectors}
    margins = {det: limits[det] - readings[det] for det in detectors}
    margin_matrix = np.vstack([margins[det] for det in detectors]) if len(f) else np.empty((len(detectors), 0))
    has_margin = np.isfinite(margin_matrix).any(axis=0)
    filled = np.where(np.isfinite(margin_matrix), margin_matrix, np.inf)
    worst_idx = np.argmin(filled, axis=0)
    worst = np.where(has_margin, filled[worst_idx, np.arange(len(f))], np.nan)
    worst_det = np.where(has_margin, np.array(detectors, dtype=object)[worst_idx], None)

    flags = {name: _concat([c["flags"][name] for c in columns]).astype(bool)
             for name in ("near-field", "loop-electrically-large", "spectral-null")}
    flags["over-limit"] = np.nan_to_num(worst, nan=np.inf) < 0
    flags["within-guard-band"] = ~flags["over-limit"] & (np.nan_to_num(worst, nan=np.inf) < board.guard_band_db)

    order = np.lexsort((f, np.nan_to_num(worst, nan=np.inf)))

    def sort(x):
        return x[order]

    rows = Rows(
        source=sort(stack("source")),
        harmonic=sort(stack("harmonic")),
        frequency_hz=sort(f),
        line_dbuv=sort(stack("line_dbuv")),
        line_dbua=sort(stack("line_dbua")),
        path_readings={p: {d: sort(x) for d, x in dets.items()} for p, dets in path_readings.items()},
        readings={d: sort(x) for d, x in readings.items()},
        limits={d: sort(x) for d, x in limits.items()},
        margins={d: sort(x) for d, x in margins.items()},
        worst_margin_db=sort(worst),
        worst_detector=sort(worst_det),
        flags={k: sort(v) for k, v in flags.items()},
    )
    return Estimate(board, (lo, hi), rows, {clock.name: clock.paths for clock in board.clocks})
