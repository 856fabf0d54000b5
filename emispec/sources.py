"""Sources: what emits the harmonics.  One protocol, implemented by the trapezoidal clock, the clock read from a
capture and the pulse current.

A source has a fundamental frequency f0 (its unspread line spacing), an
optional spread-spectrum modulation, an optional shared ``reference`` (sources
naming the same reference add in amplitude), the rail it draws from, and the
coupling paths it drives.  It puts three quantities into its paths, each a
harmonic series at n f0 (complex RMS, NaN where it has none):

- ``voltage``: a clock's output voltage;
- ``current``: the current in the loop it drives (a clock's load current, a
  pulse train's current);
- ``rail``: the current it draws from its supply rail (a clock's charging
  current, the positive part of its load current; a pulse train's current).

What the pipeline asks of it: :meth:`Source.harmonics` (the levels the margins
use), :meth:`Source.exact` (the exact series), :meth:`Source.bounds` (an upper
bound of each quantity at any frequency, with no spectral nulls) and ``mode``:
``"envelope"`` (margins use the bound: a pre-compliance estimate must not hide
emission in a null that a real edge does not have) or ``"exact"``;
:meth:`Source.row_flags` gives flags of the source's own per harmonic (a
captured clock's ``extrapolated``).

Each source kind also declares its board-file keys and reads its own table
(:meth:`from_table`); :data:`SOURCE_SECTIONS` maps a board-file array
(``[[clock]]``, ``[[current]]``) to its class.  A new kind of source is one
class here (or in its own module) registered in that table.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path
from typing import ClassVar, Protocol

import numpy as np

from .capture import neighbourhood_ratio
from .flags import declare
from .ibis import CHOICES as IBIS_CORNERS
from .ibis import IbisError, read_ibis
from .readers import FileError
from .schema import Key, TableReader
from .spread import Spread
from .waveform import (EDGE_FRACTION, EDGE_SHAPES, Trapezoid, WaveformError, edge_parameter, full_edge_time,
                       harmonic_phasors, shaped_phasors, spectrum_envelope, supply_current_bound,
                       supply_current_phasors, triangle_pulse_envelope, triangle_pulse_phasors)

__all__ = ["Source", "Clock", "CapturedClock", "Current", "EXTRAPOLATED", "SOURCE_SECTIONS", "BoardContext",
           "QUANTITIES", "MODES"]


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
    harmonics: str = "envelope"
    combine: str = "power"


class Source(Protocol):
    """What the pipeline needs of a source (see the module docstring)."""

    section: ClassVar[str]
    name: str
    frequency_hz: float
    spread: Spread | None
    reference: str | None
    rail: str | None
    paths: tuple[str, ...]

    mode: str
    combine: str

    def harmonics(self, n: np.ndarray) -> dict[str, np.ndarray]: ...

    def exact(self, n: np.ndarray) -> dict[str, np.ndarray]: ...

    def bounds(self, frequency_hz) -> dict[str, np.ndarray]: ...

    def row_flags(self, n: np.ndarray) -> dict[str, np.ndarray]: ...


QUANTITIES = ("voltage", "current", "rail")
MODES = ("envelope", "exact")


def _at_bound(exact: dict[str, np.ndarray], bound: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The bound's magnitude with the exact series' phase (phases matter where lines add inside one RBW)."""
    return {k: bound[k] * np.exp(1j * np.angle(exact[k])) for k in exact}


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


def _load(r: TableReader) -> tuple[float | None, float | None]:
    """A clock's series R + C load (None, None without a ``load`` key)."""
    resistance = capacitance = None
    if r.has("load"):
        load = r.reader("load", r.keys["load"].schema)
        resistance, capacitance = load.get("resistance"), load.get("capacitance")
        if resistance is None and capacitance is None:
            raise r.error("load", "give a resistance, a capacitance or both (series R + C)")
    return resistance, capacitance


def _check_load(r: TableReader, ctx: BoardContext, names, resistance, capacitance) -> None:
    """Every path that reads the clock current needs a load."""
    for p in names:
        if ctx.paths[p].input in ("current", "escape") and resistance is None and capacitance is None:
            raise r.error("load", f"missing; path {p!r} needs the clock current, which needs a load")


#: An edge time taken from an IBIS model's [Ramp]: ``rise_time = { ibis = "driver.ibs", model = "NAME" }``.
IBIS_KEYS = (Key("ibis", "text", required=True), Key("model", "text"),
             Key("corner", "choice", default="fastest", choices=IBIS_CORNERS))


def _edge_time(r: TableReader, ctx: BoardContext, name: str, edge: str, which: str | None = None
               ) -> tuple[float, str]:
    """An edge as written and the thresholds it is measured between: a time in the clock's ``edge``
    convention, or an IBIS model's 20-80 % ramp time (its ``which`` edge: that of ``name`` by default)."""
    if not isinstance(r.table.get(name), dict):
        return r.get(name, required=True), edge
    spec = r.reader(name, IBIS_KEYS)
    shown = spec.get("ibis")
    try:
        models = ctx.files.read(read_ibis, Path(ctx.base_dir) / shown)
    except (FileError, IbisError) as err:
        raise spec.error("ibis", str(err), shown) from None
    wanted = spec.get("model")
    if wanted is None:
        if len(models) != 1:
            raise spec.error("model", f"missing; {shown} holds {len(models)} models: {', '.join(models) or 'none'}")
        wanted = next(iter(models))
    if wanted not in models:
        close = difflib.get_close_matches(wanted, list(models), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise spec.error("model", f"not in {shown}; {hint}it holds: {', '.join(models) or 'no model'}", wanted)
    which = which or ("rise" if name == "rise_time" else "fall")
    ramp = getattr(models[wanted], which)
    if ramp is None:
        raise spec.error("model", f"{wanted} has no [Ramp] dV/dt_{which[0]} (Model_type "
                         f"{models[wanted].model_type or 'not stated'}): not an output", wanted)
    return ramp.corner(spec.get("corner"))[2], "20-80"


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
_HARMONICS = Key("harmonics", "choice", choices=MODES)
COMBINES = ("power", "coherent")
_COMBINE = Key("combine", "choice", choices=COMBINES)


@dataclass(frozen=True)
class Clock:
    """A clock output: its waveform, its load, its supply rail and the paths it couples through.

    ``wave`` is the linear-ramp trapezoid with the clock's 0-100 % equivalent edges (it checks that the edges
    fit and gives Paul's envelope); ``edge_shape`` with ``rise`` and ``fall`` (the shape's own time parameters,
    :func:`emispec.waveform.edge_parameter`) give the exact series of real edges.
    """

    section: ClassVar[str] = "clock"
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, _FREQUENCY, _DUTY,
        Key("rise_time", "time", low=0.0, high=1.0),
        Key("fall_time", "time", low=0.0, high=1.0),
        Key("edge", "choice", default="10-90", choices=tuple(EDGE_FRACTION)),
        Key("swing", "voltage", low=1e-6, low_open=False, high=1e4),
        Key("load", "table", schema=(Key("resistance", "resistance", low=0.0, high=1e9),
                                     Key("capacitance", "capacitance", low=0.0, high=1.0))),
        _PATHS, _RAIL, _SPREAD, _REFERENCE, _HARMONICS, _COMBINE,
        Key("edge_shape", "choice", default="linear", choices=EDGE_SHAPES),
        Key("waveform", "text"), Key("column", "text"), Key("bandwidth", "frequency", low=0.0, high=1e12),
    )

    name: str
    wave: Trapezoid
    paths: tuple[str, ...]
    load_resistance_ohm: float | None = None
    load_capacitance_f: float | None = None
    spread: Spread | None = None
    reference: str | None = None
    rail: str | None = None
    mode: str = "envelope"
    edge_shape: str = "linear"
    rise: float | None = None
    fall: float | None = None
    combine: str = "power"

    @property
    def has_load(self) -> bool:
        return self.load_resistance_ohm is not None or self.load_capacitance_f is not None

    @property
    def frequency_hz(self) -> float:
        return self.wave.frequency_hz

    def _edges(self) -> tuple[float, float]:
        if self.edge_shape == "linear":
            return self.wave.rise_s, self.wave.fall_s
        return self.rise, self.fall

    def _supply(self, n) -> np.ndarray:
        if not self.has_load:
            return np.full(np.shape(n), np.nan, dtype=complex)
        rise, fall = self._edges()
        return supply_current_phasors(self.wave, n, self.load_resistance_ohm, self.load_capacitance_f,
                                      self.edge_shape, rise, fall)

    def exact(self, n: np.ndarray) -> dict[str, np.ndarray]:
        """Exact RMS series: voltage (Paul 2006, sec. 3.2, with the edge shape), load current V Y, supply current."""
        rise, fall = self._edges()
        voltage = shaped_phasors(self.wave, n, self.edge_shape, rise, fall) / np.sqrt(2)
        f = np.asarray(n, dtype=float) * self.frequency_hz
        current = voltage * self._load_phasor(f)
        return {"voltage": voltage, "current": current, "rail": self._supply(n) / np.sqrt(2)}

    def _load_phasor(self, f) -> np.ndarray:
        """I / V of the load, 1 / (R + 1 / (j w C)) (NaN without a load)."""
        if not self.has_load:
            return np.full(np.shape(f), np.nan, dtype=complex)
        z = np.zeros(np.shape(f), dtype=complex)
        if self.load_resistance_ohm is not None:
            z = z + self.load_resistance_ohm
        if self.load_capacitance_f is not None:
            z = z + 1 / (2j * np.pi * f * self.load_capacitance_f)
        return 1 / z

    def bounds(self, frequency_hz) -> dict[str, np.ndarray]:
        """RMS upper bounds at any frequency: Paul's envelope for the voltage (with the edge shape's bound),
        times |Y| for the load current, and the charging-pulse bound for the supply current."""
        f = np.asarray(frequency_hz, dtype=float)
        rise, fall = self._edges()
        fastest = min(rise, fall)
        voltage = spectrum_envelope(self.wave, f, self.edge_shape, fastest) / np.sqrt(2)
        if self.has_load:
            rail = supply_current_bound(self.wave, f, self.load_resistance_ohm, self.load_capacitance_f,
                                        self.edge_shape, rise, fastest) / np.sqrt(2)
        else:
            rail = np.full(f.shape, np.nan)
        return {"voltage": voltage, "current": voltage * np.abs(self._load_phasor(f)), "rail": rail}

    def harmonics(self, n: np.ndarray) -> dict[str, np.ndarray]:
        """The levels the margins use: the exact series, or its bound at n f0 with the exact phase."""
        exact = self.exact(n)
        if self.mode == "exact":
            return exact
        return _at_bound(exact, self.bounds(np.asarray(n, dtype=float) * self.frequency_hz))

    def row_flags(self, n) -> dict[str, np.ndarray]:
        return {}

    @classmethod
    def from_table(cls, r: TableReader, ctx: BoardContext) -> Clock | CapturedClock:
        if r.has("waveform"):
            return CapturedClock.from_table(r, ctx)
        for own in ("column", "bandwidth"):
            if r.has(own):
                raise r.error(own, "belongs to a clock read from a capture (waveform = \"FILE\")")
        frequency = r.get("frequency", required=True)
        swing = r.get("swing", required=True)
        duty = r.get("duty_cycle")
        edge = r.get("edge")
        rise_measured, rise_edge = _edge_time(r, ctx, "rise_time", edge)
        if r.has("fall_time"):
            fall_measured, fall_edge = _edge_time(r, ctx, "fall_time", edge)
        elif isinstance(r.table.get("rise_time"), dict):  # the same model's falling ramp, not its rising one
            fall_measured, fall_edge = _edge_time(r, ctx, "rise_time", edge, "fall")
        else:
            fall_measured, fall_edge = rise_measured, rise_edge
        rise, fall = full_edge_time(rise_measured, rise_edge), full_edge_time(fall_measured, fall_edge)
        try:
            wave = Trapezoid(frequency, swing, duty, rise, fall)
        except WaveformError as err:
            raise r.error("rise_time", f"{err}; allowed: (rise + fall)/2 <= min(duty, 1 - duty) / frequency",
                          r.table.get("rise_time")) from None
        shape = r.get("edge_shape")
        mode = r.get("harmonics") or ctx.harmonics
        try:
            rise_p, fall_p = (edge_parameter(t, e, shape) for t, e in ((rise_measured, rise_edge),
                                                                        (fall_measured, fall_edge)))
        except WaveformError as err:
            raise r.error("edge_shape", str(err), shape) from None
        spread = Spread.from_table(r.reader("spread", Spread.KEYS), frequency) if r.has("spread") else None
        resistance, capacitance = _load(r)
        names = _path_names(r, ctx.paths)
        _check_load(r, ctx, names, resistance, capacitance)
        rail = _rail_name(r, ctx.rails, names, ctx.paths)
        return cls(r.get("name"), wave, names, resistance, capacitance, spread, r.get("reference"), rail, mode,
                   shape, rise_p, fall_p, r.get("combine") or ctx.combine)


#: Rows of a clock read from a capture that lie above what the capture measured.
EXTRAPOLATED = declare("extrapolated", "extrap", "above the capture's limit: the fitted trapezoid's envelope", 21)


@dataclass(frozen=True)
class CapturedClock:
    """A clock whose harmonics come from a capture (``waveform = "FILE"``), up to the capture's limit.

    ``measured`` holds the capture's peak phasors of harmonics 1..limit (:func:`emispec.capture.analyse`);
    ``wave`` is the fitted trapezoid (at the modelled frequency, its edges scaled with the period when a
    ``frequency`` key moves it).  Above the limit the trapezoid's envelope continues (flag ``extrapolated``),
    in either mode: a null the capture did not see must not be invented.  In envelope mode a harmonic reads
    the fitted trapezoid's envelope, raised where the capture stands over it: by the largest excess among its
    neighbours within a third of an octave, each referred to it along the envelope
    (:func:`emispec.capture.neighbourhood_ratio`).  So ringing lifts the envelope, while the nulls and dips of
    one captured sample (its exact duty cycle, its edges' sinc) never lower it.  The rail current is the
    fitted trapezoid's.
    """

    section: ClassVar[str] = "clock"

    name: str
    wave: Trapezoid
    measured: np.ndarray
    paths: tuple[str, ...]
    load_resistance_ohm: float | None = None
    load_capacitance_f: float | None = None
    spread: Spread | None = None
    reference: str | None = None
    rail: str | None = None
    mode: str = "envelope"
    combine: str = "power"
    file: str = ""

    # the fitted trapezoid's linear edges: the load, rail and bound code of Clock applies as it is
    edge_shape = "linear"
    has_load = Clock.has_load
    _edges = Clock._edges
    _load_phasor = Clock._load_phasor
    _supply = Clock._supply

    @property
    def frequency_hz(self) -> float:
        return self.wave.frequency_hz

    @property
    def limit(self) -> int:
        return len(self.measured)

    def _envelope(self, f) -> np.ndarray:
        return spectrum_envelope(self.wave, f)

    def exact(self, n: np.ndarray) -> dict[str, np.ndarray]:
        """The capture's harmonics up to its limit; above, the trapezoid's envelope with its phase (RMS)."""
        n = np.asarray(n)
        f = n * self.frequency_hz
        inside = (n >= 1) & (n <= self.limit)
        beyond = self._envelope(f) * np.exp(1j * np.angle(harmonic_phasors(self.wave, np.maximum(n, 1))))
        peak = np.where(inside, self.measured[np.clip(n, 1, self.limit) - 1], beyond)
        voltage = peak / np.sqrt(2)
        return {"voltage": voltage, "current": voltage * self._load_phasor(f), "rail": self._supply(n) / np.sqrt(2)}

    def bounds(self, frequency_hz) -> dict[str, np.ndarray]:
        """The fitted trapezoid's bounds (:meth:`Clock.bounds`), its voltage and load current raised up to the
        limit by the nearest harmonic's neighbourhood excess (RMS)."""
        f = np.asarray(frequency_hz, dtype=float)
        m = np.arange(1, self.limit + 1)
        ratio = np.maximum(1.0, neighbourhood_ratio(self.measured, self._envelope(m * self.frequency_hz)))
        n = np.rint(f / self.frequency_hz).astype(int)
        scale = np.where(n <= self.limit, ratio[np.clip(n, 1, self.limit) - 1], 1.0)
        trapezoid = Clock.bounds(self, f)
        return {**trapezoid, "voltage": trapezoid["voltage"] * scale, "current": trapezoid["current"] * scale}

    harmonics = Clock.harmonics

    def row_flags(self, n) -> dict[str, np.ndarray]:
        return {EXTRAPOLATED: np.asarray(n) > self.limit}

    @classmethod
    def from_table(cls, r: TableReader, ctx: BoardContext) -> CapturedClock:
        from .capture import CaptureError, analyse_file

        for own in ("rise_time", "fall_time", "edge", "swing", "duty_cycle", "edge_shape"):
            if r.has(own):
                raise r.error(own, "comes from the capture (waveform); remove it, or remove waveform")
        shown = r.get("waveform")
        path = Path(ctx.base_dir) / shown
        try:
            analysis = ctx.files.read(analyse_file, path, r.get("column"))
        except (FileError, CaptureError) as err:
            raise r.error("waveform", str(err), shown) from None
        limit = analysis.limit_within(r.get("bandwidth"))
        if limit < 1:
            where = "bandwidth" if r.has("bandwidth") else "waveform"
            raise r.error(where, "no harmonic of the capture within its bandwidth stands 10 dB over its noise "
                          "floor", r.table[where])
        fitted = analysis.trapezoid()
        frequency = r.get("frequency") or fitted.frequency_hz
        scale = fitted.frequency_hz / frequency  # the capture's shape per period is kept
        wave = Trapezoid(frequency, fitted.swing_v, fitted.duty, fitted.rise_s * scale, fitted.fall_s * scale)
        spread = Spread.from_table(r.reader("spread", Spread.KEYS), frequency) if r.has("spread") else None
        resistance, capacitance = _load(r)
        names = _path_names(r, ctx.paths)
        _check_load(r, ctx, names, resistance, capacitance)
        rail = _rail_name(r, ctx.rails, names, ctx.paths)
        return cls(r.get("name"), wave, analysis.harmonics[:limit].copy(), names, resistance, capacitance,
                   spread, r.get("reference"), rail, r.get("harmonics") or ctx.harmonics,
                   r.get("combine") or ctx.combine, str(shown))


@dataclass(frozen=True)
class Current:
    """A train of triangular supply-pin current pulses drawn from a rail: an IC's core switching current."""

    section: ClassVar[str] = "current"
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, Key("clock", "text"), _FREQUENCY, _DUTY, _SPREAD, _REFERENCE,
        Key("peak", "current", required=True, low=1e-9, low_open=False, high=1e4),
        Key("width", "time", required=True, low=0.0),
        Key("per", "choice", default="cycle", choices=("cycle", "edge")),
        _RAIL, _PATHS, _HARMONICS, _COMBINE,
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
    mode: str = "envelope"
    combine: str = "power"

    def exact(self, n: np.ndarray) -> dict[str, np.ndarray]:
        """RMS complex harmonics of the pulse train: its current, drawn from the rail; no voltage."""
        current = triangle_pulse_phasors(self.peak_a, self.width_s, self.frequency_hz, n, self.per,
                                         self.duty) / np.sqrt(2)
        return {"voltage": np.full(np.shape(n), np.nan, dtype=complex), "current": current, "rail": current}

    def bounds(self, frequency_hz) -> dict[str, np.ndarray]:
        """RMS bound of the triangular pulse train at any frequency (:func:`triangle_pulse_envelope`)."""
        f = np.asarray(frequency_hz, dtype=float)
        current = triangle_pulse_envelope(self.peak_a, self.width_s, self.frequency_hz, f, self.per) / np.sqrt(2)
        return {"voltage": np.full(f.shape, np.nan), "current": current, "rail": current}

    def harmonics(self, n: np.ndarray) -> dict[str, np.ndarray]:
        exact = self.exact(n)
        if self.mode == "exact":
            return exact
        return _at_bound(exact, self.bounds(np.asarray(n, dtype=float) * self.frequency_hz))

    def row_flags(self, n) -> dict[str, np.ndarray]:
        return {}

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
        mode = r.get("harmonics") or ctx.harmonics
        per = r.get("per")
        spacing = (min(duty, 1 - duty) if per == "edge" else 1.0) / frequency
        width = r.get("width", high=spacing)
        peak = r.get("peak")
        names = _path_names(r, ctx.paths)
        for p in names:
            if ctx.paths[p].input == "voltage":
                raise r.error("paths", f"path {p!r} reads a voltage; a current source has none", list(names))
        rail = _rail_name(r, ctx.rails, names, ctx.paths, required=True)
        return cls(r.get("name"), frequency, duty, peak, width, per, rail, names, spread, reference, mode,
                   r.get("combine") or ctx.combine)


#: Board-file arrays of tables that define sources, and the class each entry becomes.
SOURCE_SECTIONS: dict[str, type] = {"clock": Clock, "current": Current}
