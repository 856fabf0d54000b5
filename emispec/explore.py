"""Design exploration: vary board values, and solve for the value that just keeps the guard band.

Both work on a :class:`emispec.parameters.Template`: the board file is read
and checked once, and every variant or trial value is a board built from it
with that value set (only the changed entries are checked again, no file is
read).  A bad value gets the same one-line error as in a file.
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass

import numpy as np

from .ensemble import Ensemble
from .parameters import Template, key_label, scope_of
from .pipeline import Estimate, Reuse, estimate
from .schema import BoardError
from .units import QuantityError, parse_quantity

__all__ = ["Variant", "vary", "Solution", "solve", "scope_of"]


@dataclass(frozen=True)
class Variant:
    """One variant: its settings and its estimate."""

    settings: tuple[tuple[str, object], ...]
    estimate: Estimate

    @property
    def label(self) -> str:
        """``sdram_clk.rise_time=0.3 ns, dc_cable.ratio=-40 dB``: each key with its entry's name."""
        return ", ".join(f"{key_label(k)}={v}" for k, v in self.settings)

    def worst_at(self, detector: str | None = None) -> str | None:
        """The row with the least margin: ``sdram_clk n=6 QP`` (None where no row has a margin)."""
        rows = self.estimate.rows
        values = rows.worst_margin_db if detector is None else rows.margins.get(detector)
        if values is None or not np.isfinite(values).any():
            return None
        i = int(np.nanargmin(values))
        return f"{rows.source[i]} n={rows.harmonic[i]} {detector or rows.worst_detector[i]}"

    def worst_margin_db(self, detector: str | None = None) -> float:
        rows = self.estimate.rows
        values = rows.worst_margin_db if detector is None else rows.margins.get(detector, np.array([]))
        finite = values[np.isfinite(values)]
        return float(finite.min()) if finite.size else float("nan")

    def counts(self, detector: str | None = None) -> tuple[int, int]:
        """(over the limit, within the guard band) on one detector or on the worst of all."""
        rows = self.estimate.rows
        margin = rows.worst_margin_db if detector is None else rows.margins.get(detector, np.array([]))
        m = np.nan_to_num(margin, nan=np.inf)
        guard = self.estimate.board.guard_band_db
        return int((m < 0).sum()), int(((m >= 0) & (m < guard)).sum())


def combinations(changes: dict[str, list], mode: str = "cross", file: str = "<board>") -> list[tuple]:
    """Every combination (``cross``) or every aligned tuple (``zip``) of the value lists."""
    if mode == "zip":
        if len({len(v) for v in changes.values()}) != 1:
            raise BoardError(file, list(changes)[-1], "zipped value lists must have the same length")
        return list(zip(*changes.values()))
    if mode == "cross":
        return list(itertools.product(*changes.values()))
    raise ValueError(f"mode must be 'cross' or 'zip', got {mode!r}")


def vary(template: Template, changes: dict[str, list], mode: str = "cross", progress=None,
         executor=None) -> list[Variant]:
    """Estimate every combination (``cross``) or every aligned tuple (``zip``) of values.

    Parameters
    ----------
    template : Template
    changes : dict
        Key path -> list of values, as they would be written in the board file.
    progress : callable, optional
        Called with the number of variants just finished.
    executor : concurrent.futures.Executor, optional
        Where to run the variants (default: in this process).

    Returns
    -------
    list of Variant
        In the order of the combinations.  Each variant's estimate has every row
        of a single estimate of that board but no line spectra.
    """
    keys = list(changes)
    combos = combinations(changes, mode, template.file)
    members = [dict(zip(keys, combo)) for combo in combos]
    for member in members:
        template.board(member)  # every bad value fails here, in this process, before any work is sent out
    result = Ensemble(template, members).evaluate(executor, progress)
    return [Variant(tuple(zip(keys, combo)), est) for combo, est in zip(combos, result.estimates)]


@dataclass(frozen=True)
class Solution:
    """Where the board just keeps the guard band as one value changes."""

    key: str
    scope: str | None
    unit: str
    value: float | None
    margin_db: float | None
    direction: str
    monotone: bool
    binding: str | None
    scanned: tuple[tuple[float, float], ...]
    crossings: tuple[float, ...]
    note: str

    @property
    def text(self) -> str:
        return "none in the range" if self.value is None else f"{self.value:.6g} {self.unit}".strip()


_NUMBER_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$")


def _range(template: Template, key: str, low: str, high: str, points: int):
    """The scan values in the range's own unit, the unit, whether they are whole numbers, and the SI conversion."""
    parameter = template.parameter(key)
    kind = parameter.declaration.kind

    def split(text):
        match = _NUMBER_UNIT.match(str(text))
        if match is None:
            raise ValueError(f"cannot read {text!r} as a number with a unit")
        return match.group(1), match.group(2)

    (a, unit_a), (b, unit_b) = split(low), split(high)
    if unit_a != unit_b:
        raise ValueError(f"both ends of the range need the same unit ({unit_a!r} vs {unit_b!r})")
    unit = unit_a
    integer = kind == "count"
    if kind == "gain":
        to_si = (lambda x: x) if unit == "dB" else (lambda x: 20 * np.log10(x))
    elif kind in ("count", "number"):
        to_si = float
    else:
        try:
            scale = parse_quantity(f"1 {unit}".strip(), kind)
        except QuantityError as err:
            raise ValueError(f"{err} for {key}") from None
        to_si = (lambda x: x * scale)
    lo, hi = sorted((float(a), float(b)))  # a range written high..low means the same range
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise ValueError(f"the ends must be finite numbers (got {low!r} and {high!r})")
    return _scan_values(lo, hi, points, unit, integer), unit, integer, to_si


def _scan_values(lo: float, hi: float, points: int, unit: str, integer: bool) -> np.ndarray:
    """Scan points over [lo, hi]: whole numbers for counts, log-spaced over more than a decade (not for dB or %)."""
    if integer:
        return np.unique(np.round(np.linspace(lo, hi, min(points, int(abs(hi - lo)) + 1))))
    if lo > 0 and hi > 0 and hi / lo > 10 and unit not in ("dB", "%"):
        return np.geomspace(lo, hi, points)
    return np.linspace(lo, hi, points)


def _feasible(template: Template, key: str, values: np.ndarray, to_si, unit: str, integer: bool, points: int):
    """The scan cut to the values that make a valid board, and a note saying so (empty when nothing was cut).

    Where a value beyond some point is not a valid board (a rise time that no longer fits the high time), the
    boundary is found by bisection and the scan redone inside it.
    """
    def problem(v):
        try:
            template.board_at({key: to_si(v)})
            return None
        except BoardError as err:
            return err.problem

    problems = [problem(v) for v in values]
    valid = [p is None for p in problems]
    if all(valid):
        return values, ""
    if not any(valid):
        raise BoardError(template.file, key, f"no value in the range makes a valid board: {problems[0]}")
    # the longest run of valid scan points
    runs, start = [], None
    for k, ok in enumerate(valid + [False]):
        if ok and start is None:
            start = k
        elif not ok and start is not None:
            runs.append((start, k - 1))
            start = None
    first, last = max(runs, key=lambda r: r[1] - r[0])
    lo, hi = values[first], values[last]
    reasons = []
    for inside, outside, side in ((first, first - 1, "below"), (last, last + 1, "above")):
        if 0 <= outside < len(values):
            good, bad = values[inside], values[outside]
            for _ in range(40 if not integer else 0):
                mid = 0.5 * (good + bad)
                good, bad = (mid, bad) if problem(mid) is None else (good, mid)
            lo, hi = (good, hi) if side == "below" else (lo, good)
            reasons.append(f"{side} it, {problems[outside]}")
    note = f"the range was cut to {lo:.4g}..{hi:.4g} {unit}".rstrip() + ": " + "; ".join(reasons)
    return _scan_values(lo, hi, points, unit, integer), note


def solve(template: Template, key: str, low: str, high: str, points: int = 17, tolerance_db: float = 0.02,
          progress=None, scope: str | None = "auto") -> Solution:
    """The value of ``key`` in [low, high] at which the worst margin equals the guard band.

    ``scope`` names the source whose rows are judged; by default the source the
    key belongs to (a clock's rise time is judged by that clock's harmonics,
    by its own reading of each: another source's line at the same frequency is
    not the key's to fix), or the whole board for other keys (a loop area, a
    capacitor count); None judges the whole board.

    The range is scanned first.  Where the worst margin is monotone in the
    value, the single crossing is refined by bisection.  Where it is not (sinc
    nulls make single harmonics non-monotone in rise time), every crossing of
    the scan is refined and the answer is the boundary beyond which the whole
    rest of the range passes, on the side where the margin is larger.
    """
    values, unit, integer, to_si = _range(template, key, low, high, points)
    values, cut = _feasible(template, key, values, to_si, unit, integer, points)
    if scope == "auto":
        scope = scope_of(key)
    cache: dict[float, Estimate] = {}
    reuse = Reuse()  # the sources the key does not touch are computed and read once

    def run(v):
        v = float(round(v)) if integer else float(v)
        if v not in cache:
            cache[v] = estimate(template.board_at({key: to_si(v)}), reuse)
            if progress is not None:
                progress()
        return cache[v]

    def judged(est):
        return np.ones(len(est.rows), bool) if scope is None else est.rows.source == scope

    own_key = scope is not None and scope_of(key) == scope

    def margins(est):
        """Each judged row's worst margin: of the whole reading, or (a source's own key) of the source's own."""
        r = est.rows
        if not own_key:
            return r.worst_margin_db
        own = np.vstack([r.limits[d] - r.own_readings[d] for d in est.board.limit.detectors])
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(own).any(axis=0), np.nanmin(np.where(np.isfinite(own), own, np.inf), axis=0),
                            np.nan)

    def excess(v):
        est = run(v)
        worst = margins(est)[judged(est)]
        finite = worst[np.isfinite(worst)]
        return (float(finite.min()) if finite.size else np.inf) - est.board.guard_band_db

    scan = [(float(v), excess(v)) for v in values]
    xs = np.array([x for x, _ in scan])
    ys = np.array([y for _, y in scan])
    diffs = np.diff(ys)
    monotone = bool(np.all(diffs >= -1e-9) or np.all(diffs <= 1e-9))
    increasing = ys[-1] >= ys[0]
    crossings = []
    for i in np.flatnonzero(np.sign(ys[:-1]) != np.sign(ys[1:])):
        a, b = xs[i], xs[i + 1]
        fa = ys[i]
        for _ in range(40):
            if integer and b - a <= 1:
                break
            mid = np.sqrt(a * b) if (a > 0 and b > 0 and not integer and unit not in ("dB", "%")) else 0.5 * (a + b)
            mid = float(round(mid)) if integer else mid
            fm = excess(mid)
            if abs(fm) < tolerance_db and not integer:
                a = b = mid
                break
            if np.sign(fm) == np.sign(fa):
                a, fa = mid, fm
            else:
                b = mid
        crossings.append((a, b))
    # the passing side: values beyond the last crossing towards the larger margin
    passing = ys >= 0
    if passing.all():
        value = xs[0] if increasing else xs[-1]
        note = "the whole range keeps the guard band"
    elif not passing.any():
        value, note = None, _why_not(run, judged, margins, xs, ys, key)
    else:
        if increasing:
            edge = crossings[-1]
            value = edge[1] if excess(edge[1]) >= 0 else edge[0]
        else:
            edge = crossings[0]
            value = edge[0] if excess(edge[0]) >= 0 else edge[1]
        note = "" if monotone else (f"worst margin is not monotone in {key} ({len(crossings)} crossings in the scan); "
                                    "the value given is the boundary beyond which the rest of the range passes")
    best = value if value is not None else float(xs[int(np.argmax(ys))])
    binding, margin = _binding(run(best), judged, margins)
    if cut:
        note = f"{cut}; {note}" if note else cut
    direction = "" if value is None else ("larger values pass" if increasing else "smaller values pass")
    return Solution(
        key, scope, unit, None if value is None else float(value), margin, direction, monotone, binding,
        tuple(scan), tuple(float(0.5 * (a + b)) for a, b in crossings), note,
    )


def _binding_row(est, judged, margins) -> int | None:
    judged_margin = np.where(judged(est), margins(est), np.nan)
    return int(np.nanargmin(judged_margin)) if np.isfinite(judged_margin).any() else None


def _binding(est, judged, margins) -> tuple[str | None, float | None]:
    """The judged row with the least margin: ``sdram_clk n=2 at 200 MHz on sdram_loop, QP`` and its margin."""
    i = _binding_row(est, judged, margins)
    if i is None:
        return None, None
    r = est.rows
    path = f" on {r.dominant_path[i]}" if r.dominant_path[i] is not None else ""
    text = f"{r.source[i]} n={r.harmonic[i]} at {r.frequency_hz[i] / 1e6:.6g} MHz{path}, {r.worst_detector[i]}"
    return text, float(np.where(judged(est), margins(est), np.nan)[i])


def _why_not(run, judged, margins, xs, ys, key) -> str:
    """Why no value works: the row that binds at the best value, and whether the key moves it at all."""
    best = float(xs[int(np.argmax(ys))])
    est = run(best)
    i = _binding_row(est, judged, margins)
    if i is None:
        return "no value in the range keeps the guard band"
    row = est.rows.key(i)
    spread = []
    for x in (xs[0], xs[-1]):
        other = run(float(x))
        hits = [j for j in range(len(other.rows)) if other.rows.key(j) == row]
        if hits:
            spread.append(float(margins(other)[hits[0]]))
    source, n = row
    path = est.rows.dominant_path[i]
    where = f"{source} n={n}" + (f" on {path}" if path is not None else "")
    if len(spread) == 2 and abs(spread[1] - spread[0]) < 0.05:
        return f"no value in the range keeps the guard band: {where} binds, and {key} does not change it"
    return (f"no value in the range keeps the guard band: {where} binds; its best margin in the range is "
            f"{max(spread + [float(margins(est)[i])]):+.2f} dB")
