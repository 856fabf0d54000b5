"""What the receiver reads for each row: tuning points, refined around each maximum, all sources together.

Each row (one harmonic of one source) is read at tuning frequencies in its
occupied band.  An unmodulated harmonic is tuned onto exactly.  A spread
harmonic is read on a grid of half a resolution bandwidth across its band plus
half a bandwidth either side; then halfway between two neighbouring grid points
where one of them reads within 1.5 dB of the row's best (between two grid
points a peak can hide at most 1.5 dB: a CW line half an RBW off the Gaussian
filter's centre reads 6.02 (1/2)^2 = 1.5 dB low): beside every such local
maximum of the grid, and between every such pair where another source reads
at least 2 % of the reading at one of the two points, since there another
source's narrow peak on a slope need not show as a local maximum.  Then, per
detector, a compass search with steps of RBW/8, /16 and /32 around the row's
best point and every local maximum within 0.2 dB of it where another source
reads too (on the quarter-RBW grid a peak reads at most
6.02 (1/8)^2 = 0.094 dB low, so any of them may be the true maximum).  After the last step
the best point lies within RBW/32 of a local maximum, where a reading shaped
like the filter falls by at most 6.02 (2/32)^2 = 0.023 dB: the row reads
within 0.05 dB of the continuous maximum (the tests show it against a dense
scan and against the brute-force time-domain receiver).

At every tuning point each source's lines are read by :func:`emispec.receiver.sweep`;
sources add in power, except sources naming the same ``reference``, which add
in amplitude (worst case).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .receiver import sweep

__all__ = ["RowReadings", "read_rows", "combine", "row_max", "row_best"]

#: Another source reading this share of the combined reading at a point (-34 dB) shares it.  A peak of that
#: source hidden between two points that neither shares (1.5 dB higher than at them) would move the row's
#: reading by at most 10 log10((1 + 0.024^2) / (1 + 0.02^2)) = 0.001 dB.
SHARED_SHARE = 0.02
#: Compass-search steps after the first refinement, as fractions of the RBW.
SEARCH_STEPS = (1 / 8, 1 / 16, 1 / 32)


@dataclass
class RowReadings:
    """One source's rows and the tuning points they were read at.

    ``per_source[s][det]`` is what source ``s`` alone reads at each point; ``combined[det]`` what the receiver
    reads there from all sources.
    """

    count: int
    points: np.ndarray
    owner: np.ndarray
    lo_hz: np.ndarray  # each row's tuning range
    hi_hz: np.ndarray
    rbw_hz: np.ndarray
    searched: bool
    per_source: list[dict[str, np.ndarray]]
    combined: dict[str, np.ndarray]
    own: int = 0  # which of ``per_source`` is the rows' own source

    def shared(self, share: float | None = None) -> np.ndarray:
        """Points where another source reads at least ``share`` (default :data:`SHARED_SHARE`) of the combined
        reading, on some detector."""
        share = SHARED_SHARE if share is None else share
        out = np.zeros(self.points.size, bool)
        for d, total in self.combined.items():
            for s, reading in enumerate(self.per_source):
                if s != self.own:  # NaN (no such detector here) compares false
                    out |= (reading[d] >= share * total) & (total > 0)
        return out

    def best_index(self, value: np.ndarray) -> np.ndarray:
        """Index of each row's point with the largest ``value`` (rows with nothing read left out)."""
        _, index = row_best(value, self.owner, self.count)
        return index[index >= 0]

    def best(self, detector: str) -> tuple[np.ndarray, np.ndarray]:
        """Each row's largest combined reading and the index of its tuning point (-1 where nothing is read)."""
        return row_best(self.combined[detector], self.owner, self.count)

    def extend(self, points: np.ndarray, owner: np.ndarray, per_source, combined) -> None:
        self.points = np.concatenate([self.points, points])
        self.owner = np.concatenate([self.owner, owner])
        self.per_source = [{d: np.concatenate([old[d], new[d]]) for d in old} for old, new in zip(self.per_source,
                                                                                                  per_source)]
        self.combined = {d: np.concatenate([self.combined[d], combined[d]]) for d in self.combined}


def combine(per_source: list[dict[str, np.ndarray]], references: list[str | None], detectors) -> dict:
    """Sources sharing a reference add in amplitude (worst case); the groups add in power."""
    groups: dict[object, dict[str, np.ndarray]] = {}
    for k, (reading, ref) in enumerate(zip(per_source, references)):
        key = ref if ref is not None else ("own", k)
        if key in groups:
            groups[key] = {d: groups[key][d] + reading[d] for d in detectors}
        else:
            groups[key] = dict(reading)
    return {d: np.sqrt(sum(g[d] ** 2 for g in groups.values())) for d in detectors}


def _read(reading: np.ndarray) -> np.ndarray:
    """A reading with NaN (no such detector there) as 0 (readings are never negative)."""
    return np.fmax(reading, 0.0)


def row_max(values: np.ndarray, owner: np.ndarray, rows: int) -> np.ndarray:
    """Maximum of each row's tuning-point values, ignoring NaN (NaN where a row has no value)."""
    out = np.full(rows, -np.inf)
    np.fmax.at(out, owner, values)
    return np.where(np.isneginf(out), np.nan, out)


def row_best(values: np.ndarray, owner: np.ndarray, rows: int) -> tuple[np.ndarray, np.ndarray]:
    """Each row's maximum (NaN ignored) and the index of the value that holds it (the first of equal ones; -1 where
    none)."""
    values = np.asarray(values, dtype=float)
    filled = np.where(np.isnan(values), -np.inf, values)
    top = np.full(rows, -np.inf)
    np.maximum.at(top, owner, filled)
    at = np.flatnonzero((filled == top[owner]) & (filled > -np.inf))
    index = np.full(rows, owner.size)
    np.minimum.at(index, owner[at], at)
    index = np.where(index < owner.size, index, -1)
    return np.where(index >= 0, top, np.nan), index


def sweep_lines(lines, points: np.ndarray, detectors) -> dict[str, np.ndarray]:
    """What each detector reads of one source's lines at the points (:func:`emispec.receiver.sweep`)."""
    return sweep(lines.line_hz, lines.line_amplitude, lines.grid_hz, points, detectors)


def _read_all(lines, references, batches: list[tuple[np.ndarray, np.ndarray]], detectors, reader):
    """Read every part's new points in one pass per source; returns per part (per_source, combined)."""
    sizes = [p.size for p, _ in batches]
    points = np.concatenate([p for p, _ in batches]) if batches else np.array([])
    per_source = [reader(s, points, detectors) for s in lines]
    combined = combine(per_source, references, detectors)
    cuts = np.cumsum([0] + sizes)
    return [([{d: v[d][a:b] for d in detectors} for v in per_source], {d: combined[d][a:b] for d in detectors})
            for a, b in zip(cuts[:-1], cuts[1:])]


def _peaks(rows: RowReadings, value: np.ndarray, limit_db: float) -> np.ndarray:
    """Indices of the points that are local maxima of ``value`` along their row's frequencies and within
    ``limit_db`` of the row's best."""
    order = np.lexsort((rows.points, rows.owner))
    owner, v = rows.owner[order], _read(value[order])
    same_prev = np.concatenate([[False], owner[1:] == owner[:-1]])
    same_next = np.concatenate([owner[:-1] == owner[1:], [False]])
    prev = np.where(same_prev, np.roll(v, 1), -np.inf)
    nxt = np.where(same_next, np.roll(v, -1), -np.inf)
    best = _read(row_max(v, owner, rows.count))
    return order[(v >= prev) & (v >= nxt) & (v > 0) & (v >= best[owner] * 10 ** (-limit_db / 20))]


def _local_maxima(rows: RowReadings, limit_db: float = 1.5) -> tuple[np.ndarray, np.ndarray]:
    """Midpoints of pairs of neighbouring grid points of which one reads within ``limit_db`` of the row's best
    (per detector): either side of each such local maximum of the grid, and between every such pair that
    another source shares (a peak between two grid points can read up to 1.5 dB low at both, and another
    source's narrow peak on a slope need not show as a local maximum)."""
    order = np.lexsort((rows.points, rows.owner))
    owner, points = rows.owner[order], rows.points[order]
    pair = owner[1:] == owner[:-1]
    shared = rows.shared()[order]
    shared = shared[1:] | shared[:-1]
    wanted = np.zeros(pair.shape, bool)
    for value in rows.combined.values():  # each detector may peak elsewhere
        v = _read(value[order])
        best = _read(row_max(v, owner, rows.count))
        high = (v > 0) & (v >= best[owner] * 10 ** (-limit_db / 20))
        prev = np.concatenate([[-np.inf], np.where(pair, v[:-1], -np.inf)])
        nxt = np.concatenate([np.where(pair, v[1:], -np.inf), [-np.inf]])
        peak = high & (v >= prev) & (v >= nxt)
        wanted |= pair & np.where(shared, high[1:] | high[:-1], peak[1:] | peak[:-1])
    return _inside(rows, 0.5 * (points[1:] + points[:-1])[wanted], owner[1:][wanted])


#: A local maximum this close to the row's best (dB) is searched too: on the quarter-RBW grid a peak may still
#: read up to 6.02 (1/8)^2 = 0.094 dB below its top, so it may be the row's true maximum.
CONTENDER_DB = 0.2


def _around_best(rows: RowReadings, step: float) -> tuple[np.ndarray, np.ndarray]:
    """Points ``step`` RBW either side of each row's best point and of every local maximum within
    :data:`CONTENDER_DB` of it, per detector (where sources share a band a row can have several)."""
    points, owners = [], []
    shared = rows.shared()
    for value in rows.combined.values():
        found = _peaks(rows, value, CONTENDER_DB)
        best = rows.best_index(value)
        found = found[shared[found] | np.isin(found, best)]  # where the row's source reads alone: the best only
        centre, row = rows.points[found], rows.owner[found]
        delta = rows.rbw_hz[row] * step
        points += [centre - delta, centre + delta]
        owners += [row, row]
    points, owners = np.concatenate(points), np.concatenate(owners)
    # one point per distinct (row, frequency)
    _, unique = np.unique(np.stack([owners.astype(float), points]), axis=1, return_index=True)
    return _inside(rows, points[unique], owners[unique])


def _inside(rows: RowReadings, points: np.ndarray, owner: np.ndarray):
    """Keep the points inside their row's own tuning range."""
    keep = (points >= rows.lo_hz[owner]) & (points <= rows.hi_hz[owner])
    return points[keep], owner[keep]


#: How many reading passes :func:`read_rows` makes at most (for progress reports).
PASSES = 2 + len(SEARCH_STEPS)


def read_rows(lines, references, tunings, detectors, progress=None, reader=None) -> list[RowReadings]:
    """Read every source's rows.

    Parameters
    ----------
    lines : list of SourceLines
        Every source's lines.
    references : list of str or None
        Their ``reference`` names.
    tunings : list of dict
        Per source: ``points`` and ``owner`` (its first tuning points and the row of each), ``lo_hz``,
        ``hi_hz`` and ``rbw_hz`` per row (its tuning range and bandwidth), ``searched`` (whether the rows are
        refined around their maxima: spread rows).
    detectors : tuple of str
    progress : callable, optional
        Called with no argument after each pass (at most :data:`PASSES`).
    reader : callable, optional
        ``reader(lines, points, detectors)``: what one source's lines read at the points (default
        :func:`sweep_lines`; :meth:`emispec.pipeline.Reuse.read` remembers readings across boards).
    """
    reader = reader or sweep_lines
    rows = [RowReadings(len(t["lo_hz"]), t["points"], t["owner"], t["lo_hz"], t["hi_hz"], t["rbw_hz"], t["searched"],
                        [], {}, k) for k, t in enumerate(tunings)]
    for part, (per_source, combined) in zip(rows, _read_all(lines, references, [(r.points, r.owner) for r in rows],
                                                            detectors, reader)):
        part.per_source, part.combined = per_source, combined
    if progress is not None:
        progress()
    for search in (_local_maxima, *(lambda r, s=s: _around_best(r, s) for s in SEARCH_STEPS)):
        batches = [search(r) if r.searched and r.points.size else (np.array([]), np.array([], dtype=np.int64))
                   for r in rows]
        if not any(p.size for p, _ in batches):
            break
        for part, batch, (per_source, combined) in zip(rows, batches, _read_all(lines, references, batches,
                                                                                 detectors, reader)):
            part.extend(batch[0], batch[1], per_source, combined)
        if progress is not None:
            progress()
    return rows
