"""The margin table and the verdict: results as data, formatted only at the output edge.

:class:`Rows` is a table of named numpy columns, one entry per source
harmonic, sorted worst margin first.  A column is a 1-D array or a dict of
them (per detector: ``readings["QP"]``; per path and detector:
``path_readings["eth_loop"]["QP"]``); flags are boolean columns under
``flags``.  The pipeline builds each source's columns; :func:`assemble_rows`
stacks them, fills what a source does not have (NaN, False, None), computes
the margins and sorts, without knowing the column names beyond the margin
ones, so a new column is one array in the pipeline plus one entry in
:mod:`emispec.columns`.

:class:`Verdict` is the outcome as a value (kind and counts); it is put into
words by :func:`emispec.columns.verdict_text`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .flags import OVER_LIMIT, OVERLAPS, WITHIN_GUARD_BAND, names

__all__ = ["Rows", "Verdict", "Worst", "assemble_rows"]


@dataclass(frozen=True)
class Rows:
    """The margin table as named columns, one entry per source harmonic, worst first.

    Levels are in dB of the limit's unit (dBuV/m, dBuV or dBuA); NaN marks a
    value that does not exist (a spectral null, a detector whose line does not
    cover the frequency, a current of a clock without a load).  Columns are
    read as attributes: ``rows.readings["QP"]``, ``rows.worst_margin_db``.
    """

    columns: dict

    def __getattr__(self, name: str):
        if name == "columns":  # not set yet (unpickling)
            raise AttributeError(name)
        try:
            return self.columns[name]
        except KeyError:
            raise AttributeError(f"Rows has no column {name!r}") from None

    def __len__(self) -> int:
        return len(self.columns["harmonic"])

    def __contains__(self, name: str) -> bool:
        return name in self.columns

    def flag_list(self, i: int) -> list[str]:
        return [name for name, mask in self.columns["flags"].items() if mask[i]]

    def key(self, i: int) -> tuple[str, int]:
        """(source, harmonic): what lines a row up across the members of an ensemble."""
        return str(self.columns["source"][i]), int(self.columns["harmonic"][i])


@dataclass(frozen=True)
class Worst:
    """The row with the least margin."""

    source: str
    harmonic: int
    frequency_hz: float
    margin_db: float
    detector: str


@dataclass(frozen=True)
class Verdict:
    """The outcome: ``kind`` is "fails" (a harmonic over the limit), "marginal" (none over, some in the guard
    band), "meets" (all at least the guard band below) or "no-data" (no harmonic where the limit has a line)."""

    kind: str
    rows: int
    over_limit: int
    within_guard_band: int
    guard_band_db: float
    worst: Worst | None


def _fill(example: np.ndarray, size: int) -> np.ndarray:
    if example.dtype == bool:
        return np.zeros(size, bool)
    if example.dtype == object:
        return np.full(size, None, dtype=object)
    return np.full(size, np.nan)


def _stack(parts: list, sizes: list[int]):
    """Concatenate one column over the sources; nested dicts by key, filling what a source lacks."""
    present = [p for p in parts if p is not None]
    if not present:
        return np.array([])
    if isinstance(present[0], dict):
        keys = list(dict.fromkeys(k for p in present for k in p))
        return {k: _stack([p.get(k) if p is not None else None for p in parts], sizes) for k in keys}
    example = np.asarray(present[0])
    return np.concatenate([np.asarray(p) if p is not None else _fill(example, s) for p, s in zip(parts, sizes)])


def _sort(column, order: np.ndarray):
    if isinstance(column, dict):
        return {k: _sort(v, order) for k, v in column.items()}
    return column[order]


def assemble_rows(per_source: list[dict], detectors: tuple[str, ...], guard_band_db: float) -> Rows:
    """Stack the sources' columns, compute margins, the worst detector and the margin flags; sort worst first.

    Each dict of ``per_source`` needs ``harmonic``, ``frequency_hz``,
    ``readings`` and ``limits`` (per detector) and ``flags``; every other
    column is carried along.
    """
    sizes = [c["harmonic"].size for c in per_source]
    names_seen = list(dict.fromkeys(k for c in per_source for k in c))
    columns = {k: _stack([c.get(k) for c in per_source], sizes) for k in names_seen}
    f = np.asarray(columns.get("frequency_hz", np.array([])), dtype=float)
    readings, limits = columns.get("readings", {}), columns.get("limits", {})
    margins = {d: limits[d] - readings[d] for d in detectors} if f.size else {d: np.array([]) for d in detectors}
    matrix = np.vstack([margins[d] for d in detectors]) if f.size else np.empty((len(detectors), 0))
    has_margin = np.isfinite(matrix).any(axis=0)
    filled = np.where(np.isfinite(matrix), matrix, np.inf)
    worst_idx = np.argmin(filled, axis=0)
    worst = np.where(has_margin, filled[worst_idx, np.arange(f.size)], np.nan)
    columns["margins"] = margins
    columns["worst_margin_db"] = worst
    columns["worst_detector"] = np.where(has_margin, np.array(detectors, dtype=object)[worst_idx], None)
    over = np.nan_to_num(worst, nan=np.inf) < 0
    source_flags = columns.pop("flags", {}) if f.size else {}
    flags = {OVER_LIMIT: over, WITHIN_GUARD_BAND: ~over & (np.nan_to_num(worst, nan=np.inf) < guard_band_db)}
    for name in names():
        if name not in flags:
            flags[name] = np.asarray(source_flags.get(name, np.zeros(f.size, bool)), dtype=bool)
    for name in sorted(k for k in source_flags if k.startswith(OVERLAPS)):
        flags[name] = np.asarray(source_flags[name], dtype=bool)
    columns["flags"] = flags
    order = np.lexsort((f, np.nan_to_num(worst, nan=np.inf)))
    return Rows({k: _sort(v, order) for k, v in columns.items()})
