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
from dataclasses import dataclass, field
from pathlib import Path as FilePath

import numpy as np

from .coupling import CablePath, ConductedPath, LoopPath, Path, TransferPath
from .decoupling import (Capacitor, Measured, Plane, Rail, SeriesRL, TouchstoneError, read_impedance_table,
                         read_touchstone, target_impedance)
from .limits import Limit, LimitError, limit_from_mapping, load_limit
from .spread import MODES, PROFILES, Spread
from .units import DIMENSIONS, QuantityError, from_db, parse_quantity
from .waveform import EDGE_FRACTION, Trapezoid, WaveformError, full_edge_time

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["BoardError", "Clock", "Current", "Board", "load_board", "read_board_data", "board_from_mapping"]

TOP_KEYS = ("title", "guard_band", "limit", "max_frequency", "clock", "path", "rail", "current")
CLOCK_KEYS = (
    "name", "frequency", "duty_cycle", "rise_time", "fall_time", "edge", "swing", "load", "paths", "rail", "spread",
    "reference",
)
CURRENT_KEYS = ("name", "clock", "frequency", "duty_cycle", "spread", "reference", "peak", "width", "per", "rail",
                "paths")
RAIL_KEYS = ("name", "voltage", "supply_path", "target_impedance", "ripple", "transient_current", "part")
PART_KEYS = {
    "capacitor": ("kind", "capacitance", "esr", "esl", "mounting_inductance", "count"),
    "plane": ("kind", "area", "separation", "permittivity"),
    "regulator": ("kind", "resistance", "inductance"),
    "touchstone": ("kind", "file", "count"),
    "table": ("kind", "file", "count"),
}
SPREAD_KEYS = ("mode", "deviation", "rate", "profile")
PATH_KEYS = {
    "loop": ("name", "kind", "area", "distance", "ground_reflection"),
    "cable": ("name", "kind", "length", "drive", "ratio", "distance", "ground_reflection", "termination"),
    "transfer": ("name", "kind", "input", "gain", "distance", "termination"),
    "conducted": ("name", "kind", "lisn"),
}
PATHS_FOR = {"radiated": ("loop", "cable", "transfer"), "conducted": ("conducted", "transfer")}
#: LISN variants: the series resistor of CISPR 16-1-2's 50 uH network
LISNS = {"50uH+5ohm": 5.0, "50uH": 0.0}


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
    rail: str | None = None

    @property
    def has_load(self) -> bool:
        return self.load_resistance_ohm is not None or self.load_capacitance_f is not None

    @property
    def frequency_hz(self) -> float:
        return self.wave.frequency_hz


@dataclass(frozen=True)
class Current:
    """A train of triangular supply-pin current pulses drawn from a rail (SPEC 2.3)."""

    name: str
    frequency_hz: float
    duty: float
    peak_a: float
    width_s: float
    per: str
    rail: str
    paths: tuple[str, ...]
    spread: Spread | None = None
    reference: str | None = None


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
    rails: dict[str, Rail] = field(default_factory=dict)
    currents: tuple[Current, ...] = ()

    @property
    def sources(self) -> tuple[Clock | Current, ...]:
        return self.clocks + self.currents


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
    unit = "" if dimension == "ratio" else DIMENSIONS[dimension][1]
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
    if kind == "conducted":
        lisn = r.choice("lisn", tuple(LISNS), "50uH+5ohm")
        return ConductedPath(name, "voltage" if limit.unit == "dBuV" else "current", LISNS[lisn])
    if kind == "loop":
        return LoopPath(
            name,
            area_m2=r.quantity("area", "area", low=0, required=True),
            distance_m=distance,
            ground_reflection=r.boolean("ground_reflection", True),
        )
    if kind == "cable":
        drive = r.choice("drive", ("ratio", "escape"), "ratio")
        length = r.quantity("length", "length", low=0, required=True)
        reflection = r.boolean("ground_reflection", True)
        if drive == "ratio" and r.has("termination"):
            raise r.error("termination", "only with drive = 'escape'")
        raw = table.get("ratio")
        if raw is None and drive == "ratio":
            raise r.error("ratio", "missing; give the common-mode current relative to the source current, "
                          "e.g. '-30 dB' or 0.03")
        if raw is None:
            ratio = 1.0
        elif isinstance(raw, str) and raw.strip().endswith("dB"):
            ratio = float(from_db(r.quantity("ratio", "decibel", high=0, low=None)))
        else:
            ratio = r.quantity("ratio", "ratio", low=0, high=1)
        if drive == "escape":
            return CablePath(name, length, ratio, distance, reflection, _termination(r), drive="escape")
        return CablePath(name, length, ratio, distance, reflection)
    # transfer
    source = r.choice("input", ("voltage", "current", "escape"))
    if r.has("termination") and source != "escape":
        raise r.error("termination", "only with input = 'escape'")
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
    return TransferPath(name, source, freqs_a, np.array(gains), distance, _termination(r))


def _termination(r: _Reader) -> float:
    """Common-mode termination of an escape path; 150 ohm as in CISPR 16-1-2 / IEC 61000-4-6 networks."""
    return r.quantity("termination", "resistance", default=150.0, low=0)


def _path_names(r: _Reader, table: dict, paths: dict[str, Path]) -> tuple[str, ...]:
    names = table.get("paths")
    if not isinstance(names, list) or not names or not all(isinstance(p, str) for p in names):
        raise r.error("paths", "expected a non-empty list of path names", names)
    for p in names:
        if p not in paths:
            close = difflib.get_close_matches(p, list(paths), n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise r.error("paths", f"no path named {p!r}; {hint}defined: {', '.join(paths) or 'none'}", names)
    if len(set(names)) != len(names):
        raise r.error("paths", "a path is listed twice", names)
    return tuple(names)


def _rail_name(r: _Reader, rails: dict[str, Rail], names, paths, required: bool = False) -> str | None:
    rail = r.text("rail")
    if rail is not None and rail not in rails:
        raise r.error("rail", f"no rail named {rail!r}; defined: {', '.join(rails) or 'none'}", rail)
    escaping = [p for p in names if paths[p].input == "escape"]
    if rail is None and (required or escaping):
        why = f"path {escaping[0]!r} reads the current escaping a rail" if escaping else "a current is drawn from a rail"
        raise r.error("rail", f"missing; {why}")
    return rail


def _parse_clock(file: str, name: str, table: dict, paths: dict[str, Path], rails: dict[str, Rail]) -> Clock:
    r = _Reader(file, f"clock[{name}]", table, CLOCK_KEYS)
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
    names = _path_names(r, table, paths)
    for p in names:
        if paths[p].input in ("current", "escape") and resistance is None and capacitance is None:
            raise r.error("load", f"missing; path {p!r} needs the clock current, which needs a load")
    rail = _rail_name(r, rails, names, paths)
    return Clock(name, wave, names, resistance, capacitance, spread, r.text("reference"), rail)


def _parse_current(file: str, name: str, table: dict, paths, rails, clocks: dict[str, Clock]) -> Current:
    r = _Reader(file, f"current[{name}]", table, CURRENT_KEYS)
    if r.has("clock") == r.has("frequency"):
        raise r.error("clock", "give either clock (follow that clock's frequency and spread) or frequency")
    if r.has("clock"):
        clock_name = r.text("clock")
        if clock_name not in clocks:
            raise r.error("clock", f"no clock named {clock_name!r}; defined: {', '.join(clocks)}", clock_name)
        for own in ("duty_cycle", "spread", "reference"):
            if r.has(own):
                raise r.error(own, "comes from the clock this current follows")
        clock = clocks[clock_name]
        frequency, duty, spread, reference = clock.frequency_hz, clock.wave.duty, clock.spread, clock.reference
    else:
        frequency = r.quantity("frequency", "frequency", low=0, high=100e9)
        duty = r.quantity("duty_cycle", "ratio", default=0.5, low=0, high=1, high_open=True)
        spread = _parse_spread(file, r, table, frequency) if r.has("spread") else None
        reference = r.text("reference")
    per = r.choice("per", ("cycle", "edge"), "cycle")
    spacing = (min(duty, 1 - duty) if per == "edge" else 1.0) / frequency
    width = r.quantity("width", "time", low=0, high=spacing, required=True)
    peak = r.quantity("peak", "current", low=0, required=True)
    names = _path_names(r, table, paths)
    for p in names:
        if paths[p].input == "voltage":
            raise r.error("paths", f"path {p!r} reads a voltage; a current source has none", list(names))
    rail = _rail_name(r, rails, names, paths, required=True)
    return Current(name, frequency, duty, peak, width, per, rail, names, spread, reference)


def _parse_rail(file: str, name: str, table: dict, base_dir: FilePath) -> Rail:
    r = _Reader(file, f"rail[{name}]", table, RAIL_KEYS)
    voltage = r.quantity("voltage", "voltage", low=0, required=True)
    supply, bead = SeriesRL(), None
    if r.has("supply_path"):
        s = _Reader(file, r.sub("supply_path"), table["supply_path"], ("inductance", "resistance", "bead"))
        supply = SeriesRL(s.quantity("resistance", "resistance", 0.0, low=0, low_open=False),
                          s.quantity("inductance", "inductance", 0.0, low=0, low_open=False))
        if s.has("bead"):
            b = _Reader(file, s.sub("bead"), table["supply_path"]["bead"], ("resistance", "inductance", "table"))
            if b.has("table"):
                bead = Measured(*_measured(b, "table", base_dir, read_impedance_table))
            else:
                bead = SeriesRL(b.quantity("resistance", "resistance", 0.0, low=0, low_open=False),
                                b.quantity("inductance", "inductance", 0.0, low=0, low_open=False))
    target = None
    if r.has("target_impedance"):
        if r.has("ripple") or r.has("transient_current"):
            raise r.error("target_impedance", "give target_impedance, or ripple and transient_current, not both")
        target = r.quantity("target_impedance", "resistance", low=0)
    elif r.has("ripple") or r.has("transient_current"):
        target = target_impedance(voltage, r.quantity("ripple", "ratio", low=0, high=1, required=True),
                                  r.quantity("transient_current", "current", low=0, required=True))
    parts_raw = table.get("part")
    if not isinstance(parts_raw, list) or not parts_raw or not all(isinstance(t, dict) for t in parts_raw):
        raise r.error("part", "expected at least one [[rail.part]] table")
    parts = tuple(_parse_part(file, f"{r.sub('part')}[{k}]", t, base_dir) for k, t in enumerate(parts_raw))
    return Rail(name, voltage, parts, supply, bead, target)


def _measured(r: _Reader, key: str, base_dir: FilePath, reader) -> tuple:
    path = base_dir / r.text(key, required=True)
    try:
        return reader(path)
    except TouchstoneError as err:
        raise r.error(key, str(err), str(path)) from None


def _parse_part(file: str, key: str, table: dict, base_dir: FilePath):
    kind = table.get("kind") if isinstance(table, dict) else None
    if kind not in PART_KEYS:
        raise BoardError(file, f"{key}.kind", f"allowed: {', '.join(PART_KEYS)}", kind)
    r = _Reader(file, key, table, PART_KEYS[kind])
    count = table.get("count", 1)
    if not (isinstance(count, int) and not isinstance(count, bool) and 1 <= count <= 10000):
        raise r.error("count", "expected a whole number from 1 to 10000", count)
    if kind == "capacitor":
        part = Capacitor(r.quantity("capacitance", "capacitance", low=0, required=True),
                         r.quantity("esr", "resistance", 0.0, low=0, low_open=False),
                         r.quantity("esl", "inductance", 0.0, low=0, low_open=False),
                         r.quantity("mounting_inductance", "inductance", 0.0, low=0, low_open=False), count)
    elif kind == "plane":
        permittivity = table.get("permittivity")
        if not isinstance(permittivity, (int, float)) or isinstance(permittivity, bool) or not 1 <= permittivity <= 100:
            raise r.error("permittivity", "expected a relative permittivity from 1 to 100", permittivity)
        part = Plane(r.quantity("area", "area", low=0, required=True),
                     r.quantity("separation", "length", low=0, required=True), float(permittivity))
    elif kind == "regulator":
        part = SeriesRL(r.quantity("resistance", "resistance", 0.0, low=0, low_open=False),
                        r.quantity("inductance", "inductance", 0.0, low=0, low_open=False))
        if part.resistance_ohm == 0 and part.inductance_h == 0:
            raise r.error("resistance", "give the regulator's output resistance and/or inductance (> 0)")
    else:
        reader = read_touchstone if kind == "touchstone" else read_impedance_table
        f, z = _measured(r, "file", base_dir, reader)
        part = Measured(f, z, count, source=str(table["file"]))
    return kind, part


def _parse_spread(file: str, owner: _Reader, table: dict, frequency_hz: float) -> Spread:
    r = _Reader(file, owner.sub("spread"), table["spread"], SPREAD_KEYS)
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
    if "limit" not in data:
        raise top.error("limit", "missing; name a bundled limit (see `emispec limits`), a file, or an inline table")
    limit = _parse_limit(file, data["limit"], base_dir)
    rails = {name: _parse_rail(file, name, table, base_dir) for name, table in _named_tables(file, data, "rail")}
    paths = {name: _parse_path(file, name, table, limit) for name, table in _named_tables(file, data, "path")}
    clocks = {name: _parse_clock(file, name, table, paths, rails)
              for name, table in _named_tables(file, data, "clock")}
    currents = tuple(_parse_current(file, name, table, paths, rails, clocks)
                     for name, table in _named_tables(file, data, "current"))
    if not clocks and not currents:
        raise top.error("clock", "no source defined; add at least one [[clock]] or [[current]] table")
    clash = set(clocks) & {c.name for c in currents}
    if clash:
        raise BoardError(file, f"current[{sorted(clash)[0]}].name", "a clock has this name; names must be unique")
    return Board(
        title=top.text("title", default=FilePath(file).stem),
        file=file,
        sha256=sha256,
        guard_band_db=top.quantity("guard_band", "decibel", default=0.0, low=0, high=60, low_open=False),
        limit=limit,
        clocks=tuple(clocks.values()),
        paths=paths,
        max_frequency_hz=top.quantity("max_frequency", "frequency", low=0),
        rails=rails,
        currents=currents,
    )


def read_board_data(path: str | FilePath) -> tuple[dict, str, FilePath, str]:
    """The parsed board file before validation: (data, file name, its folder, sha256 of its bytes)."""
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
    return data, file, path.parent, hashlib.sha256(raw).hexdigest()


def load_board(path: str | FilePath) -> Board:
    """Read and validate a board file.

    Raises
    ------
    BoardError
        Anything wrong with the file, one line naming the file and key.
    """
    data, file, base_dir, sha256 = read_board_data(path)
    return board_from_mapping(data, file, base_dir, sha256)


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
