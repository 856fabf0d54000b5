"""Emission limit lines: points in (frequency, level), linear in dB over log f.

Standards write sloped segments as levels that fall linearly with the
logarithm of frequency (e.g. CISPR 32 Table A.10, 66 to 56 dBuV from 0.15 to
0.5 MHz), and steps as two levels at one frequency of which the lower
applies at the boundary (47 CFR 15.107(a) note, 15.109(c)).  A limit bundles
one line per detector with its unit, measurement kind and source.

References
----------
CISPR 32:2015, Annex A; 47 CFR 15.107, 15.109, 15.35(b), 15.33(b).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from .errors import InputError
from .readers import FileError, read_toml, read_two_column_csv
from .receiver import DETECTORS
from .trace import Trace
from .units import QuantityError, parse_quantity

__all__ = [
    "DETECTORS",
    "UNITS",
    "LimitError",
    "limit_line",
    "Limit",
    "upper_frequency_hz",
    "bundled_limits",
    "load_limit",
    "limit_from_mapping",
]

UNITS = ("dBuV/m", "dBuV", "dBuA")
MEASUREMENTS = ("radiated", "conducted")


class LimitError(InputError):
    """A malformed limit file; the message names file, key and what is allowed."""

    def __init__(self, file: str, key: str, problem: str):
        self.file, self.key, self.problem = file, key, problem
        super().__init__(f"{file}: {key}: {problem}".replace("\n", " "))

    def __reduce__(self):  # raised in a pool worker, it must reach the command line whole
        return type(self), (self.file, self.key, self.problem)


def limit_line(detector: str, frequency_hz, level_db, unit: str = "dB", origin: str = "") -> Trace:
    """One detector's limit as a :class:`Trace`: NaN outside its span, the lower level at a step."""
    return Trace(np.asarray(frequency_hz, dtype=float), np.asarray(level_db, dtype=float), unit, detector, "nan",
                 origin)


@dataclass(frozen=True)
class Limit:
    """A limit: detector lines plus what they are measured in."""

    name: str
    title: str
    source: str
    measurement: str
    unit: str
    lines: dict[str, Trace]
    distance_m: float | None = None
    upper_frequency: str | None = None
    path: str | None = field(default=None, compare=False)

    @property
    def detectors(self) -> tuple[str, ...]:
        return tuple(self.lines)

    @property
    def span_hz(self) -> tuple[float, float]:
        spans = [line.span_hz for line in self.lines.values()]
        return min(s[0] for s in spans), max(s[1] for s in spans)

    def levels(self, frequency_hz) -> dict[str, np.ndarray]:
        """Each detector's level at the frequencies (NaN where it does not apply)."""
        return {det: line.at(frequency_hz) for det, line in self.lines.items()}


def upper_frequency_hz(rule: str | None, highest_internal_hz: float) -> float:
    """Highest frequency a standard requires measuring, from the highest internal frequency.

    Parameters
    ----------
    rule : {"fcc-15.33", "cispr32"} or None
        None means no rule: infinity.
    highest_internal_hz : float
        Highest frequency generated or used in the device [Hz].

    References
    ----------
    47 CFR 15.33(b)(1) table; CISPR 32:2015 Table 1 (Fx rule, recalled from
    memory, see tests).
    """
    if rule is None:
        return np.inf
    if rule not in _UPPER_RULES:
        raise ValueError(f"unknown upper-frequency rule {rule!r}")
    below_30mhz_rule, cap_hz = _UPPER_RULES[rule]
    if highest_internal_hz < below_30mhz_rule:
        return 30e6
    for fx_up_to, measure_up_to in _UPPER_STEPS:
        if highest_internal_hz <= fx_up_to:
            return measure_up_to
    return min(5 * highest_internal_hz, cap_hz)


# (highest internal frequency up to, measure up to): the same steps in both documents
_UPPER_STEPS = ((108e6, 1e9), (500e6, 2e9), (1e9, 5e9))
# rule -> (below this highest frequency measure to 30 MHz only, cap on 5 x Fx above 1 GHz)
_UPPER_RULES = {"fcc-15.33": (1.705e6, 40e9), "cispr32": (0.0, 6e9)}
UPPER_FREQUENCY_RULES = tuple(_UPPER_RULES)


def _limits_dir():
    return resources.files("emispec.limit_files")


def bundled_limits() -> dict[str, Path]:
    """Names of the bundled limits and their files."""
    folder = _limits_dir()
    return {
        Path(str(item)).stem: Path(str(item))
        for item in sorted(folder.iterdir(), key=lambda p: p.name)
        if item.name.endswith(".toml")
    }


def _points(file: str, key: str, value, base_dir: Path | None) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(value, str):  # a two-column CSV beside the limit file
        return _read_csv_points((base_dir or Path.cwd()) / value, key)[:2]
    allowed = 'a list of [frequency, level] pairs such as [["30 MHz", 40.0], ["230 MHz", 40.0]]'
    if not isinstance(value, list) or len(value) < 2:
        raise LimitError(file, key, f"expected {allowed}")
    freqs, levels = [], []
    for k, point in enumerate(value):
        if not (isinstance(point, list) and len(point) == 2):
            raise LimitError(file, f"{key}[{k}]", f"expected {allowed}")
        try:
            freqs.append(parse_quantity(point[0], "frequency"))
            levels.append(parse_quantity(point[1], "decibel"))
        except QuantityError as err:
            raise LimitError(file, f"{key}[{k}]", str(err)) from None
    return _checked(file, key, np.array(freqs), np.array(levels))


#: Plausible limit levels [dB of the limit's unit]: emission limits lie far inside this range.
LEVEL_RANGE_DB = (-100.0, 300.0)


def _checked(file, key, freqs, levels):
    if np.any(freqs <= 0) or np.any(freqs > 1e12):
        raise LimitError(file, key, "frequencies must be > 0 Hz and <= 1e+12 Hz")
    lo, hi = LEVEL_RANGE_DB
    if np.any(levels < lo) or np.any(levels > hi):
        raise LimitError(file, key, f"levels must be from {lo:g} dB to {hi:g} dB")
    if np.any(np.diff(freqs) < 0):
        raise LimitError(file, key, "frequencies must be in ascending order (a step repeats one frequency)")
    if np.any((np.diff(freqs) == 0)[1:] & (np.diff(freqs) == 0)[:-1]):
        raise LimitError(file, key, "a frequency may appear at most twice (one step)")
    if freqs[0] == freqs[-1]:
        raise LimitError(file, key, "a line must span a frequency range")
    return freqs, levels


def _read_csv_points(path: Path, key: str = "limit"):
    """Two-column CSV (frequency, level) with ``# key: value`` metadata, checked as a limit line."""
    try:
        f, y, meta = read_two_column_csv(path, key)
    except FileError as err:
        raise LimitError(err.file, err.where, err.problem) from None
    f, y = _checked(str(path), key, f, y)
    return f, y, meta


def _choice(file, key, value, allowed):
    if value not in allowed:
        raise LimitError(file, key, f"{value!r} is not allowed; allowed: {', '.join(allowed)}")
    return value


def limit_from_mapping(data: dict, name: str, file: str, base_dir: Path | None = None) -> Limit:
    """Build a :class:`Limit` from a parsed limit table (file or inline)."""
    known = {"title", "source", "measurement", "distance", "unit", "lines", "upper_frequency"}
    for key in data:
        if key not in known:
            raise LimitError(file, key, f"unknown key; allowed: {', '.join(sorted(known))}")
    for key in ("measurement", "unit", "lines"):
        if key not in data:
            raise LimitError(file, key, "missing")
    measurement = _choice(file, "measurement", data["measurement"], MEASUREMENTS)
    unit = _choice(file, "unit", data["unit"], UNITS)
    distance = None
    if measurement == "radiated":
        if "distance" not in data:
            raise LimitError(file, "distance", "missing (a radiated limit states its distance)")
        try:
            distance = parse_quantity(data["distance"], "length")
        except QuantityError as err:
            raise LimitError(file, "distance", str(err)) from None
        if not distance > 0:
            raise LimitError(file, "distance", "must be > 0 m")
        if unit != "dBuV/m":
            raise LimitError(file, "unit", "a radiated limit is in dBuV/m")
    elif "distance" in data:
        raise LimitError(file, "distance", "only a radiated limit has a distance")
    elif unit == "dBuV/m":
        raise LimitError(file, "unit", "a conducted limit is in dBuV or dBuA")
    upper = data.get("upper_frequency")
    if upper is not None:
        _choice(file, "upper_frequency", upper, UPPER_FREQUENCY_RULES)
    if not isinstance(data["lines"], dict) or not data["lines"]:
        raise LimitError(file, "lines", f"expected a table of detector lines ({', '.join(DETECTORS)})")
    lines = {}
    for det, points in data["lines"].items():
        _choice(file, f"lines.{det}", det, tuple(DETECTORS))
        f, y = _points(file, f"lines.{det}", points, base_dir)
        if det == "QP" and f[-1] > 1e9 * (1 + 1e-12):
            raise LimitError(file, f"lines.{det}", "a QP line ends at or below 1 GHz (CISPR 16-1-1 defines no "
                             "quasi-peak detector above 1 GHz); use AV and PK lines above")
        lines[det] = limit_line(det, f, y, unit, file)
    return Limit(
        name=name,
        title=str(data.get("title", name)),
        source=str(data.get("source", "not stated")),
        measurement=measurement,
        unit=unit,
        lines=lines,
        distance_m=distance,
        upper_frequency=upper,
        path=file,
    )


def load_limit(spec: str, base_dir: Path | None = None) -> Limit:
    """Load a limit by bundled name, or from a TOML or CSV file path.

    Parameters
    ----------
    spec : str
        A bundled name (see :func:`bundled_limits`) or a path, relative to
        ``base_dir`` when given.
    """
    bundled = bundled_limits()
    if spec in bundled:
        path = bundled[spec]
    else:
        path = Path(spec)
        if base_dir is not None and not path.is_absolute():
            path = base_dir / path
        try:
            os.stat(path)
        except FileNotFoundError:
            what = "a symlink to a missing file" if os.path.islink(path) else "no such file"
            raise LimitError(
                str(path), "limit", f"{what} and no bundled limit {spec!r}; bundled: {', '.join(bundled)}"
            ) from None
        except OSError as err:  # a symlink loop, a name too long, no permission
            raise LimitError(str(path), "limit", f"cannot read the limit ({err.strerror or err})") from None
    file = str(path)
    if path.suffix.lower() == ".csv":
        f, y, meta = _read_csv_points(path)
        data = {k: v for k, v in meta.items() if k != "detector"}
        data["lines"] = {meta.get("detector", "QP"): [[a, b] for a, b in zip(f.tolist(), y.tolist())]}
        return limit_from_mapping(data, path.stem, file)
    try:
        data, _ = read_toml(path, "limit")
    except FileError as err:
        raise LimitError(err.file, err.where, err.problem) from None
    return limit_from_mapping(data, path.stem, file, path.parent)
