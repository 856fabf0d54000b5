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

**Lines that move.**  A tolerance on a source's frequency or spread moves its
lines.  That source is built and read again for each sample (its tuning
points, the search for each row's maximum), with the other sources' lines
near its bands at the sample's amplitudes; its lines are also read at the
other rows' points where they can matter (within the receiver's reach of its
lines, down to their spectral tails, and above 3 % of the row's least
maximum: every eighth point, then around the contenders for the row's
maximum).  A tolerance that moves the analysed span itself (the
highest frequency under a standard's upper-frequency rule) makes every sample
a full estimate, and so does a tolerance on an antenna cable's wire (its
length or diameter), which moves the cable's resonances: across a spread band
the gain then tilts by more than the nominal best points follow.

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
import dataclasses
import itertools
from dataclasses import dataclass, field

import numpy as np

from .ensemble import gather
from .parameters import Template
from .pipeline import (Reuse, _nearest, _quantities_here, _source_part, _total_gain, analysis_span_hz, estimate,
                       read_board, row_limits, tuning_of)
from .readings import combine, read_rows, row_best, row_max
from .receiver import REACH_RBW, resolution_bandwidth_hz, sweep
from .schema import BoardError
from .sources import QUANTITIES
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
#: A moving source that reads less than this share of a fast row's least maximum at a point (bounded with a
#: safety factor) is not read there: it would add at most 10 log10(1 + 0.03^2) = 0.004 dB.
MOVED_SHARE = 0.03
#: A moving source is read first at every STRIDE-th point of a row; a coarse point this close to its row's best
#: (dB) may neighbour the row's maximum (see ``Model._contenders``).
STRIDE = 8
CONTENDER_DB = 0.3
#: Lines of a moving source below this share of its largest line (-120 dB) reach nothing that matters.
TAIL = 1e-6
MOVED_SAFETY = 2.0
#: Samples per piece of work where each sample reads sources again (pieces this small keep every worker busy).
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
    unit_hz: np.ndarray = field(default_factory=lambda: np.array([]))  # lines near moving sources, per unit
    unit_amp: np.ndarray = field(default_factory=lambda: np.array([], complex))
    unit_owner: np.ndarray = field(default_factory=lambda: np.array([], int))
    grid_hz: float = 0.0
    reference: str | None = None

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
        self.full = any(e["full"] for e in self._effects)
        if not self.full:
            self.moved = sorted({k for e in self._effects for k in e["moved"]})
            self._setup(read_board(board))

    @property
    def slow(self) -> bool:
        """Whether a sample reads sources again (lines that move, or a span that does), rather than only
        recombining the nominal readings."""
        return self.full or bool(self.moved)

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
            out["rails"] |= {r for r in nominal.rails if not _same(nominal.rails[r], board.rails[r])}
            out["full"] |= analysis_span_hz(board) != self.span_hz
        return out

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
        detectors, moved = self.detectors, self.moved
        swept, tuned = self._swept_bands() if moved else (np.empty((0, 2)), np.empty((0, 2)))
        fast = [k for k in range(len(parts)) if k not in moved]
        # each fast source's amplitude terms, tabulated over the tolerances
        self.fast = []
        for k in fast:
            part = parts[k]
            f = _Fast(k, part.source.paths, tuple(_level_quantity(board, p) for p in part.source.paths),
                      part.source.combine, part.n, 0.5 * (part.band_lo + part.band_hi),
                      np.array([part.levels[q] for q in QUANTITIES]), {}, grid_hz=part.unit.grid_hz,
                      reference=part.source.reference)
            f.gains = {p: unit_gain(board, part.source, p, f.rep_hz) for p in f.paths}
            f.nominal = f.amplitude(f.level, f.gains)
            self.fast.append(f)
        self._tables()
        pilot = self._pilot()
        # the points that decide each fast row, sorted by row
        points, point_row, self.row_keys, limits = [], [], [], {d: [] for d in detectors}
        for slot, k in enumerate(fast):
            part, rows = parts[k], read[k]
            hz, owner = self._decisive(parts, rows, k, swept, pilot)
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
        self._weights(parts, fast, first)
        if moved:  # the fast sources' lines where a moving source reads, per unit of their harmonic's amplitude
            for f in self.fast:
                unit, owner = parts[f.k].unit, parts[f.k].line_owner
                keep = self._inside(unit.line_hz, tuned)
                at = f.nominal[owner[keep]]
                with np.errstate(invalid="ignore", divide="ignore"):
                    per_unit = np.where(at > 0, parts[f.k].lines.line_amplitude[keep] / at, unit.line_amplitude[keep])
                f.unit_hz, f.unit_amp, f.unit_owner = unit.line_hz[keep], per_unit, owner[keep]
            near = self._inside(self.point_hz, swept)
            floor = self._row_floor(read, pilot)
            self.moved_points = {k: self._significant(k, near, floor) for k in moved}
            self.moved_coarse = {k: _coarse_positions(self.point_row[p]) for k, p in self.moved_points.items()}

    def _row_floor(self, read, pilot: dict) -> dict[str, np.ndarray]:
        """Each fast row's least maximum over the samples, per detector: its own source's nominal reading at
        its best point times the least amplitude its harmonic takes in the pilot draws."""
        floor = {d: [] for d in self.detectors}
        for f in self.fast:
            rows, least = read[f.k], pilot[f.k].min(axis=0)
            for d in self.detectors:
                own = row_max(np.nan_to_num(rows.per_source[f.k][d]), rows.owner, rows.count)
                floor[d].append(np.nan_to_num(own) * least)
        return {d: _cat(v) for d, v in floor.items()}

    def _significant(self, k: int, near: np.ndarray, floor: dict) -> np.ndarray:
        """The fast rows' points (of ``near``) where moving source ``k`` may read at least :data:`MOVED_SHARE`
        of the row's least maximum; elsewhere it adds at most 10 log10(1 + MOVED_SHARE^2) dB to the row.

        What it may read is bounded by its peak reading (at least that of any detector) at 9 values across each
        tolerance that moves it (the ends of its other tolerances), times :data:`MOVED_SAFETY`.
        """
        if not near.size:
            return near
        others = [j for j, e in enumerate(self._effects) if k not in e["moved"] and self._affects(e, k)]
        ends = list(itertools.islice(itertools.product(*(self.tolerances[j].support for j in others)), 8))
        bound = np.zeros(near.size)
        for moving, values in itertools.product(self._mover_settings(k, 9), ends):
            lines = self._moved_lines(k, {**moving, **{self.tolerances[j].key: v for j, v in zip(others, values)}})
            peak = sweep(lines.line_hz, lines.line_amplitude, lines.grid_hz, self.point_hz[near], ("PK",))["PK"]
            bound = np.maximum(bound, np.nan_to_num(peak))
        row = self.point_row[near]
        keep = np.logical_or.reduce([MOVED_SAFETY * bound >= MOVED_SHARE * floor[d][row] for d in self.detectors])
        return near[keep]

    def _moved_lines(self, k: int, setting: dict):
        variant = self.template.board_at(setting)
        return _source_part(variant, variant.sources[k], *self.span_hz).lines

    def _affects(self, effect: dict, k: int) -> bool:
        """Whether a tolerance changes source ``k``'s levels or the gain of one of its paths."""
        source, paths = self.template.nominal.sources[k], self.template.nominal.paths
        return k in effect["level"] or any(p in effect["paths"] or (paths[p].input == "escape" and
                                                                    source.rail in effect["rails"])
                                           for p in source.paths)

    def _weights(self, parts, fast: list[int], first: np.ndarray) -> None:
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
        row_slot = np.repeat(np.arange(len(fast)), [f.n.size for f in self.fast])[self.point_row]
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
        for slot, (k, f) in enumerate(zip(fast, self.fast)):
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
        self.moved_group = {k: groups.setdefault(parts[k].source.reference or ("own", k), len(groups))
                            for k in self.moved}
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

    def _decisive(self, parts, rows, k: int, swept: np.ndarray, pilot: dict) -> tuple[np.ndarray, np.ndarray]:
        """The points (and their rows) that can hold a row's maximum in a sample.

        In a sample each source's reading at a row's points scales by one factor (its harmonic's amplitude),
        so the row's power reading at a point is a combination of the sources' readings there with weights
        the squares of those factors.  Where only the row's own source reads, the best point stays the best.
        Where another source reads too (at least :data:`SHARED` of the reading), the candidates are the row's
        tuning points and a grid of RBW/32 (between its points a maximum hides at most 0.0015 dB); kept are
        the points that are the maximum for the weights of the pilot draws and of the ranges' corners
        (:meth:`_pilot`), and their neighbours.  Rows that read nothing (a null), rows a moving source may
        reach and rows whose sources add in amplitude (a shared reference) keep every candidate.
        """
        shared = np.zeros(rows.count, bool)
        shared[rows.owner[rows.shared(SHARED)]] = True
        every = np.zeros(rows.count, bool)
        for d in self.detectors:
            value, _ = rows.best(d)
            every |= np.isfinite(value) & ~(value > 0)
        if swept.size:  # a moving source may come into the row's band
            j = np.searchsorted(swept[:, 0], rows.hi_hz, side="right") - 1
            every |= (j >= 0) & (swept[np.maximum(j, 0), 1] >= rows.lo_hz)
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

    def _mover_settings(self, k: int, nodes: int) -> list[dict]:
        """Values of the tolerances that move source ``k``: ``nodes`` across one, the corners of several."""
        movers = [j for j, e in enumerate(self._effects) if k in e["moved"]]
        axes = ([np.linspace(*self.tolerances[movers[0]].support, nodes)] if len(movers) == 1 else
                [self.tolerances[j].support for j in movers])
        return [{self.tolerances[j].key: v for j, v in zip(movers, values)}
                for values in itertools.islice(itertools.product(*axes), 64)]

    def _swept_bands(self) -> tuple[np.ndarray, np.ndarray]:
        """Sorted, merged frequency ranges of the moving sources over their tolerances: where their lines reach
        (within the receiver's reach of every line above :data:`TAIL` of the source's largest: a spread line
        spectrum has tails beyond its occupied band that a weak neighbour can notice), and where the lines that
        their own rows' tuning points read lie (the bands and the receiver's reach)."""
        lo, hi = self.span_hz
        reached, tuned = [], []
        for k in self.moved:
            for setting in self._mover_settings(k, 5):
                variant = self.template.board_at(setting)
                part = _source_part(variant, variant.sources[k], lo, hi)
                amplitude = np.abs(part.lines.line_amplitude)
                f = part.lines.line_hz[amplitude >= TAIL * amplitude.max(initial=0.0)]
                reach = 1.5 * REACH_RBW * resolution_bandwidth_hz(f)
                reached.append((f - reach, f + reach))
                tuning = tuning_of(part)
                reach = 1.5 * REACH_RBW * tuning["rbw_hz"]
                tuned.append((tuning["lo_hz"] - reach, tuning["hi_hz"] + reach))
        return _merged(reached), _merged(tuned)

    @staticmethod
    def _inside(x: np.ndarray, swept: np.ndarray) -> np.ndarray:
        """Indices of ``x`` inside the merged ranges ``swept``."""
        if not swept.size or not x.size:
            return np.array([], int)
        j = np.searchsorted(swept[:, 0], x, side="right") - 1
        return np.flatnonzero((j >= 0) & (x <= swept[np.maximum(j, 0), 1]))

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
        samples = values.shape[0]
        boards = [self.template.board_at(dict(zip((t.key for t in self.tolerances), v))) for v in values] \
            if self.joint or self.moved else None
        x, amplitude = self._amplitudes(values, boards)
        xt = np.ascontiguousarray(x.T, dtype=np.float32)  # coordinates x samples; single precision is 1e-6 dB
        if self.direct:  # reading^2 at each point = sum of (W X)^2; the moving sources' added sample by sample
            powers = {d: self.maps[d] @ (xt * xt) for d in self.detectors}
            moved = [self._read_moved(b, a, {d: p[:, i] for d, p in powers.items()})
                     for i, (b, a) in enumerate(zip(boards, amplitude))] if self.moved else []
        else:
            moved = [self._read_moved(b, a) for b, a in zip(boards, amplitude)] if self.moved else []
        readings = {}
        for d in self.detectors:
            if self.direct:
                power = powers[d]
            else:
                squared = self.maps[d] @ (xt * xt)
                linear = self.maps[d] @ xt
                pair = np.where(self.pair_coherent[:, None], linear, np.sqrt(np.maximum(squared, 0.0)))
                amp = self.pair_q @ pair  # per (point, group)
                for i, r in enumerate(moved):
                    for k, reading in r["at_points"].items():
                        rows = np.flatnonzero(self.q_group == self.moved_group[k])
                        amp[rows, i] += reading[d][self.q_point[rows]]
                power = self.q_to_point @ (amp * amp)
            level = np.where(self.defined[d][:, None], np.sqrt(power), -np.inf)
            best = np.maximum.reduceat(level, self.row_starts, axis=0).T
            readings[d] = np.where(best > -np.inf, best, np.nan)  # NaN: no such detector there
        readings = {d: np.where(amplitude > 0, r, 0.0) for d, r in readings.items()}  # a null reads nothing
        worst = _worst(readings, self.limits)
        keys = list(self.row_keys)
        if not self.moved:
            return keys, worst
        extra: dict = {}
        for i, r in enumerate(moved):
            for key, margin in r["rows"].items():
                extra.setdefault(key, np.full(samples, np.nan))[i] = margin
        keys += list(extra)
        return keys, np.concatenate([worst, np.array(list(extra.values())).T.reshape(samples, -1)], axis=1)

    def _read_moved(self, board, amplitude: np.ndarray, power: dict | None = None) -> dict:
        """A sample's moving sources: their rows read again, and their lines read at the fast rows' points.

        With the sample's ``power`` at the points (sources adding in power), the moving lines' power is added to
        it in place, read at every :data:`STRIDE`-th of a row's points first and then only between those that
        may hold the row's maximum (:meth:`_contenders`); otherwise their reading at every point is returned."""
        lo, hi = self.span_hz
        parts = [_source_part(board, board.sources[k], lo, hi) for k in self.moved]
        lines, tunings = [p.lines for p in parts], [tuning_of(p) for p in parts]
        empty = dict(points=np.array([]), owner=np.array([], int), lo_hz=np.array([]), hi_hz=np.array([]),
                     rbw_hz=np.array([]), searched=False)
        first = 0
        for f in self.fast:
            if f.unit_hz.size:
                scale = amplitude[first + f.unit_owner]
                lines.append(dataclasses.replace(parts[0].lines, name=f"fast{f.k}", reference=f.reference,
                                                 grid_hz=f.grid_hz, line_hz=f.unit_hz,
                                                 line_amplitude=f.unit_amp * scale))
                tunings.append(empty)
            first += f.n.size
        read = read_rows(lines, [s.reference for s in lines], tunings, self.detectors)
        rows, at_points = {}, {}
        for part, k, r in zip(parts, self.moved, read):
            reading = {d: np.where(part.live, np.nan_to_num(row_best(r.combined[d], r.owner, r.count)[0]), 0.0)
                       for d in self.detectors}
            worst = _worst(reading, row_limits(board, r))
            rows.update({(part.source.name, int(n)): float(m) for n, m in zip(part.n, worst)})
            near = self.moved_points[k]
            read_at = lambda where, part=part: sweep(part.lines.line_hz, part.lines.line_amplitude,
                                                     part.lines.grid_hz, self.point_hz[where], self.detectors)
            if power is None:
                at = read_at(near)
                at_points[k] = {d: _scatter(near, np.nan_to_num(at[d]), self.point_hz.size) for d in self.detectors}
                continue
            coarse = near[self.moved_coarse[k]]
            for where in (coarse, None):
                if where is None:
                    where = near[self._contenders(k, power)]
                at = read_at(where)
                for d in self.detectors:
                    power[d][where] += np.nan_to_num(at[d]).astype(np.float32) ** 2
        return dict(rows=rows, at_points=at_points)

    def _contenders(self, k: int, power: dict) -> np.ndarray:
        """Positions (in ``moved_points[k]``) between the coarse points that may hold a row's maximum: those up to
        the next coarse point either side of every coarse point that is a local maximum within
        :data:`CONTENDER_DB` of its row's coarse best, per detector.  A peak between coarse points (RBW/4 apart
        on a row's RBW/32 grid) reads at most 6.02 (1/8)^2 = 0.094 dB lower at the nearest of them."""
        near, positions = self.moved_points[k], self.moved_coarse[k]
        rows = self.point_row[near[positions]]
        same_prev = np.concatenate([[False], rows[1:] == rows[:-1]])
        same_next = np.concatenate([rows[:-1] == rows[1:], [False]])
        starts = _starts(rows)
        lengths = np.diff(np.append(starts, rows.size))
        picked = np.zeros(positions.size, bool)
        for d in self.detectors:
            value = np.where(self.defined[d][near[positions]], power[d][near[positions]], 0.0)
            prev = np.where(same_prev, np.roll(value, 1), -1.0)
            nxt = np.where(same_next, np.roll(value, -1), -1.0)
            best = np.repeat(np.maximum.reduceat(value, starts), lengths) if rows.size else value
            picked |= (value > 0) & (value >= prev) & (value >= nxt) & (value >= best * 10 ** (-CONTENDER_DB / 10))
        centre = positions[picked]
        steps = np.arange(1, STRIDE)
        around = centre[:, None] + np.concatenate([-steps, steps])
        inside = (around >= 0) & (around < near.size)
        around = np.where(inside, around, centre[:, None])
        row = self.point_row[near]
        fine = np.ones(near.size, bool)
        fine[positions] = False  # read already
        keep = inside & (row[around] == row[centre][:, None]) & fine[around]
        return np.unique(around[keep])


def _merged(ranges: list[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
    """The union of ranges (pairs of start and end arrays) as sorted, disjoint [start, end] rows."""
    if not ranges:
        return np.empty((0, 2))
    a, b = np.concatenate([r[0] for r in ranges]), np.concatenate([r[1] for r in ranges])
    order = np.argsort(a)
    a, b = a[order], np.maximum.accumulate(b[order])
    first = np.flatnonzero(np.concatenate([[True], a[1:] > b[:-1]]))  # a gap before: a new range
    last = np.concatenate([first[1:] - 1, [a.size - 1]])
    return np.stack([a[first], b[last]], axis=1)


def _coarse_positions(rows: np.ndarray) -> np.ndarray:
    """Positions of every :data:`STRIDE`-th point of each row (and its last), ``rows`` sorted."""
    starts = _starts(rows)
    rank = np.arange(rows.size) - np.repeat(starts, np.diff(np.append(starts, rows.size)))
    keep = rank % STRIDE == 0
    keep[np.append(starts[1:] - 1, rows.size - 1) if rows.size else []] = True
    return np.flatnonzero(keep)


def _scatter(index: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    out = np.zeros(size)
    out[index] = values
    return out


def _cat(arrays, dtype=float) -> np.ndarray:
    return np.concatenate(arrays) if arrays else np.array([], dtype)


def _starts(sorted_owner: np.ndarray) -> np.ndarray:
    """Where each run of equal values begins."""
    if not sorted_owner.size:
        return np.array([], int)
    return np.flatnonzero(np.concatenate([[True], sorted_owner[1:] != sorted_owner[:-1]]))


def _full_chunk(template: Template, keys: list[str], values: np.ndarray) -> tuple[list, np.ndarray]:
    reuse, per_sample = Reuse(), []
    for v in values:
        rows = estimate(template.board_at(dict(zip(keys, v))), reuse).rows
        per_sample.append({rows.key(i): float(m) for i, m in enumerate(rows.worst_margin_db)})
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
