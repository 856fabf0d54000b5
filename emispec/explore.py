"""Design exploration: vary board values, solve for the value that just keeps the guard band, plan the tests.

Every variant is a real board: the value is written into the parsed board file
at its key path and the board is validated again, so a bad value gets the same
one-line error as in a file, and a variant's estimate is exactly the estimate
of a board file carrying that value.
"""

from __future__ import annotations

import concurrent.futures
import copy
import dataclasses
import itertools
import multiprocessing
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .board import BoardError, board_from_mapping
from .margin import Estimate, estimate
from .receiver import band_names, resolution_bandwidth_hz

__all__ = [
    "set_value",
    "Variant",
    "vary",
    "Solution",
    "solve",
    "scope_of",
    "plan_rows",
    "PLAN_COLUMNS",
]

_SEGMENT = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)(?:\[([^\]]+)\])?$")


def set_value(data: dict, key: str, value, file: str = "<board>") -> dict:
    """A copy of the parsed board with ``value`` at ``key`` (e.g. ``clock[cpu_clk].rise_time``).

    A segment ``name[sel]`` picks the entry of an array of tables whose ``name``
    is ``sel``, or the entry at index ``sel``.
    """
    data = copy.deepcopy(data)
    node = data
    parts = key.split(".")
    for depth, part in enumerate(parts):
        match = _SEGMENT.match(part)
        if match is None:
            raise BoardError(file, key, f"cannot read key segment {part!r}; write e.g. clock[cpu_clk].rise_time")
        name, selector = match.groups()
        last = depth == len(parts) - 1
        if selector is None:
            if last:
                node[name] = value
                return data
            node = node.setdefault(name, {})
            if not isinstance(node, dict):
                raise BoardError(file, key, f"{name!r} is not a table")
            continue
        entries = node.get(name)
        if not isinstance(entries, list):
            raise BoardError(file, key, f"no array {name!r} to select {selector!r} from")
        chosen = [e for e in entries if isinstance(e, dict) and e.get("name") == selector]
        if not chosen and selector.isdigit() and int(selector) < len(entries):
            chosen = [entries[int(selector)]]
        if not chosen:
            names = [e.get("name") for e in entries if isinstance(e, dict)]
            raise BoardError(file, key, f"no {name} named {selector!r}; defined: {names}")
        if last:
            raise BoardError(file, key, "a key path must end in a value, not a table")
        node = chosen[0]
    return data


@dataclass(frozen=True)
class Variant:
    """One variant: its settings and its estimate."""

    settings: tuple[tuple[str, object], ...]
    estimate: Estimate

    @property
    def label(self) -> str:
        return ", ".join(f"{k.split('.')[-1]}={v}" for k, v in self.settings)

    def worst_margin_db(self, detector: str | None = None) -> float:
        rows = self.estimate.rows
        values = rows.worst_margin_db if detector is None else rows.margins[detector]
        finite = values[np.isfinite(values)]
        return float(finite.min()) if finite.size else float("nan")

    def counts(self, detector: str | None = None) -> tuple[int, int]:
        """(over the limit, within the guard band) on one detector or on the worst of all."""
        rows = self.estimate.rows
        margin = rows.worst_margin_db if detector is None else rows.margins[detector]
        m = np.nan_to_num(margin, nan=np.inf)
        guard = self.estimate.board.guard_band_db
        return int((m < 0).sum()), int(((m >= 0) & (m < guard)).sum())


def _variant_estimate(job: tuple[dict, str, Path]) -> Estimate:
    """Estimate one variant; its line spectra are dropped to keep many variants in memory."""
    data, file, base_dir = job
    return dataclasses.replace(estimate(board_from_mapping(data, file, base_dir)), sources=())


def vary(data: dict, file: str, base_dir: Path, changes: dict[str, list], mode: str = "cross", progress=None,
         workers: int | None = None) -> list[Variant]:
    """Estimate every combination (``cross``) or every aligned tuple (``zip``) of values.

    Parameters
    ----------
    data : dict
        The parsed board file (see :func:`emispec.board.read_board_data`).
    changes : dict
        Key path -> list of values, as they would be written in the board file.
    progress : callable, optional
        Called with no argument after each variant.
    workers : int, optional
        Processes to spread the variants over (default: the machine's cores).

    Returns
    -------
    list of Variant
        In the order of the combinations.  Each variant's estimate has every row
        of a single estimate of that board but no line spectra (``sources``).
    """
    keys = list(changes)
    if mode == "zip":
        lengths = {len(v) for v in changes.values()}
        if len(lengths) != 1:
            raise BoardError(file, keys[-1], "zipped value lists must have the same length")
        combos = list(zip(*changes.values()))
    elif mode == "cross":
        combos = list(itertools.product(*changes.values()))
    else:
        raise ValueError(f"mode must be 'cross' or 'zip', got {mode!r}")
    jobs = []
    for combo in combos:
        board_data = data
        for key, value in zip(keys, combo):
            board_data = set_value(board_data, key, value, file)
        board_from_mapping(board_data, file, base_dir)  # every bad value fails here, in this process
        jobs.append((board_data, file, base_dir))
    workers = min(workers or os.cpu_count() or 1, len(jobs))
    if workers > 1 and "fork" in multiprocessing.get_all_start_methods():
        with concurrent.futures.ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("fork")) as pool:
            estimates = []
            for est in pool.map(_variant_estimate, jobs):
                estimates.append(est)
                if progress is not None:
                    progress()
    else:
        estimates = []
        for job in jobs:
            estimates.append(_variant_estimate(job))
            if progress is not None:
                progress()
    return [Variant(tuple(zip(keys, combo)), est) for combo, est in zip(combos, estimates)]


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


def _range_values(low: str, high: str, points: int):
    """Parse 'number unit' endpoints; return (numbers, unit, integer)."""
    def split(text):
        match = re.match(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*$", str(text))
        if match is None:
            raise ValueError(f"cannot read {text!r} as a number with a unit")
        return match.group(1), match.group(2)

    (a, unit_a), (b, unit_b) = split(low), split(high)
    if unit_a != unit_b:
        raise ValueError(f"both ends of the range need the same unit ({unit_a!r} vs {unit_b!r})")
    integer = unit_a == "" and a.lstrip("+-").isdigit() and b.lstrip("+-").isdigit()
    lo, hi = float(a), float(b)
    if integer:
        values = np.unique(np.round(np.linspace(lo, hi, min(points, int(abs(hi - lo)) + 1))))
    elif lo > 0 and hi > 0 and max(lo, hi) / min(lo, hi) > 10 and unit_a not in ("dB", "%"):
        values = np.geomspace(lo, hi, points)
    else:
        values = np.linspace(lo, hi, points)
    return values, unit_a, integer


def scope_of(key: str) -> str | None:
    """The source a key path belongs to (``clock[x]...`` or ``current[x]...``), else None (the whole board)."""
    match = re.match(r"^(?:clock|current)\[([^\]]+)\]\.", key)
    return match.group(1) if match and not match.group(1).isdigit() else None


def solve(data: dict, file: str, base_dir: Path, key: str, low: str, high: str, points: int = 17,
          tolerance_db: float = 0.02, progress=None, scope: str | None = "auto") -> Solution:
    """The value of ``key`` in [low, high] at which the worst margin equals the guard band.

    ``scope`` names the source whose rows are judged; by default the source the
    key belongs to (a clock's rise time is judged by that clock's harmonics),
    or the whole board for other keys (a loop area, a capacitor count); None
    judges the whole board.

    The range is scanned first.  Where the worst margin is monotone in the
    value, the single crossing is refined by bisection.  Where it is not (sinc
    nulls make single harmonics non-monotone in rise time), every crossing of
    the scan is refined and the answer is the boundary beyond which the whole
    rest of the range passes, on the side where the margin is larger.
    """
    values, unit, integer = _range_values(low, high, points)
    if scope == "auto":
        scope = scope_of(key)

    def fmt(v):
        return int(round(v)) if integer else (f"{v:.9g} {unit}".strip() if unit else float(v))

    cache: dict[float, Estimate] = {}

    def run(v):
        v = float(round(v)) if integer else float(v)
        if v not in cache:
            board_data = set_value(data, key, fmt(v), file)
            cache[v] = estimate(board_from_mapping(board_data, file, base_dir))
            if progress is not None:
                progress()
        return cache[v]

    def judged(est):
        return np.ones(len(est.rows), bool) if scope is None else est.rows.source == scope

    def excess(v):
        est = run(v)
        worst = est.rows.worst_margin_db[judged(est)]
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
        value, note = None, "no value in the range keeps the guard band"
    else:
        if increasing:
            edge = crossings[-1]
            value = edge[1] if excess(edge[1]) >= 0 else edge[0]
        else:
            edge = crossings[0]
            value = edge[0] if excess(edge[0]) >= 0 else edge[1]
        note = "" if monotone else (f"worst margin is not monotone in {key} ({len(crossings)} crossings in the scan); "
                                    "the value given is the boundary beyond which the rest of the range passes")
    binding = margin = None
    if value is not None:
        est = run(value)
        candidates = np.flatnonzero(judged(est) & np.isfinite(est.rows.worst_margin_db))
        if candidates.size:
            i = candidates[0]  # rows are sorted worst first
            r = est.rows
            binding = (f"{r.source[i]} n={r.harmonic[i]} at {r.frequency_hz[i] / 1e6:.6g} MHz, "
                       f"{r.worst_detector[i]}")
            margin = float(r.worst_margin_db[i])
    return Solution(
        key, scope, unit, None if value is None else float(value), margin,
        "larger values pass" if increasing else "smaller values pass", monotone, binding,
        tuple(scan), tuple(float(0.5 * (a + b)) for a, b in crossings), note,
    )


PLAN_COLUMNS = ("priority", "source", "harmonic", "frequency_hz", "band_lo_hz", "band_hi_hz", "cispr_band", "rbw_hz",
                "detectors", "expected", "limit", "margin_db", "note")


def plan_rows(est: Estimate, everything: bool = False) -> list[dict]:
    """The frequencies to measure first, worst margin first.

    Only rows over the limit or inside the guard band unless ``everything``.
    """
    r = est.rows
    detectors = est.board.limit.detectors
    keep = np.ones(len(r), bool) if everything else (r.flags["over-limit"] | r.flags["within-guard-band"])
    keep &= np.isfinite(r.worst_margin_db)
    bands = band_names(r.frequency_hz)
    rbw = resolution_bandwidth_hz(r.frequency_hz)
    out = []
    for priority, i in enumerate(np.flatnonzero(keep), start=1):
        det = r.worst_detector[i]
        present = [d for d in detectors if np.isfinite(r.limits[d][i])]
        notes = []
        if r.spread[i]:
            notes.append(f"spread band {r.band_lo_hz[i] / 1e6:.6g}-{r.band_hi_hz[i] / 1e6:.6g} MHz: peak scan "
                         f"across it at {rbw[i] / 1e3:g} kHz RBW, then {'/'.join(present)} at the maximum")
        elif "QP" in present:
            notes.append("peak prescan, then QP on the line")
        flags = r.flag_list(i)
        overlaps = [f.split(":", 1)[1] for f in flags if f.startswith("overlaps:")]
        if overlaps:
            notes.append(f"shares the RBW with {', '.join(overlaps)}: switch sources off to tell them apart")
        if "decoupling-insufficient" in flags:
            notes.append("rail current escapes the decoupling: check it with a current probe on the cable")
        if "near-anti-resonance" in flags:
            notes.append("near a decoupling anti-resonance: sensitive to part values")
        if "near-field" in flags:
            notes.append("near field at this distance: estimate less certain")
        out.append({
            "priority": priority,
            "source": str(r.source[i]),
            "harmonic": int(r.harmonic[i]),
            "frequency_hz": float(r.frequency_hz[i]),
            "band_lo_hz": float(r.band_lo_hz[i]),
            "band_hi_hz": float(r.band_hi_hz[i]),
            "cispr_band": str(bands[i]),
            "rbw_hz": float(rbw[i]),
            "detectors": "/".join(present),
            "expected": float(r.readings[det][i]),
            "limit": float(r.limits[det][i]),
            "margin_db": float(r.worst_margin_db[i]),
            "note": "; ".join(notes),
        })
    return out
