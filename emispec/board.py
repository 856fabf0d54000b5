"""Board file (TOML) -> model objects, with one-line errors naming file and key.

This is the edge where quantities with units become SI floats.  Every
problem raises :class:`BoardError` carrying the file, the key path
(``clock[cpu_clk].rise_time``), the offending value and what is allowed.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import sys
from dataclasses import dataclass
from pathlib import Path as FilePath

import numpy as np

from .coupling import CablePath, LoopPath, Path, TransferPath
from .limits import Limit, LimitError, limit_from_mapping, load_limit
from .spread import MODES, PROFILES, Spread
from .units import QuantityError, from_db, parse_quantity
from .waveform import EDGE_FRACTION, Trapezoid, WaveformError, full_edge_time

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["BoardError", "Clock", "Board", "load_board", "board_from_mapping"]

TOP_KEYS = ("title", "guard_band", "limit", "max_frequency", "clock", "path", "rail", "current")
CLOCK_KEYS = (
    "name", "frequency", "duty_cycle", "rise_time", "fall_time", "edge", "swing", "load", "paths", "rail", "spread",
    "reference",
)
SPREAD_KEYS = ("mode", "deviation", "rate", "profile")
PATH_KEYS = {
    "loop": ("name", "kind", "area", "distance", "ground_reflection"),
    "cable": ("name", "kind", "length", "drive", "ratio", "distance", "ground_reflection", "termination"),
    "transfer": ("name", "kind", "input", "gain", "distance"),
    "conducted": ("name", "kind"),
}
PATHS_FOR = {"radiated": ("loop", "cable", "transfer"), "conducted": ("conducted", "transfer")}
NOT_YET = "is not supported yet: rails, decoupling and escaping supply current come with the decoupling model"


class BoardError(ValueError):
    """A board file problem: file, key path, value and what is allowed."""

    def __init__(self, file: str, key: str, problem: str, value: object = None):
        self.file, self.key, self.value, self.problem = file, key, value, problem
        shown = "" if value is None else f" = {_short(value)}"
        super().__init__(f"{file}: {key}{shown}: {problem}")


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


@dataclass(frozen=True)
class Clock:
    """A clock output: its waveform, its load and the paths it couples through."""

    name: str
    wave: Trapezoid
    paths: tuple[str, ...]
    load_resistance_ohm: float | None = None
    load_capacitance_f: float | None = None
    spread: Spread | None = None
    reference: str | None = None

    @property
    def has_load(self) -> bool:
        return self.load_resistance_ohm is not None or self.load_capacitance_f is not None


@dataclass(frozen=True)
class Board:
    """Everything an estimate needs, in SI units."""

    title: str
    file: str
    sha256: str
    guard_band_db: float
    limit: Limit
    clocks: tuple[Clock, ...]
    paths: dict[str, Path]
    max_frequency_hz: float | None = None


class _Reader:
    """Reads one table of the board file, turning every problem into a BoardError."""

    def __init__(self, file: str, key: str, table: dict, allowed: tuple[str, ...]):
        self.file, self.key, self.table = file, key, table
        if not isinstance(table, dict):
            raise BoardError(file, key, "expected a table")
        for name in table:
            if name not in allowed:
                close = difflib.get_close_matches(name, allowed, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                raise BoardError(file, self.sub(name), f"unknown key; {hint}allowed: {', '.join(allowed)}")

    def sub(self, name: str) -> str:
        return f"{self.key}.{name}" if self.key else name

    def error(self, name: str, problem: str, value: object = None) -> BoardError:
        return BoardError(self.file, self.sub(name), problem, value)

    def has(self, name: str) -> bool:
        return name in self.table

    def quantity(self, name, dimension, default=None, low=None, high=None, low_open=True, required=False,
                 high_open=False):
        if name not in self.table:
            if required:
                raise self.error(name, f"missing; give a {dimension}" + _range(low, high, low_open, dimension,
                                                                               high_open))
            return default
        raw = self.table[name]
        try:
            value = parse_quantity(raw, dimension)
        except QuantityError as err:
            raise self.error(name, str(err) + _range(low, high, low_open, dimension, high_open), raw) from None
        too_low = low is not None and (value <= low if low_open else value < low)
        too_high = high is not None and (value >= high if high_open else value > high)
        if too_low or too_high:
            raise self.error(name, "out of range" + _range(low, high, low_open, dimension, high_open), raw)
        return value

    def choice(self, name, allowed, default=None):
        value = self.table.get(name, default)
        if value not in allowed:
            raise self.error(name, f"allowed: {', '.join(map(str, allowed))}", value)
        return value

    def text(self, name, default=None, required=False):
        if name not in self.table:
            if required:
                raise self.error(name, "missing; give a name")
            return default
        value = self.table[name]
        if not isinstance(value, str) or not value.strip():
            raise self.error(name, "expected a non-empty string", value)
        return value

    def boolean(self, name, default):
        value = self.table.get(name, default)
        if not isinstance(value, bool):
            raise self.error(name, "expected true or false", value)
        return value


def _range(low, high, low_open, dimension, high_open=False) -> str:
    if low is None and high is None:
        return ""
    unit = {"frequency": "Hz", "time": "s", "voltage": "V", "current": "A", "resistance": "ohm",
            "capacitance": "F", "length": "m", "area": "m2", "decibel": "dB", "ratio": ""}.get(dimension, "")
    lower = "" if low is None else f"{'>' if low_open else '>='} {low:g} {unit}".rstrip()
    upper = "" if high is None else f"{'<' if high_open else '<='} {high:g} {unit}".rstrip()
    return "; allowed: " + " and ".join(part for part in (lower, upper) if part)


def _named_tables(file: str, data: dict, kind: str) -> list[tuple[str, dict]]:
    tables = data.get(kind, [])
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise BoardError(file, kind, f"expected an array of tables, written [[{kind}]]")
    named, seen = [], set()
    for index, table in enumerate(tables):
        name = table.get("name")
        if not isinstance(name, str) or not name.strip():
            raise BoardError(file, f"{kind}[{index}].name", "missing; every entry needs a unique name", name)
        if name in seen:
            raise BoardError(file, f"{kind}[{name}].name", f"duplicate name; each {kind} name must be unique", name)
        seen.add(name)
        named.append((name, table))
    return named


def _parse_limit(file: str, raw: object, base_dir: FilePath) -> Limit:
    try:
        if isinstance(raw, str):
            return load_limit(raw, base_dir)
        if isinstance(raw, dict):
            return limit_from_mapping(raw, "inline", file, base_dir)
    except LimitError as err:
        if isinstance(raw, dict):
            raise BoardError(file, f"limit.{err.key}", err.problem) from None
        problem = err.problem if err.key == "limit" else str(err)
        raise BoardError(file, "limit", problem, raw) from None
    raise BoardError(file, "limit", "expected a bundled limit name, a file path or an inline table", raw)


def _parse_path(file: str, name: str, table: dict, limit: Limit) -> Path:
    key = f"path[{name}]"
    if "kind" not in table:
        raise BoardError(file, f"{key}.kind", f"missing; allowed: {', '.join(PATH_KEYS)}")
    kind = table["kind"]
    if kind not in PATH_KEYS:
        raise BoardError(file, f"{key}.kind", f"allowed: {', '.join(PATH_KEYS)}", kind)
    r = _Reader(file, key, table, PATH_KEYS[kind])
    if kind == "conducted":
        raise r.error("kind", f"'conducted' {NOT_YET}", kind)
    if kind not in PATHS_FOR[limit.measurement]:
        raise r.error(
            "kind",
            f"a {limit.measurement} limit ({limit.name}) takes {', '.join(PATHS_FOR[limit.measurement])} paths",
            kind,
        )
    distance = None
    if r.has("distance"):
        if limit.measurement != "radiated":
            raise r.error("distance", "only radiated paths have a distance")
        distance = r.quantity("distance", "length", low=0)
    if kind == "loop":
        return LoopPath(
            name,
            area_m2=r.quantity("area", "area", low=0, required=True),
            distance_m=distance,
            ground_reflection=r.boolean("ground_reflection", True),
        )
    if kind == "cable":
        drive = r.choice("drive", ("ratio", "escape"), "ratio")
        if drive == "escape":
            raise r.error("drive", f"'escape' {NOT_YET}", drive)
        if r.has("termination"):
            raise r.error("termination", "only applies with drive = 'escape', which " + NOT_YET)
        raw = table.get("ratio")
        if raw is None:
            raise r.error("ratio", "missing; give the common-mode current relative to the source current, "
                          "e.g. '-30 dB' or 0.03")
        if isinstance(raw, str) and raw.strip().endswith("dB"):
            ratio = float(from_db(r.quantity("ratio", "decibel", high=0, low=None)))
        else:
            ratio = r.quantity("ratio", "ratio", low=0, high=1)
        return CablePath(
            name,
            length_m=r.quantity("length", "length", low=0, required=True),
            ratio=ratio,
            distance_m=distance,
            ground_reflection=r.boolean("ground_reflection", True),
        )
    # transfer
    source = r.choice("input", ("voltage", "current", "escape"))
    if source == "escape":
        raise r.error("input", f"'escape' {NOT_YET}", source)
    gain = table.get("gain")
    allowed = 'a list of [frequency, dB] pairs in ascending frequency, e.g. [["1 MHz", -20.0], ["1 GHz", -20.0]]'
    if not isinstance(gain, list) or not gain:
        raise r.error("gain", f"expected {allowed}", gain)
    freqs, gains = [], []
    for k, point in enumerate(gain):
        if not (isinstance(point, list) and len(point) == 2):
            raise r.error(f"gain[{k}]", f"expected {allowed}", point)
        try:
            freqs.append(parse_quantity(point[0], "frequency"))
            gains.append(parse_quantity(point[1], "decibel"))
        except QuantityError as err:
            raise r.error(f"gain[{k}]", str(err), point) from None
    freqs_a = np.array(freqs)
    if np.any(freqs_a <= 0) or np.any(np.diff(freqs_a) <= 0):
        raise r.error("gain", "frequencies must be > 0 Hz and strictly ascending")
    return TransferPath(name, source, freqs_a, np.array(gains), distance)


def _parse_clock(file: str, name: str, table: dict, paths: dict[str, Path]) -> Clock:
    r = _Reader(file, f"clock[{name}]", table, CLOCK_KEYS)
    if r.has("rail"):
        raise r.error("rail", NOT_YET)
    frequency = r.quantity("frequency", "frequency", low=0, high=100e9, required=True)
    swing = r.quantity("swing", "voltage", low=0, required=True)
    duty = r.quantity("duty_cycle", "ratio", default=0.5, low=0, high=1, high_open=True)
    edge = r.choice("edge", tuple(EDGE_FRACTION), "10-90")
    rise = full_edge_time(r.quantity("rise_time", "time", low=0, required=True), edge)
    fall = full_edge_time(r.quantity("fall_time", "time", low=0), edge) if r.has("fall_time") else rise
    try:
        wave = Trapezoid(frequency, swing, duty, rise, fall)
    except WaveformError as err:
        raise r.error("rise_time", f"{err}; allowed: (rise + fall)/2 <= min(duty, 1 - duty) / frequency",
                      table.get("rise_time")) from None
    spread = _parse_spread(file, r, table, frequency) if r.has("spread") else None
    resistance = capacitance = None
    if r.has("load"):
        load = _Reader(file, r.sub("load"), table["load"], ("resistance", "capacitance"))
        resistance = load.quantity("resistance", "resistance", low=0)
        capacitance = load.quantity("capacitance", "capacitance", low=0)
        if resistance is None and capacitance is None:
            raise r.error("load", "give a resistance, a capacitance or both (series R + C)")
    names = table.get("paths")
    if not isinstance(names, list) or not names or not all(isinstance(p, str) for p in names):
        raise r.error("paths", "expected a non-empty list of path names", names)
    for p in names:
        if p not in paths:
            close = difflib.get_close_matches(p, list(paths), n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise r.error("paths", f"no path named {p!r}; {hint}defined: {', '.join(paths) or 'none'}", names)
        if paths[p].input == "current" and resistance is None and capacitance is None:
            raise r.error("load", f"missing; path {p!r} needs the clock current, which needs a load")
    if len(set(names)) != len(names):
        raise r.error("paths", "a path is listed twice", names)
    reference = r.text("reference")
    return Clock(name, wave, tuple(names), resistance, capacitance, spread, reference)


def _parse_spread(file: str, clock: _Reader, table: dict, frequency_hz: float) -> Spread:
    r = _Reader(file, clock.sub("spread"), table["spread"], SPREAD_KEYS)
    for key in ("mode", "deviation", "rate"):
        if not r.has(key):
            raise r.error(key, "missing; a spread needs mode, deviation and rate (profile defaults to triangle)")
    return Spread(
        mode=r.choice("mode", MODES),
        deviation=r.quantity("deviation", "ratio", low=0, high=0.1),
        rate_hz=r.quantity("rate", "frequency", low=0, high=frequency_hz / 100),
        profile=r.choice("profile", PROFILES, "triangle"),
    )


def board_from_mapping(data: dict, file: str = "<board>", base_dir: FilePath | None = None, sha256: str = "") -> Board:
    """Build a :class:`Board` from a parsed board table."""
    base_dir = base_dir or FilePath.cwd()
    top = _Reader(file, "", data, TOP_KEYS)
    for later in ("rail", "current"):
        if top.has(later):
            raise top.error(later, NOT_YET)
    if "limit" not in data:
        raise top.error("limit", "missing; name a bundled limit (see `emispec limits`), a file, or an inline table")
    limit = _parse_limit(file, data["limit"], base_dir)
    paths = {name: _parse_path(file, name, table, limit) for name, table in _named_tables(file, data, "path")}
    clocks = tuple(_parse_clock(file, name, table, paths) for name, table in _named_tables(file, data, "clock"))
    if not clocks:
        raise top.error("clock", "no clock defined; add at least one [[clock]] table")
    return Board(
        title=top.text("title", default=FilePath(file).stem),
        file=file,
        sha256=sha256,
        guard_band_db=top.quantity("guard_band", "decibel", default=0.0, low=0, high=60, low_open=False),
        limit=limit,
        clocks=clocks,
        paths=paths,
        max_frequency_hz=top.quantity("max_frequency", "frequency", low=0),
    )


def load_board(path: str | FilePath) -> Board:
    """Read and validate a board file.

    Raises
    ------
    BoardError
        Anything wrong with the file, one line naming the file and key.
    """
    path = FilePath(path)
    file = str(path)
    try:
        raw = path.read_bytes()
    except OSError as err:
        raise BoardError(file, "file", f"cannot read the board file ({err.strerror})") from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise BoardError(file, "toml", f"not valid TOML: {err}") from None
    _refuse_non_finite(file, data, "")
    return board_from_mapping(data, file, path.parent, hashlib.sha256(raw).hexdigest())


def _refuse_non_finite(file: str, node: object, key: str) -> None:
    if isinstance(node, float) and not math.isfinite(node):
        raise BoardError(file, key or "value", "NaN and infinity are not allowed", node)
    if isinstance(node, dict):
        for k, v in node.items():
            _refuse_non_finite(file, v, f"{key}.{k}" if key else k)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            label = v.get("name") if isinstance(v, dict) and isinstance(v.get("name"), str) else i
            _refuse_non_finite(file, v, f"{key}[{label}]")
