"""The chance of failing: Monte Carlo over the board's tolerances, fast by the structure of the model.

Each sample draws every tolerance (:mod:`emispec.tolerances`) and reads the
board as :func:`emispec.pipeline.estimate` would; its result is each row's
worst margin.  Done naively that is one estimate per sample.  Instead the
board is read once and each sample is derived from that reading:

**Amplitudes.**  Every detector is homogeneous of degree one: a source whose
lines all scale by a factor reads that factor times as much.  A source's lines
are its harmonics (each a level of its voltage, current or rail current) times
the gain of each path (paths add in power, or in amplitude where the board
says so).  So at each tuning point that decides a row's reading (its best
point per detector, or all its points where another source reads there too)
the receiver's reading of each source is kept *per unit* of that source's
amplitude, and a sample only recomputes the amplitudes: a source's levels at
its harmonics (they depend on its own keys) and each path's gain at the
points (it depends on the path's keys and, for an escape path, the rail's).
Each of these terms that one tolerance alone changes is tabulated over the
tolerance's range, intervals halved until log-log interpolation is within
5e-4 (0.004 dB) at every midpoint; a term that several tolerances change
together (the rise and the fall time of one clock) is computed for each
sample on the sample's board.

**Samples in full.**  A tolerance on a source's frequency or spread moves its
lines; one on an antenna cable's wire (its length or diameter) or on a
ferrite moves the cable's resonances, and a path or rail whose gain changes
by more than 0.005 dB more at one frequency of a spread band than at another
tilts the band (measured at the ends of each tolerance's range): one factor
per harmonic no longer follows.  A tolerance that moves the analysed span
itself (the highest frequency under a standard's upper-frequency rule) changes
the rows.  In all these cases each sample is a full estimate, which is exact by
construction and shares what it can with the samples before it in the same
worker (:class:`emispec.pipeline.Reuse`): the sources a sample leaves alone,
and what their spread lines read at the tuning points that recur (the grid
sits on an absolute lattice).  Against the nominal board, read once per
worker, a sample reads only the rows that its changed sources reach (their
own, and every row whose tuning range comes within the receiver's reach of
their lines, here or on the nominal board); the other rows read the same lines
at the same points, so they keep their nominal margins.

Row maxima are taken at the nominal best points and, where another source
shares a row's band, at the points of an RBW/32 grid that hold the maximum
for some pilot draw; a sample whose amplitudes tilt across the band beyond
the pilot's could peak elsewhere, by far less than 0.01 dB for the smooth
gains of the models (the tests compare against full estimates of the same
samples).

References
----------
CISPR 16-1-1:2019, clause 4 and annexes A-C: the detectors' responses, each
proportional to the input amplitude (homogeneous of degree one).

Clopper, C. J., Pearson, E. S., "The use of confidence or fiducial limits
illustrated in the case of the binomial", Biometrika 26(4), 1934: the exact
binomial interval.

Spearman, C., "The proof and measurement of association between two things",
American Journal of Psychology 15(1), 1904: rank correlation.
"""

from __future__ import annotations

import concurrent.futures
import itertools
import threading
from dataclasses import dataclass, field

import numpy as np

from .ensemble import _worker_reuse, gather
from .parameters import Template
from .pipeline import (Reuse, _harmonic_numbers, _nearest, _quantities_here, _total_gain, analysis_span_hz, board_parts,
                       estimate, read_board, row_limits, tuning_of)
from .readings import combine, read_rows
from .receiver import REACH_RBW, resolution_bandwidth_hz, sweep
from .schema import BoardError
from .sources import QUANTITIES
from .spread import occupied_band_hz
from .tolerances import CHUNK, Tolerance, draw, units_of
from .units import db_micro

__all__ = ["Model", "ModelPool", "RiskResult", "study", "full_margins", "clopper_pearson", "rank_shares", "TABLE_ERROR"]

#: Interpolation error allowed in a tabulated term, relative (5e-4 is 0.0043 dB), and the most nodes a table takes.
TABLE_ERROR = 5e-4
MAX_NODES = 4097
#: A source reading less than this fraction of what the receiver reads at a point is left out there (-80 dB: it
#: would add 0.0004 dB if a sample raised it by 40 dB against the others).
NEGLIGIBLE = 1e-4
#: Another source reading at least this fraction of a row's reading at one of its points (-40 dB) may take the
#: row's maximum there in a sample.
SHARED = 1e-2
#: A path whose gain changes across a spread harmonic's band by more than this (dB) makes every sample a full
#: estimate (see ``Model._tilts``).
TILT_DB = 0.005
#: Samples per piece of work where each sample is a full estimate (pieces this small keep every worker busy).
SLOW_PIECE = 16
#: Draws (and their seed) that show the model which weights samples give the sources (see ``Model._pilot``).
PILOT = 1024
PILOT_SEED = 20261202


def unit_gain(board, source, name: str, frequency_hz) -> np.ndarray:
    """What path ``name`` reads per unit (1 V, 1 A) of the source quantity it takes."""
    f = np.asarray(frequency_hz, dtype=float)
    ones = {q: np.ones(f.shape) for q in QUANTITIES}
    return board.paths[name].reading(f, _quantities_here(board, source, name, f, ones), board.limit.distance_m)


def _level_quantity(board, name: str) -> str:
    """The source quantity whose level path ``name`` scales: the rail current for an escape path."""
    q = board.paths[name].input
    return "rail" if q == "escape" else q


def _same(a, b) -> bool:
    if a is b:
        return True
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False


def _moves(a, b) -> bool:
    """The source's lines are elsewhere: another frequency or another spread."""
    return a.frequency_hz != b.frequency_hz or not _same(a.spread, b.spread)


def _reshapes(a, b) -> bool:
    """The path's gain changes shape over frequency, not only its level: an antenna cable's wire changed."""
    wire = getattr(a, "wire", None)
    return wire is not None and not _same(wire, getattr(b, "wire", None))


def _worst(readings: dict, limits: dict) -> np.ndarray:
    """Each row's least margin over the detectors (NaN where none has both a reading and a limit)."""
    worst = None
    for d, reading in readings.items():
        with np.errstate(divide="ignore", invalid="ignore"):
            margin = np.asarray(limits[d]) - db_micro(reading)
        margin = np.where(np.isfinite(margin), margin, np.inf)
        worst = margin if worst is None else np.minimum(worst, margin)
    return np.where(np.isinf(worst), np.nan, worst)


def _interpolate(nodes: np.ndarray, values: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Linear interpolation of each column of ``values`` (nodes x width) at ``x`` -> (len(x) x width)."""
    i = np.clip(np.searchsorted(nodes, x, side="right") - 1, 0, nodes.size - 2)
    w = ((x - nodes[i]) / (nodes[i + 1] - nodes[i]))[:, None]
    return values[i] * (1 - w) + values[i + 1] * w


@dataclass(frozen=True)
class _Table:
    """Terms tabulated over one tolerance: interpolated linearly in log-log where value and key are positive
    (a power law, such as an envelope's 1/t_r above its corner, is then exact), else linearly."""

    nodes: np.ndarray  # ln of the key where it is positive
    values: np.ndarray  # nodes x width; ln where ``log`` says so
    log_key: bool
    log: np.ndarray  # per column

    @classmethod
    def of(cls, nodes: np.ndarray, values: np.ndarray) -> _Table:
        log_key = bool(nodes[0] > 0)
        log = np.all(values > 0, axis=0) & np.all(np.isfinite(values), axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            stored = np.where(log, np.log(np.where(log, values, 1.0)), values)
        return cls(np.log(nodes) if log_key else nodes, stored, log_key, log)

    def __call__(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        y = _interpolate(self.nodes, self.values, np.log(x) if self.log_key else x)
        return np.where(self.log, np.exp(np.where(self.log, y, 0.0)), y)


@dataclass
class _Fast:
    """One source read through its amplitude terms: its levels at its harmonics and each path's gain there."""

    k: int
    paths: tuple[str, ...]
    quantities: tuple[str, ...]  # the level each path scales
    combine: str
    n: np.ndarray  # its rows' harmonics
    rep_hz: np.ndarray  # where each harmonic's gains are taken: the centre of its band
    level: np.ndarray  # nominal levels, quantities x harmonics
    gains: dict  # path -> nominal gain at rep_hz
    nominal: np.ndarray = field(default_factory=lambda: np.array([]))  # nominal amplitude per harmonic

    def amplitude(self, level: np.ndarray, gains: dict) -> np.ndarray:
        """Amplitude per harmonic from levels (... x quantities x harmonics) and path gains (... x harmonics)."""
        readings = {p: gains[p] * level[..., QUANTITIES.index(q), :] for p, q in zip(self.paths, self.quantities)}
        return np.nan_to_num(_total_gain(readings, self.combine))


class Model:
    """A board's row margins as a function of its tolerances' values (see the module docstring).

    Parameters
    ----------
    template : Template
    tolerances : sequence of Tolerance
    """

    def __init__(self, template: Template, tolerances):
        self.template, self.tolerances = template, tuple(tolerances)
        board = template.nominal
        self.span_hz = analysis_span_hz(board)
        self.detectors = board.limit.detectors
        references = [s.reference for s in board.sources if s.reference is not None]
        self.grouped_board = len(references) > len(set(references))  # some sources add in amplitude
        self._effects = [self._effect(t) for t in self.tolerances]
        # lines that move are read again: each such sample is a full estimate (see the module docstring)
        self.full = any(e["full"] or e["moved"] for e in self._effects)
        if not self.full:
            self._setup(read_board(board))

    @property
    def slow(self) -> bool:
        """Whether each sample is a full estimate, rather than a recombination of the nominal readings."""
        return self.full

    # ------------------------------------------------------------ what each tolerance changes

    def _effect(self, tolerance: Tolerance) -> dict:
        nominal = self.template.nominal
        out = dict(level=set(), moved=set(), paths=set(), rails=set(), full=False)  # full: every sample estimated
        for end in tolerance.support:
            board = self.template.board_at({tolerance.key: end})
            for k, (a, b) in enumerate(zip(nominal.sources, board.sources)):
                if not _same(a, b):
                    out["moved" if _moves(a, b) else "level"].add(k)
            changed = {p for p in nominal.paths if not _same(nominal.paths[p], board.paths[p])}
            out["paths"] |= changed
            # an antenna cable's resonances move with its wire: across a spread band its gain then tilts by more
            # than the fast path's nominal best points can follow (0.1 dB), so such samples are full estimates
            out["full"] |= any(_reshapes(nominal.paths[p], board.paths[p]) for p in changed)
            rails = {r for r in nominal.rails if not _same(nominal.rails[r], board.rails[r])}
            out["rails"] |= rails
            out["full"] |= self._tilts(board, changed, rails)
            out["full"] |= analysis_span_hz(board) != self.span_hz
        return out

    def _tilts(self, board, paths: set, rails: set) -> bool:
        """Whether a path's gain on ``board`` changes by more than :data:`TILT_DB` more at one frequency of a spread
        harmonic's band than at another, against the nominal board (the fast path scales a harmonic's lines by
        one factor, the gain's change at the band's centre)."""
        nominal = self.template.nominal
        for k, source in enumerate(nominal.sources):
            if source.spread is None:
                continue
            hit = [p for p in source.paths
                   if p in paths or (nominal.paths[p].input == "escape" and source.rail in rails)]
            if not hit:
                continue
            n = _harmonic_numbers(source, *self.span_hz)
            lo, hi = occupied_band_hz(source.spread, source.frequency_hz, n)
            f = (lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, 9)).ravel()
            for p in hit:
                with np.errstate(divide="ignore", invalid="ignore"):
                    change = 20 * np.log10(unit_gain(board, board.sources[k], p, f) / unit_gain(nominal, source, p, f))
                change = change.reshape(n.size, -1)
                known = np.isfinite(change)  # a null of the gain has no change to follow
                spread = np.where(known, change, -np.inf).max(axis=1) - np.where(known, change, np.inf).min(axis=1)
                if np.any(spread[known.any(axis=1)] > TILT_DB):
                    return True
        return False

    def _touching(self, k: int, path: str | None) -> list[int]:
        """The tolerances that change source ``k``'s levels (``path`` None) or its gain through ``path``."""
        board, source = self.template.nominal, self.template.nominal.sources[k]
        out = []
        for j, e in enumerate(self._effects):
            if path is None:
                hit = k in e["level"]
            else:
                hit = path in e["paths"] or (board.paths[path].input == "escape" and source.rail in e["rails"])
            if hit:
                out.append(j)
        return out

    # ------------------------------------------------------------ set-up: one reading of the nominal board

    def _setup(self, stage) -> None:
        board, parts, read = stage.board, stage.parts, stage.read
        detectors = self.detectors
        # each source's amplitude terms, tabulated over the tolerances
        self.fast = []
        for k, part in enumerate(parts):
            f = _Fast(k, part.source.paths, tuple(_level_quantity(board, p) for p in part.source.paths),
                      part.source.combine, part.n, 0.5 * (part.band_lo + part.band_hi),
                      np.array([part.levels[q] for q in QUANTITIES]), {})
            f.gains = {p: unit_gain(board, part.source, p, f.rep_hz) for p in f.paths}
            f.nominal = f.amplitude(f.level, f.gains)
            self.fast.append(f)
        self._tables()
        pilot = self._pilot()
        # the points that decide each fast row, sorted by row
        points, point_row, self.row_keys, limits = [], [], [], {d: [] for d in detectors}
        for k, (part, rows) in enumerate(zip(parts, read)):
            hz, owner = self._decisive(parts, rows, k, pilot)
            points.append(hz)
            point_row.append(owner + len(self.row_keys))
            self.row_keys += [(part.source.name, int(n)) for n in part.n]
            for d, level in row_limits(board, rows).items():
                limits[d].append(level)
        point_hz, point_row = _cat(points), _cat(point_row, int)
        order = np.lexsort((point_hz, point_row))
        self.point_hz, self.point_row = point_hz[order], point_row[order]
        self.limits = {d: _cat(v) for d, v in limits.items()}
        self.row_starts = _starts(self.point_row)
        first = np.concatenate([[0], np.cumsum([f.n.size for f in self.fast])]).astype(int)
        self._weights(parts, first)

    def _weights(self, parts, first: np.ndarray) -> None:
        """The sparse maps from the sample's per-path amplitudes to what the receiver reads at each point.

        A sample's amplitude of harmonic h through path c is ``X = G_c(h) L_c(h) / G_c,nominal(h)`` (the gain
        and the level at the harmonic's centre); at a point p its reading through that path is
        ``W X`` with ``W = r(p) G_c(p) / T(p)``: the source's nominal reading there, times the path's nominal
        share of the nominal amplitude T at p.  So the model's shape across a band (a loop rising as f^2, a
        ground reflection that ends at 1 GHz) stays as read, and only the factor per harmonic and path is new.
        At a null (T = 0) the reading of the source's unit lines takes the place of r / T.  Paths combine per
        source in power (or in amplitude where the board says so), sources in power, or in amplitude within a
        shared reference.
        """
        from scipy import sparse

        detectors, point_hz = self.detectors, self.point_hz
        read_here = [sweep(p.lines.line_hz, p.lines.line_amplitude, p.lines.grid_hz, point_hz, detectors)
                     for p in parts]
        combined = combine(read_here, [p.source.reference for p in parts], detectors)
        row_slot = np.repeat(np.arange(len(self.fast)), [f.n.size for f in self.fast])[self.point_row]
        # coordinates: (source, path, harmonic), source by source, path by path
        self.coord_first = []
        coord = 0
        for f in self.fast:
            self.coord_first.append(coord)
            coord += len(f.paths) * f.n.size
        self.coords = coord
        rows, cols, weight = [], [], {d: [] for d in detectors}  # rows: pairs; cols: coordinates
        pair_point, pair_group, pair_coherent = [], [], []
        groups: dict = {}
        for slot, f in enumerate(self.fast):
            k = f.k
            part, nominal = parts[k], read_here[k]
            own = row_slot == slot
            where = np.flatnonzero(own | np.logical_or.reduce(
                [np.nan_to_num(nominal[d]) >= NEGLIGIBLE * np.nan_to_num(combined[d]) for d in detectors]))
            h = np.where(own[where], self.point_row[where] - first[slot], _nearest(f.rep_hz, point_hz[where]))
            gains = {c: unit_gain(self.template.nominal, part.source, c, point_hz[where]) for c in f.paths}
            total = f.amplitude(f.level[:, h], gains)
            null = total <= 0
            unit = sweep(part.unit.line_hz, part.unit.line_amplitude, part.unit.grid_hz, point_hz[where[null]],
                         detectors)
            per_unit = {}
            for d in detectors:
                with np.errstate(invalid="ignore", divide="ignore"):
                    per_unit[d] = nominal[d][where] / total
                per_unit[d][null] = unit[d]
            pair = np.arange(where.size) + sum(x.size for x in pair_point)
            for i, c in enumerate(f.paths):
                rows.append(pair)
                cols.append(self.coord_first[slot] + i * f.n.size + h)
                for d in detectors:
                    weight[d].append(per_unit[d] * gains[c])
            pair_point.append(where)
            group = part.source.reference if part.source.reference is not None else ("own", k)
            pair_group.append(np.full(where.size, groups.setdefault(group, len(groups))))
            pair_coherent.append(np.full(where.size, f.combine == "coherent"))
        pair_point, pair_group = _cat(pair_point, int), _cat(pair_group, int)
        coherent = _cat(pair_coherent, bool)
        rows, cols = _cat(rows, int), _cat(cols, int)
        pairs, points = pair_point.size, point_hz.size
        # the pair-level route (sources in amplitude somewhere) or straight to the points (all in power)
        self.direct = not self.grouped_board and not coherent.any()
        if not self.direct:
            q, q_index = np.unique(pair_point * (len(groups) + 1) + pair_group, return_inverse=True)
            self.q_point, self.q_group = q // (len(groups) + 1), q % (len(groups) + 1)
            # stored transposed (targets x sources), so that a chunk's arrays stay (targets x samples) throughout
            self.pair_q = sparse.csr_array((np.ones(pairs), (q_index, np.arange(pairs))), shape=(q.size, pairs),
                                           dtype=np.float32)
            self.q_to_point = sparse.csr_array((np.ones(q.size), (self.q_point, np.arange(q.size))),
                                               shape=(points, q.size), dtype=np.float32)
            self.pair_coherent = coherent
        self.maps, self.defined = {}, {}
        for d in detectors:
            w = _cat(weight[d])
            ok = np.isfinite(w)
            defined = np.zeros(points, bool)
            defined[pair_point[rows[ok]]] = True
            self.defined[d] = defined
            w = np.where(ok, w, 0.0)
            if self.direct:  # reading^2 at each point = sum of (W X)^2
                self.maps[d] = sparse.csr_array((w * w, (pair_point[rows], cols)), shape=(points, self.coords),
                                                dtype=np.float32)
            else:  # each pair's W, to combine per source (power or amplitude) and then per group
                self.maps[d] = sparse.csr_array(
                    (np.where(coherent[rows], w, w * w), (rows, cols)), shape=(pairs, self.coords), dtype=np.float32)

    def _pilot(self) -> dict[int, np.ndarray]:
        """Each fast source's amplitude per harmonic over its nominal one, in :data:`PILOT` draws and at every
        corner of the tolerances' ranges (up to 256 of them): the spread of what samples will do."""
        tolerances = self.tolerances
        drawn = draw(tolerances, PILOT, PILOT_SEED)
        corners = np.array(list(itertools.islice(itertools.product(*(t.support for t in tolerances)), 256)))
        values = np.vstack([drawn, corners.reshape(-1, len(tolerances))])
        boards = [self.template.board_at(dict(zip((t.key for t in tolerances), v))) for v in values] \
            if self.joint else None
        _, amplitude = self._amplitudes(values, boards)
        out, first = {}, 0
        for f in self.fast:
            with np.errstate(invalid="ignore", divide="ignore"):
                out[f.k] = np.nan_to_num(amplitude[:, first:first + f.n.size] / f.nominal, nan=1.0, posinf=1.0)
            first += f.n.size
        return out

    def _decisive(self, parts, rows, k: int, pilot: dict) -> tuple[np.ndarray, np.ndarray]:
        """The points (and their rows) that can hold a row's maximum in a sample.

        In a sample each source's reading at a row's points scales by one factor (its harmonic's amplitude),
        so the row's power reading at a point is a combination of the sources' readings there with weights
        the squares of those factors.  Where only the row's own source reads, the best point stays the best.
        Where another source reads too (at least :data:`SHARED` of the reading), the candidates are the row's
        tuning points and a grid of RBW/32 (between its points a maximum hides at most 0.0015 dB); kept are
        the points that are the maximum for the weights of the pilot draws and of the ranges' corners
        (:meth:`_pilot`), and their neighbours.  Rows that read nothing (a null) and rows whose sources add in
        amplitude (a shared reference) keep every candidate.
        """
        shared = np.zeros(rows.count, bool)
        shared[rows.owner[rows.shared(SHARED)]] = True
        every = np.zeros(rows.count, bool)
        for d in self.detectors:
            value, _ = rows.best(d)
            every |= np.isfinite(value) & ~(value > 0)
        if self.grouped_board:
            every[:] = True
        keep = np.zeros(rows.points.size, bool)
        for d in self.detectors:  # the rows' best points
            _, index = rows.best(d)
            keep[index[index >= 0]] = True
        hz, owner = [rows.points[keep | every[rows.owner]]], [rows.owner[keep | every[rows.owner]]]
        grids = []
        for r in np.flatnonzero((shared | every) & rows.searched):  # an unmodulated row is read on its line only
            grid = np.arange(rows.lo_hz[r], rows.hi_hz[r], rows.rbw_hz[r] / 32)
            grid = np.concatenate([grid, rows.points[rows.owner == r]])
            if every[r]:
                hz.append(grid)
                owner.append(np.full(grid.size, r))
            else:
                grids.append((r, grid))
        if grids:  # one sweep per source over all the grids, then each row's choice
            cuts = np.cumsum([0] + [g.size for _, g in grids])
            everywhere = np.concatenate([g for _, g in grids])
            read = [sweep(p.lines.line_hz, p.lines.line_amplitude, p.lines.grid_hz, everywhere, self.detectors)
                    for p in parts]
            draws = pilot[k].shape[0]
            for (r, grid), a, b in zip(grids, cuts[:-1], cuts[1:]):
                weights = np.array([pilot[s][:, _nearest(parts[s].f, np.array([parts[k].f[r]]))[0]]
                                    if s in pilot else np.ones(draws) for s in range(len(parts))]) ** 2
                chosen = np.zeros(grid.size, bool)
                order = np.argsort(grid)
                rank = np.empty(grid.size, int)
                rank[order] = np.arange(grid.size)
                for d in self.detectors:
                    x = np.nan_to_num(np.array([q[d][a:b] for q in read]))  # sources x points
                    if not x.any():
                        continue
                    x = np.where(x >= SHARED * np.sqrt((x * x).sum(axis=0)), x, 0.0) ** 2
                    best = np.unique(np.argmax(weights.T @ x, axis=1))
                    near = np.clip(rank[best][:, None] + np.array([-1, 0, 1]), 0, grid.size - 1)
                    chosen[order[near.ravel()]] = True
                hz.append(grid[chosen])
                owner.append(np.full(int(chosen.sum()), r))
        return _cat(hz), _cat(owner, int)

    # ------------------------------------------------------------ the amplitude terms

    def _term_value(self, board, term) -> np.ndarray:
        """A term on ``board``: a fast source's levels (quantities x harmonics, flat) or one path's gains."""
        slot, path = term
        f = self.fast[slot]
        source = board.sources[f.k]
        if path is None:  # magnitudes only: under the envelope they are the bounds, no series needed
            levels = source.harmonics(f.n) if source.mode == "exact" else source.bounds(f.n * source.frequency_hz)
            return np.array([np.abs(levels[q]) for q in QUANTITIES]).ravel()
        return unit_gain(board, source, path, f.rep_hz)

    def _tables(self) -> None:
        """Tabulate every term that one tolerance alone changes; note those that several change together."""
        single: dict[int, list] = {}
        self.joint = []
        for slot, f in enumerate(self.fast):
            for path in (None, *f.paths):
                touching = self._touching(f.k, path)
                if len(touching) == 1:
                    single.setdefault(touching[0], []).append((slot, path))
                elif touching:
                    self.joint.append((slot, path))
        self.table = {}
        for j, terms in single.items():
            table = self._table(j, terms)
            widths = np.cumsum([0] + [3 * self.fast[s].n.size if p is None else self.fast[s].n.size for s, p in terms])
            for t, a, b in zip(terms, widths[:-1], widths[1:]):
                self.table[t] = (j, _Table(table.nodes, table.values[:, a:b], table.log_key, table.log[a:b]))

    def _table(self, j: int, terms) -> _Table:
        """The terms' values over tolerance ``j``'s range: 17 nodes, then every interval whose midpoint misses
        by more than half of :data:`TABLE_ERROR` is halved, until none does.  Halving only where needed follows
        the kinks (an envelope's corner crossing the range, the faster edge changing), which the midpoint
        test finds: across a kink linear interpolation misses most at the kink, and at the midpoint by at
        least half as much."""
        key = self.tolerances[j].key

        def at(xs):
            return np.array([np.concatenate([self._term_value(self.template.board_at({key: x}), t) for t in terms])
                             for x in xs])

        nodes = np.linspace(*self.tolerances[j].support, 17)
        values = at(nodes)
        test = np.ones(nodes.size - 1, bool)  # intervals still to check
        while test.any() and nodes.size < MAX_NODES:
            i = np.flatnonzero(test)
            middle = 0.5 * (nodes[i] + nodes[i + 1])
            exact = at(middle)
            guess = _Table.of(nodes, values)(middle)
            scale = np.maximum(np.abs(exact), 1e-3 * np.nanmax(np.abs(values), axis=0, initial=0.0))
            with np.errstate(invalid="ignore", divide="ignore"):
                error = np.nan_to_num(np.abs(exact - guess) / scale, posinf=0.0).max(axis=1, initial=0.0)
            bad = np.zeros(test.size, bool)
            bad[i] = error > TABLE_ERROR / 2
            nodes, values = np.insert(nodes, i + 1, middle), np.insert(values, i + 1, exact, axis=0)
            test = np.repeat(bad, 1 + test)  # both halves of a bad interval are checked again
        return _Table.of(nodes, values)

    # ------------------------------------------------------------ one chunk of samples

    def _amplitudes(self, values: np.ndarray, boards) -> tuple[np.ndarray, np.ndarray]:
        """Each sample's per-path factors X (samples x coordinates) and each fast harmonic's amplitude (samples x
        harmonics, the fast rows in order)."""
        samples = values.shape[0]
        factors, amplitude = [], []
        for slot, f in enumerate(self.fast):
            def term(path):
                t = (slot, path)
                if t in self.table:
                    j, table = self.table[t]
                    return table(values[:, j])
                if t in self.joint:
                    return np.array([self._term_value(b, t) for b in boards])
                nominal = f.level.ravel() if path is None else f.gains[path]
                return np.broadcast_to(nominal, (samples, nominal.size))

            level = term(None).reshape(samples, 3, -1)
            gains = {p: term(p) for p in f.paths}
            amplitude.append(f.amplitude(level, gains))
            for p, q in zip(f.paths, f.quantities):
                with np.errstate(invalid="ignore", divide="ignore"):
                    ratio = np.where(f.gains[p] != 0, gains[p] / f.gains[p], 0.0)
                factors.append(np.nan_to_num(ratio * level[:, QUANTITIES.index(q)]))
        cat = lambda xs: np.concatenate(xs, axis=1) if xs else np.zeros((samples, 0))
        return cat(factors), cat(amplitude)

    def margins(self, values: np.ndarray) -> tuple[list, np.ndarray]:
        """The row keys and each sample's worst margin per row (samples x rows, NaN where a row is absent)."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        if self.full:
            return full_margins(self.template, self.tolerances, values)
        boards = [self.template.board_at(dict(zip((t.key for t in self.tolerances), v))) for v in values] \
            if self.joint else None
        x, amplitude = self._amplitudes(values, boards)
        xt = np.ascontiguousarray(x.T, dtype=np.float32)  # coordinates x samples; single precision is 1e-6 dB
        readings = {}
        for d in self.detectors:
            if self.direct:  # reading^2 at each point = sum of (W X)^2
                power = self.maps[d] @ (xt * xt)
            else:
                squared = self.maps[d] @ (xt * xt)
                linear = self.maps[d] @ xt
                pair = np.where(self.pair_coherent[:, None], linear, np.sqrt(np.maximum(squared, 0.0)))
                amp = self.pair_q @ pair  # per (point, group)
                power = self.q_to_point @ (amp * amp)
            level = np.where(self.defined[d][:, None], np.sqrt(power), -np.inf)
            best = np.maximum.reduceat(level, self.row_starts, axis=0).T
            readings[d] = np.where(best > -np.inf, best, np.nan)  # NaN: no such detector there
        readings = {d: np.where(amplitude > 0, r, 0.0) for d, r in readings.items()}  # a null reads nothing
        return list(self.row_keys), _worst(readings, self.limits)


def _cat(arrays, dtype=float) -> np.ndarray:
    return np.concatenate(arrays) if arrays else np.array([], dtype)


def _starts(sorted_owner: np.ndarray) -> np.ndarray:
    """Where each run of equal values begins."""
    if not sorted_owner.size:
        return np.array([], int)
    return np.flatnonzero(np.concatenate([[True], sorted_owner[1:] != sorted_owner[:-1]]))


def board_margins(board, reuse: Reuse | None = None, baseline: _Baseline | None = None) -> dict:
    """Each row's worst margin on ``board``, keyed (source, harmonic): what :func:`emispec.pipeline.estimate`
    gives as ``worst_margin_db``, without the other columns.

    With a ``baseline`` (another board of the same template, read with the same ``reuse``), only the rows that
    a changed source can reach are read: the changed sources' own rows, and every row whose tuning range comes
    within the receiver's reach of a line a changed source has here or had on the baseline.  Each other row reads
    the same lines at the same points as on the baseline (a row's tuning points and their refinement follow from
    its own readings only), so it keeps the baseline's margin.
    """
    span, parts = board_parts(board, reuse)
    tunings = [tuning_of(p) for p in parts]
    keep = [np.ones(p.n.size, bool) for p in parts]
    if baseline is not None and span == baseline.span_hz and len(parts) == len(baseline.parts):
        changed = [k for k, (p, q) in enumerate(zip(parts, baseline.parts)) if p is not q]
        moved = [x.lines.line_hz for k in changed for x in (parts[k], baseline.parts[k])]
        for k, t in enumerate(tunings):
            if k not in changed:
                keep[k] = _reached(t, moved)
        gone = {parts[k].source.name for k in changed}  # a changed source's rows may be others (its span)
        out = {key: m for key, m in baseline.margins.items() if key[0] not in gone}
    else:
        out = {}
    read = read_rows([p.lines for p in parts], [p.lines.reference for p in parts],
                     [_rows_of(t, m) for t, m in zip(tunings, keep)], board.limit.detectors,
                     reader=reuse.read if reuse is not None else None)
    for part, m, rows in zip(parts, keep, read):
        reading = {d: np.where(part.live[m], np.nan_to_num(rows.best(d)[0]), 0.0) for d in board.limit.detectors}
        out.update(zip(((part.source.name, int(n)) for n in part.n[m]), _worst(reading, row_limits(board, rows))))
    return out


def _reached(tuning: dict, lines: list[np.ndarray]) -> np.ndarray:
    """Which rows of a part's tuning (:func:`emispec.pipeline.tuning_of`) have one of the ``lines`` (ascending
    frequencies) within the receiver's reach of their tuning range, at the widest RBW of the range."""
    reach = REACH_RBW * resolution_bandwidth_hz(tuning["hi_hz"])
    lo, hi = tuning["lo_hz"] - reach, tuning["hi_hz"] + reach
    out = np.zeros(lo.size, bool)
    for f in lines:
        out |= np.searchsorted(f, hi, side="right") > np.searchsorted(f, lo)
    return out


def _rows_of(tuning: dict, keep: np.ndarray) -> dict:
    """A part's tuning (:func:`emispec.pipeline.tuning_of`) for the rows ``keep`` only."""
    if keep.all():
        return tuning
    on = keep[tuning["owner"]]
    out = {k: v[keep] for k, v in tuning.items() if k in ("lo_hz", "hi_hz", "rbw_hz")}
    return dict(out, points=tuning["points"][on], owner=(np.cumsum(keep) - 1)[tuning["owner"][on]],
                searched=tuning["searched"])


@dataclass(frozen=True)
class _Baseline:
    """A board's parts and margins, for :func:`board_margins` to read only what a sample changes."""

    span_hz: tuple[float, float]
    parts: list
    margins: dict


_BASELINES = threading.local()


def _baseline(template: Template, reuse: Reuse) -> _Baseline:
    """The nominal board of ``template`` read with this worker thread's ``reuse``, kept from piece to piece.

    The board is built again, not taken from ``template.nominal``: a template that travelled to a worker has a
    new memo of entries, and only boards built from that memo share their unchanged paths and limit with the
    samples' boards (without that no part would be the baseline's and every sample would read every row).
    """
    kept = getattr(_BASELINES, "kept", None)
    if kept is None or kept[0] is not template or kept[1] is not reuse:
        board = template.board()
        span, parts = board_parts(board, reuse)
        _BASELINES.kept = kept = (template, reuse, _Baseline(span, parts, board_margins(board, reuse)))
    return kept[2]


def _full_chunk(template: Template, keys: list[str], values: np.ndarray) -> tuple[list, np.ndarray]:
    # the memo of this worker thread, kept from piece to piece: the sources a sample leaves alone are found again,
    # and their spread lines' readings at the tuning points that recur (pipeline._tuning_grid); the nominal board
    # read once, so that a sample reads only the rows its changes reach
    template, reuse = _worker_reuse(template)
    baseline = _baseline(template, reuse)
    per_sample = [board_margins(template.board_at(dict(zip(keys, v))), reuse, baseline) for v in values]
    order = list(dict.fromkeys(k for s in per_sample for k in s))
    matrix = np.array([[s.get(k, np.nan) for k in order] for s in per_sample]).reshape(len(per_sample), -1)
    return order, matrix


def full_margins(template: Template, tolerances, values: np.ndarray) -> tuple[list, np.ndarray]:
    """Each sample's worst margin per row from a full estimate of the sample's board (the reference)."""
    return _full_chunk(template, [t.key for t in tolerances], np.atleast_2d(values))


def _chunk(model: Model, values: np.ndarray):
    from . import receiver

    receiver.FFT_WORKERS = 1
    try:
        return model.margins(values)
    except BoardError as problem:  # a sample whose keys together break a rule of the board
        raise BoardError(problem.file, problem.key, f"{problem.problem} (in a sample of the tolerances; narrow "
                         "them so that every combination is a valid board)") from None


_INSTALLED: dict = {}


def _install(parent: int, model: Model) -> None:
    from .ensemble import _worker_start

    _worker_start(parent)
    _INSTALLED["model"] = model


def _installed_chunk(values: np.ndarray):
    return _chunk(_INSTALLED["model"], values)


class ModelPool(concurrent.futures.ProcessPoolExecutor):
    """A process pool whose workers receive the model once, when they start (a model of a large board is
    tens of MB: sent with every piece of work it would cost more than the work)."""

    def __init__(self, model: Model, workers: int | None = None):
        import os

        super().__init__(workers or os.cpu_count() or 1, initializer=_install, initargs=(os.getpid(), model))


def _merge(results: list[tuple[list, np.ndarray]]) -> tuple[list, np.ndarray]:
    keys = list(dict.fromkeys(k for ks, _ in results for k in ks))
    index = {k: i for i, k in enumerate(keys)}
    out = np.full((sum(m.shape[0] for _, m in results), len(keys)), np.nan, dtype=np.float32)
    row = 0
    for ks, m in results:
        out[row:row + m.shape[0], [index[k] for k in ks]] = m
        row += m.shape[0]
    return keys, out


def clopper_pearson(k, n: int, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """The exact (Clopper-Pearson) two-sided interval of a binomial proportion with ``k`` of ``n``."""
    from scipy.stats import beta

    k = np.asarray(k, dtype=float)
    alpha = 1 - level
    with np.errstate(invalid="ignore"):
        lo = np.where(k > 0, beta.ppf(alpha / 2, k, n - k + 1), 0.0)
        hi = np.where(k < n, beta.ppf(1 - alpha / 2, k + 1, n - k), 1.0)
    return lo, hi


def _ranks(x: np.ndarray) -> np.ndarray:
    from scipy.stats import rankdata

    return rankdata(x, axis=0, nan_policy="omit") if x.size else x


def rank_shares(draws: np.ndarray, outcome: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Spearman's rank correlation of each draw (samples x draws) with each outcome column (samples x rows),
    and each draw's share rho^2 / sum(rho^2) over the correlations above the noise (three standard errors).
    Returns (rho, share), draws x rows; samples where the outcome is NaN are left out of that column."""
    outcome = np.asarray(outcome, dtype=float).reshape(outcome.shape[0], -1)
    rho = np.zeros((draws.shape[1], outcome.shape[1]))
    rd = _ranks(draws)
    for c in range(outcome.shape[1]):
        ok = np.isfinite(outcome[:, c])
        if ok.sum() < 3:
            continue
        y = _ranks(outcome[ok, c])
        x = _ranks(draws[ok]) if not ok.all() else rd
        x = x - x.mean(axis=0)
        y = y - y.mean()
        denominator = np.sqrt((x * x).sum(axis=0) * (y * y).sum())
        with np.errstate(invalid="ignore", divide="ignore"):
            rho[:, c] = np.where(denominator > 0, (x * y[:, None]).sum(axis=0) / denominator, 0.0)
    # a correlation within three standard errors of zero (1/sqrt(n - 1) for independent samples) is noise: it
    # gets no share, so a row that no tolerance moves names no driver
    counts = np.isfinite(outcome).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        noise = np.where(counts > 1, 3 / np.sqrt(np.maximum(counts - 1, 1)), np.inf)
    square = np.where(np.abs(rho) > noise, rho**2, 0.0)
    total = square.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(total > 0, square / total, 0.0)
    return rho, share


@dataclass(frozen=True)
class RiskResult:
    """A study's samples, their margins and what they add up to (see :func:`study`)."""

    template: Template
    tolerances: tuple[Tolerance, ...]
    seed: int
    values: np.ndarray  # samples x tolerances, SI
    keys: tuple  # (source, harmonic) of each margin column
    margins: np.ndarray  # samples x rows, worst margin over the detectors (NaN: the row is not in that sample)
    nominal: dict  # (source, harmonic) -> nominal worst margin, frequency
    guard_band_db: float

    @property
    def samples(self) -> int:
        return self.values.shape[0]

    @property
    def worst(self) -> np.ndarray:
        """Each sample's least margin over the board's rows."""
        filled = np.where(np.isnan(self.margins), np.inf, self.margins)
        worst = filled.min(axis=1, initial=np.inf)
        return np.where(np.isinf(worst), np.nan, worst)

    @property
    def nominal_worst(self) -> float | None:
        """The nominal board's least margin."""
        margins = [m for m, _ in self.nominal.values() if m is not None]
        return min(margins) if margins else None

    @property
    def draw_units(self) -> list[list[int]]:
        return units_of(self.tolerances)

    def draw_labels(self) -> list[str]:
        """A name per independent draw: the key, or the group and its keys."""
        out = []
        for members in self.draw_units:
            group = self.tolerances[members[0]].group
            out.append(self.tolerances[members[0]].key if group is None else
                       f"group {group} ({', '.join(self.tolerances[j].key for j in members)})")
        return out

    def drivers(self, outcome: np.ndarray) -> list[list[dict]]:
        """Per outcome column, the draws that drive it, largest share first (share above 1 %)."""
        units = self.draw_units
        x = self.values[:, [m[0] for m in units]] if units else np.empty((self.samples, 0))
        rho, share = rank_shares(x, outcome)
        labels, groups = self.draw_labels(), [self.tolerances[m[0]].group for m in units]
        out = []
        for c in range(share.shape[1]):
            order = np.argsort(-share[:, c], kind="stable")
            out.append([dict(key=labels[g] if groups[g] is None else groups[g], share=float(share[g, c]),
                             rho=float(rho[g, c]), **({"keys": [self.tolerances[j].key for j in units[g]]}
                                                      if groups[g] is not None else {}))
                        for g in order if share[g, c] > 0.01])
        return out

    def summary(self) -> dict:
        """The board's numbers: P(fail) and P(guard band) with their 95 % intervals, worst-margin percentiles."""
        n, worst, guard = self.samples, self.worst, self.guard_band_db
        fails = int(np.sum(worst < 0))
        guards = int(np.sum((worst >= 0) & (worst < guard)))
        lo, hi = clopper_pearson([fails, guards], n)
        return dict(samples=n, fails=fails, guards=guards, p_fail=fails / n, p_fail_ci=[float(lo[0]), float(hi[0])],
                    p_guard=guards / n, p_guard_ci=[float(lo[1]), float(hi[1])], worst_margin_db=_percentiles(worst),
                    drivers=self.drivers(worst[:, None])[0])

    def row_table(self) -> list[dict]:
        """Every row: P(fail), P(guard band), percentiles and drivers, most likely to fail first."""
        n, m, guard = self.samples, self.margins, self.guard_band_db
        fails = np.sum(m < 0, axis=0)
        guards = np.sum((m >= 0) & (m < guard), axis=0)
        lo, hi = clopper_pearson(fails, n)
        drivers = self.drivers(m)
        rows = []
        for c, key in enumerate(self.keys):
            nominal_margin, frequency = self.nominal.get(key, (None, None))
            present = m[:, c][np.isfinite(m[:, c])]
            if frequency is None:  # a row only samples have (a frequency tolerance moved the span's edge)
                frequency = key[1] * self.template.nominal.source(key[0]).frequency_hz
            rows.append(dict(source=key[0], harmonic=int(key[1]), frequency_hz=frequency,
                             nominal_margin_db=nominal_margin, margin_db=_percentiles(present),
                             p_fail=float(fails[c] / n), p_fail_ci=[float(lo[c]), float(hi[c])],
                             p_guard=float(guards[c] / n), drivers=drivers[c], samples_with_row=int(present.size)))
        rows.sort(key=lambda r: (-r["p_fail"], -r["p_guard"], _sortable(r["margin_db"]["p05"])))
        return rows


def _sortable(x) -> float:
    return np.inf if x is None else x


def _percentiles(x: np.ndarray) -> dict:
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if not x.size:
        return {"p05": None, "p50": None, "p95": None}
    p = np.percentile(x, [5, 50, 95])
    return {"p05": float(p[0]), "p50": float(p[1]), "p95": float(p[2])}


def study(template: Template, tolerances, samples: int, seed: int, executor=None, progress=None,
          model: Model | None = None, nominal=None) -> RiskResult:
    """Monte Carlo over the tolerances: ``samples`` draws from ``seed``, each sample's margins per row.

    Parameters
    ----------
    template : Template
    tolerances : sequence of Tolerance
    samples, seed : int
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Where to run the pieces of work (:data:`emispec.tolerances.CHUNK` samples, :data:`SLOW_PIECE` where
        samples read sources again); None runs here.  Results do not depend on it.
    progress : callable, optional
        Called with the number of samples just finished.
    model : Model, optional
        The model of these tolerances, if already built.
    nominal : Estimate, optional
        The nominal board's estimate, if already made.
    """
    tolerances = tuple(tolerances)
    values = draw(tolerances, samples, seed)
    model = model or Model(template, tolerances)
    # pieces of work: the draws are fixed already, so their size changes nothing but the balance of the work
    size = SLOW_PIECE if model.slow else CHUNK
    pieces = [values[i:i + size] for i in range(0, samples, size)]
    if executor is None:
        results = []
        for piece in pieces:
            results.append(_chunk(model, piece))
            if progress is not None:
                progress(len(piece))
    else:
        if isinstance(executor, ModelPool):
            futures = {executor.submit(_installed_chunk, piece): i for i, piece in enumerate(pieces)}
        else:
            shared = executor.scatter(model, broadcast=True) if hasattr(executor, "scatter") else model
            futures = {executor.submit(_chunk, shared, piece): i for i, piece in enumerate(pieces)}
        results = gather(futures, [len(p) for p in pieces], progress, _as_completed(executor))
    keys, margins = _merge(results)
    rows = (nominal if nominal is not None else estimate(template.nominal)).rows
    at_nominal = {rows.key(i): (float(rows.worst_margin_db[i]) if np.isfinite(rows.worst_margin_db[i]) else None,
                                float(rows.frequency_hz[i])) for i in range(len(rows))}
    return RiskResult(template, tolerances, seed, values, tuple(keys), margins, at_nominal,
                      template.nominal.guard_band_db)


def _as_completed(executor):
    """How futures of ``executor`` are waited for: Dask's own ``as_completed`` for a Dask client."""
    if hasattr(executor, "scatter"):
        from distributed import as_completed

        return lambda futures: as_completed(list(futures))
    return concurrent.futures.as_completed
