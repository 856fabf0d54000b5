"""Sources: what emits the harmonics.  One protocol, implemented by the trapezoidal clock and the pulse current.

A source has a fundamental frequency f0 (its unspread line spacing), an
optional spread-spectrum modulation, an optional shared ``reference`` (sources
naming the same reference add in amplitude), the rail it draws from, and the
coupling paths it drives.  What the pipeline asks of it:

- :meth:`Source.phasors`: the complex RMS harmonics of its own quantity (the
  voltage of a clock, the current of a pulse train) at n f0;
- :meth:`Source.per_unit`: the voltage and the current it puts into its paths
  per unit of that quantity (a clock's load current is V / Z_load; a current
  source has no voltage);
- :meth:`Source.envelope`: an upper bound of its harmonics, for plots.

Each source kind also declares its board-file keys and reads its own table
(:meth:`from_table`); :data:`SOURCE_SECTIONS` maps a board-file array
(``[[clock]]``, ``[[current]]``) to its class.  A new kind of source is one
class here (or in its own module) registered in that table.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, replace
from typing import ClassVar, Protocol

import numpy as np

from .schema import Key, TableReader
from .spread import Spread
from .waveform import (EDGE_FRACTION, Trapezoid, WaveformError, envelope, full_edge_time, harmonic_phasors,
                       load_current, triangle_pulse_phasors)

__all__ = ["Source", "Clock", "Current", "SOURCE_SECTIONS", "BoardContext"]


@dataclass(frozen=True)
class BoardContext:
    """What a table's reader may look up: the file, its folder, the limit, and the entries read so far."""

    file: str
    base_dir: object
    limit: object = None
    paths: dict | None = None
    rails: dict | None = None
    clocks: dict | None = None
    files: object = None


class Source(Protocol):
    """What the pipeline needs of a source (see the module docstring)."""

    section: ClassVar[str]
    name: str
    frequency_hz: float
    spread: Spread | None
    reference: str | None
    rail: str | None
    paths: tuple[str, ...]

    def phasors(self, n: np.ndarray) -> np.ndarray: ...

    def per_unit(self, frequency_hz) -> dict[str, np.ndarray]: ...

    def envelope(self, frequency_hz) -> np.ndarray | None: ...


def _path_names(r: TableReader, paths: dict) -> tuple[str, ...]:
    names = r.get("paths")
    for p in names:
        if p not in paths:
            close = difflib.get_close_matches(p, list(paths), n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise r.error("paths", f"no path named {p!r}; {hint}defined: {', '.join(paths) or 'none'}", names)
    if len(set(names)) != len(names):
        raise r.error("paths", "a path is listed twice", names)
    return tuple(names)


def _rail_name(r: TableReader, rails: dict, names, paths, required: bool = False) -> str | None:
    rail = r.get("rail")
    if rail is not None and rail not in rails:
        raise r.error("rail", f"no rail named {rail!r}; defined: {', '.join(rails) or 'none'}", rail)
    escaping = [p for p in names if paths[p].input == "escape"]
    if rail is None and (required or escaping):
        why = f"path {escaping[0]!r} reads the current escaping a rail" if escaping else "a current is drawn from a rail"
        raise r.error("rail", f"missing; {why}")
    return rail


_NAME = Key("name", "text", required=True)
_PATHS = Key("paths", "names", required=True, what="path names")
_RAIL = Key("rail", "text")
_SPREAD = Key("spread", "table", schema=Spread.KEYS)
_REFERENCE = Key("reference", "text")
_DUTY = Key("duty_cycle", "ratio", default=0.5, low=0.0, high=1.0, high_open=True)
_FREQUENCY = Key("frequency", "frequency", low=0.0, high=100e9)


@dataclass(frozen=True)
class Clock:
    """A clock output: its trapezoidal waveform, its load and the paths it couples through."""

    section: ClassVar[str] = "clock"
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, replace(_FREQUENCY, required=True), _DUTY,
        Key("rise_time", "time", required=True, low=0.0),
        Key("fall_time", "time", low=0.0),
        Key("edge", "choice", default="10-90", choices=tuple(EDGE_FRACTION)),
        Key("swing", "voltage", required=True, low=0.0),
        Key("load", "table", schema=(Key("resistance", "resistance", low=0.0),
                                     Key("capacitance", "capacitance", low=0.0))),
        _PATHS, _RAIL, _SPREAD, _REFERENCE,
    )

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

    def phasors(self, n: np.ndarray) -> np.ndarray:
        """RMS complex voltage harmonics (exact trapezoid series)."""
        return harmonic_phasors(self.wave, n) / np.sqrt(2)

    def per_unit(self, frequency_hz) -> dict[str, np.ndarray]:
        """Voltage 1 and the load current per volt, 1 / |Z_load| (NaN without a load)."""
        shape = np.shape(frequency_hz)
        if self.has_load:
            current = load_current(np.ones(shape), frequency_hz, self.load_resistance_ohm, self.load_capacitance_f)
        else:
            current = np.full(shape, np.nan)
        return {"voltage": np.ones(shape), "current": current}

    def envelope(self, frequency_hz) -> np.ndarray:
        """RMS bound of the voltage harmonics (Paul 2006, sec. 3.2)."""
        return envelope(self.wave, frequency_hz) / np.sqrt(2)

    @classmethod
    def from_table(cls, r: TableReader, ctx: BoardContext) -> Clock:
        frequency = r.get("frequency")
        swing = r.get("swing")
        duty = r.get("duty_cycle")
        edge = r.get("edge")
        rise = full_edge_time(r.get("rise_time"), edge)
        fall = full_edge_time(r.get("fall_time"), edge) if r.has("fall_time") else rise
        try:
            wave = Trapezoid(frequency, swing, duty, rise, fall)
        except WaveformError as err:
            raise r.error("rise_time", f"{err}; allowed: (rise + fall)/2 <= min(duty, 1 - duty) / frequency",
                          r.table.get("rise_time")) from None
        spread = Spread.from_table(r.reader("spread", Spread.KEYS), frequency) if r.has("spread") else None
        resistance = capacitance = None
        if r.has("load"):
            load = r.reader("load", r.keys["load"].schema)
            resistance, capacitance = load.get("resistance"), load.get("capacitance")
            if resistance is None and capacitance is None:
                raise r.error("load", "give a resistance, a capacitance or both (series R + C)")
        names = _path_names(r, ctx.paths)
        for p in names:
            if ctx.paths[p].input in ("current", "escape") and resistance is None and capacitance is None:
                raise r.error("load", f"missing; path {p!r} needs the clock current, which needs a load")
        rail = _rail_name(r, ctx.rails, names, ctx.paths)
        return cls(r.get("name"), wave, names, resistance, capacitance, spread, r.get("reference"), rail)


@dataclass(frozen=True)
class Current:
    """A train of triangular supply-pin current pulses drawn from a rail: an IC's core switching current."""

    section: ClassVar[str] = "current"
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, Key("clock", "text"), _FREQUENCY, _DUTY, _SPREAD, _REFERENCE,
        Key("peak", "current", required=True, low=0.0),
        Key("width", "time", required=True, low=0.0),
        Key("per", "choice", default="cycle", choices=("cycle", "edge")),
        _RAIL, _PATHS,
    )

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

    def phasors(self, n: np.ndarray) -> np.ndarray:
        """RMS complex current harmonics of the pulse train."""
        return triangle_pulse_phasors(self.peak_a, self.width_s, self.frequency_hz, n, self.per, self.duty) / np.sqrt(2)

    def per_unit(self, frequency_hz) -> dict[str, np.ndarray]:
        """Current 1 per ampere; a current source has no voltage (NaN)."""
        shape = np.shape(frequency_hz)
        return {"voltage": np.full(shape, np.nan), "current": np.ones(shape)}

    def envelope(self, frequency_hz) -> None:
        return None

    @classmethod
    def from_table(cls, r: TableReader, ctx: BoardContext) -> Current:
        if r.has("clock") == r.has("frequency"):
            raise r.error("clock", "give either clock (follow that clock's frequency and spread) or frequency")
        if r.has("clock"):
            clock_name = r.get("clock")
            if clock_name not in ctx.clocks:
                raise r.error("clock", f"no clock named {clock_name!r}; defined: {', '.join(ctx.clocks)}", clock_name)
            for own in ("duty_cycle", "spread", "reference"):
                if r.has(own):
                    raise r.error(own, "comes from the clock this current follows")
            clock = ctx.clocks[clock_name]
            frequency, duty, spread, reference = clock.frequency_hz, clock.wave.duty, clock.spread, clock.reference
        else:
            frequency = r.get("frequency")
            duty = r.get("duty_cycle")
            spread = Spread.from_table(r.reader("spread", Spread.KEYS), frequency) if r.has("spread") else None
            reference = r.get("reference")
        per = r.get("per")
        spacing = (min(duty, 1 - duty) if per == "edge" else 1.0) / frequency
        width = r.get("width", high=spacing)
        peak = r.get("peak")
        names = _path_names(r, ctx.paths)
        for p in names:
            if ctx.paths[p].input == "voltage":
                raise r.error("paths", f"path {p!r} reads a voltage; a current source has none", list(names))
        rail = _rail_name(r, ctx.rails, names, ctx.paths, required=True)
        return cls(r.get("name"), frequency, duty, peak, width, per, rail, names, spread, reference)


#: Board-file arrays of tables that define sources, and the class each entry becomes.
SOURCE_SECTIONS: dict[str, type] = {"clock": Clock, "current": Current}
