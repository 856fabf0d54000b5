"""Coupling paths: from a source's harmonics to what a limit is written in.

Each path turns the RMS voltage or current of a harmonic into an RMS field
strength [V/m] at the limit's distance (radiated) or an RMS voltage or current
at the receiver port (conducted), so that readings of several paths add up in
the limit's own unit.

Radiated estimates use electrically small, far-field radiators in the
direction of maximum radiation.  Readings are referred to the limit's
distance by inverse distance (20 dB/decade), the extrapolation allowed above
30 MHz by 47 CFR 15.31(f)(1); a path's own ``distance`` is where it is
measured and sets the near-field check.

References
----------
C. R. Paul, *Introduction to Electromagnetic Compatibility*, 2nd ed., Wiley,
2006, sec. 8.1 (differential- and common-mode radiation).
H. W. Ott, *Electromagnetic Compatibility Engineering*, Wiley, 2009, ch. 12
(ground-plane reflection in the differential- and common-mode models).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar, Protocol

import numpy as np

from .antenna import Wire, on_grid
from .constants import C, MU_0
from .decoupling import lisn_impedance
from .flags import declare
from .schema import BoardError, Key, TableReader
from .trace import Trace, interp_log_f
from .units import QuantityError, parse_quantity

__all__ = [
    "LOOP_CONSTANT",
    "loop_field",
    "cable_field",
    "near_field",
    "interpolate_db_log_f",
    "Path",
    "LoopPath",
    "CablePath",
    "AntennaCable",
    "TransferPath",
    "ConductedPath",
    "COMMON_MODE_OHM",
    "reflection_factor",
    "common_mode_current",
    "PATH_KINDS",
    "path_from_table",
]

#: pi eta0 / c^2 [s^2 ohm / m^2]: |E| = K f^2 A I / r for a small loop in free
#: space (Paul 2006, sec. 8.1.2, who rounds it to 1.316e-14).
LOOP_CONSTANT = np.pi * MU_0 * C / C**2

#: Field doubling (+6 dB) of an in-phase reflection from a ground plane, as
#: on an open-area test site (Ott 2009, ch. 12).
GROUND_REFLECTION = 2.0

#: Above this frequency radiated emissions are measured over an absorber-lined
#: floor (CISPR 16-1-4 free-space site; ANSI C63.4), so there is no reflection.
REFLECTING_UP_TO_HZ = 1e9


def reflection_factor(frequency_hz, ground_reflection="auto") -> np.ndarray:
    """Field factor of the site's ground reflection: 2 (+6 dB) or 1.

    ``"auto"``: 2 up to 1 GHz, where the site has a reflecting ground plane, and 1 above, where the standards
    measure over absorber on the floor (CISPR 16-1-4; ANSI C63.4).  ``True`` / ``False``: 2 / 1 at every
    frequency.
    """
    f = np.asarray(frequency_hz, dtype=float)
    if ground_reflection == "auto":
        return np.where(f <= REFLECTING_UP_TO_HZ * (1 + 1e-12), GROUND_REFLECTION, 1.0)
    return np.full(f.shape, GROUND_REFLECTION if ground_reflection else 1.0)


def loop_field(frequency_hz, current_a, area_m2, distance_m, ground_reflection="auto"):
    """Far-field strength of a small current loop, maximum direction [V/m].

    |E| = K f^2 A I / r with K = pi eta0 / c^2, doubled with a ground-plane
    reflection.

    Parameters
    ----------
    frequency_hz : array_like
        Frequency [Hz].
    current_a : array_like
        Loop current, RMS or peak [A]; the field is of the same kind.
    area_m2 : float
        Loop area [m2].
    distance_m : float
        Distance [m].
    ground_reflection : bool or "auto"
        Add the +6 dB of a ground-plane reflection (see :func:`reflection_factor`).

    References
    ----------
    Paul (2006), sec. 8.1.2; Ott (2009), ch. 12.
    """
    f = np.asarray(frequency_hz, dtype=float)
    factor = reflection_factor(f, ground_reflection)
    return factor * LOOP_CONSTANT * f**2 * area_m2 * np.asarray(current_a) / distance_m


def cable_field(frequency_hz, current_a, length_m, distance_m, ground_reflection="auto"):
    """Far-field strength of a cable carrying common-mode current [V/m].

    A short wire of length L with a uniform total current I radiates
    |E| = mu0 f L I / (2 r) broadside (Hertzian dipole).  With the ground
    reflection this is mu0 f L I / r = 1.257e-6 f L I / r, Ott's form with
    I the total common-mode current; the same number is Paul's free-space
    two-wire form with I the current on each of the two wires.  Once the
    cable is electrically long, L is limited to half a wavelength, the
    longest length whose current still adds in phase.

    Parameters
    ----------
    frequency_hz : array_like
        Frequency [Hz].
    current_a : array_like
        Total common-mode current on the cable [A].
    length_m : float
        Cable length [m].
    distance_m : float
        Distance [m].
    ground_reflection : bool or "auto"
        Add the +6 dB of a ground-plane reflection (see :func:`reflection_factor`).

    References
    ----------
    Paul (2006), sec. 8.1.3; Ott (2009), ch. 12.
    """
    f = np.asarray(frequency_hz, dtype=float)
    effective_length = np.minimum(length_m, 0.5 * C / f)
    factor = reflection_factor(f, ground_reflection)
    return factor * 0.5 * MU_0 * f * effective_length * np.asarray(current_a) / distance_m


def near_field(frequency_hz, distance_m):
    """True where the distance is inside the reactive near field, r < lambda / (2 pi)."""
    return distance_m < C / (2 * np.pi * np.asarray(frequency_hz, dtype=float))


def interpolate_db_log_f(frequency_hz, table_hz, table_db):
    """Interpolate a dB table linearly over log frequency, holding the end values (see :func:`interp_log_f`)."""
    return interp_log_f(frequency_hz, table_hz, table_db, outside="hold")


#: Common-mode impedance of an attached cable, as in the CDNs and ISNs of
#: CISPR 16-1-2 and IEC 61000-4-6 (150 ohm).
COMMON_MODE_OHM = 150.0

NEAR_FIELD = declare("near-field", "near", "near field (r < lambda / 2 pi)", 10)
LOOP_LARGE = declare("loop-electrically-large", "big-loop",
                     "loop too large for the small-loop formula", 11)


class Path(Protocol):
    """A coupling path: from a source quantity to what the limit is written in.

    ``input`` names the source quantity it reads ("voltage", "current", or
    "escape": the rail current that leaves the decoupling through the path's
    own ``termination``).  ``reading`` returns the linear level in the limit's
    unit at the limit's distance; ``flags`` the validity flags of the model at
    each frequency.  Each kind declares its board-file keys (``KEYS``), the
    kinds of limit it serves (``SERVES``) and reads its own table.
    """

    KIND: ClassVar[str]
    SERVES: ClassVar[tuple[str, ...]]
    KEYS: ClassVar[tuple[Key, ...]]
    name: str
    input: str
    distance_m: float | None

    def reading(self, frequency_hz, source: dict, limit_distance_m) -> np.ndarray: ...

    def flags(self, frequency_hz, limit_distance_m) -> dict[str, np.ndarray]: ...


def common_mode_current(path, frequency_hz, source: dict) -> np.ndarray | None:
    """The common-mode current at a cable's base [A RMS], for paths that are cables (None for the others)."""
    carries = getattr(path, "common_mode_current", None)
    return None if carries is None else carries(frequency_hz, source)


_NAME = Key("name", "text", required=True)
_KIND = Key("kind", "text", required=True)
_DISTANCE = Key("distance", "length", low=0.0, high=1e3)
_REFLECTION = Key("ground_reflection", "any", default="auto")


def _reflection(r: TableReader):
    value = r.get("ground_reflection")
    if value not in (True, False, "auto") or isinstance(value, (int, float)) and not isinstance(value, bool):
        raise r.error("ground_reflection", "expected true, false or 'auto' (+6 dB up to 1 GHz, none above)", value)
    return value
_TERMINATION = Key("termination", "resistance", default=COMMON_MODE_OHM, low=0.0, high=1e6)


def _distance(r: TableReader, limit) -> float | None:
    if not r.has("distance"):
        return None
    if limit.measurement != "radiated":
        raise r.error("distance", "only radiated paths have a distance")
    return r.get("distance")


@dataclass(frozen=True)
class LoopPath:
    """Differential-mode radiation of the loop the source current flows in."""

    KIND: ClassVar[str] = "loop"
    SERVES: ClassVar[tuple[str, ...]] = ("radiated",)
    KEYS: ClassVar[tuple[Key, ...]] = (_NAME, _KIND, Key("area", "area", required=True, low=0.0, high=1.0), _DISTANCE,
                                       _REFLECTION)

    name: str
    area_m2: float
    distance_m: float | None = None
    ground_reflection: bool | str = "auto"
    input: str = "current"

    def reading(self, frequency_hz, source, limit_distance_m):
        return loop_field(frequency_hz, source["current"], self.area_m2, limit_distance_m, self.ground_reflection)

    def flags(self, frequency_hz, limit_distance_m):
        f = np.asarray(frequency_hz, dtype=float)
        # the small-loop formula assumes a perimeter well below lambda; lambda/10 is common practice, no source
        return {NEAR_FIELD: near_field(f, self.distance_m or limit_distance_m),
                LOOP_LARGE: 4 * np.sqrt(self.area_m2) > (C / f) / 10}

    @classmethod
    def from_table(cls, r: TableReader, limit) -> LoopPath:
        distance = _distance(r, limit)
        return cls(r.get("name"), area_m2=r.get("area"), distance_m=distance, ground_reflection=_reflection(r))


@dataclass(frozen=True)
class CablePath:
    """Common-mode radiation of an attached cable.

    ``drive = "ratio"``: the cable's common-mode current is ``ratio`` times the
    source current.  ``drive = "escape"``: it is ``ratio`` (default 1) times the
    rail current that escapes the decoupling into the cable's common-mode
    ``termination_ohm``; a ratio below 1 stands for the part of an escaping
    differential current that converts to common mode.
    """

    KIND: ClassVar[str] = "cable"
    SERVES: ClassVar[tuple[str, ...]] = ("radiated",)
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, _KIND, Key("length", "length", required=True, low=0.0, high=1e3),
        Key("model", "choice", default="short", choices=("short", "antenna")),
        Key("drive", "choice", choices=("ratio", "escape", "voltage", "table")),
        Key("ratio", "gain"), _DISTANCE, _REFLECTION, _TERMINATION,
        # model = "antenna" only (AntennaCable)
        Key("diameter", "length", default=5e-3, low=0.0, high=0.2),
        Key("geometry", "choice", default="monopole", choices=("monopole", "dipole")),
        Key("gain", "any"),
        Key("return_inductance", "inductance", low=0.0, high=1e-3),
        Key("ferrite", "table", schema=(Key("resistance", "resistance", low=0.0, high=1e6, low_open=False),
                                        Key("inductance", "inductance", low=0.0, high=1e-3, low_open=False),
                                        Key("impedance", "any"))),
    )

    name: str
    length_m: float
    ratio: float = 1.0
    distance_m: float | None = None
    ground_reflection: bool | str = "auto"
    termination_ohm: float = COMMON_MODE_OHM
    drive: str = "ratio"

    @property
    def input(self) -> str:
        return "current" if self.drive == "ratio" else "escape"

    def termination(self, frequency_hz) -> np.ndarray:
        return np.full(np.shape(frequency_hz), self.termination_ohm, dtype=complex)

    def common_mode_current(self, frequency_hz, source) -> np.ndarray:
        """The total common-mode current on the cable [A RMS]: ``ratio`` times the driving current."""
        return self.ratio * np.asarray(source[self.input])

    def reading(self, frequency_hz, source, limit_distance_m):
        current = self.common_mode_current(frequency_hz, source)
        return cable_field(frequency_hz, current, self.length_m, limit_distance_m, self.ground_reflection)

    def flags(self, frequency_hz, limit_distance_m):
        return {NEAR_FIELD: near_field(frequency_hz, self.distance_m or limit_distance_m)}

    @classmethod
    def from_table(cls, r: TableReader, limit) -> CablePath | AntennaCable:
        if r.get("model") == "antenna":
            return AntennaCable.from_table(r, limit)
        for key in _ANTENNA_ONLY:
            if r.has(key):
                raise r.error(key, "only with model = 'antenna'")
        distance = _distance(r, limit)
        drive = r.get("drive") or "ratio"
        if drive not in ("ratio", "escape"):
            raise r.error("drive", "the short model takes 'ratio' or 'escape'; 'voltage' and 'table' need "
                          "model = 'antenna'", drive)
        length = r.get("length")
        reflection = _reflection(r)
        if drive == "ratio" and r.has("termination"):
            raise r.error("termination", "only with drive = 'escape'")
        if not r.has("ratio") and drive == "ratio":
            raise r.error("ratio", "missing; give the common-mode current relative to the source current, "
                          "e.g. '-30 dB' or 0.03")
        ratio = r.get("ratio") if r.has("ratio") else 1.0
        if drive == "escape":
            return cls(r.get("name"), length, ratio, distance, reflection, r.get("termination"), drive="escape")
        return cls(r.get("name"), length, ratio, distance, reflection)


_ANTENNA_ONLY = ("diameter", "geometry", "gain", "return_inductance", "ferrite")


@dataclass(frozen=True)
class AntennaCable:
    """An attached cable as a thin wire antenna (``kind = "cable"``, ``model = "antenna"``).

    A common-mode voltage at the cable's connector drives the wire
    (:class:`emispec.antenna.Wire`) through the ``ferrite`` in series; the
    current at the base is the common-mode current, and the field is the
    wire's at the limit's distance.  The voltage is

    - ``drive = "voltage"``: ``ratio`` times the source's voltage harmonic;
    - ``drive = "table"``: the ``gain`` table (dB, against frequency) times it;
    - ``drive = "escape"``: the rail current that escapes the decoupling
      through the return path's ``return_inductance``, times omega L.
    """

    KIND: ClassVar[str] = "cable"

    name: str
    wire: Wire
    drive: str = "voltage"
    ratio: float = 1.0
    gain: Trace | None = None
    return_inductance_h: float = 0.0
    ferrite_ohm: float = 0.0
    ferrite_h: float = 0.0
    ferrite_table: Trace | None = None
    distance_m: float | None = None
    ground_reflection: bool | str = "auto"

    @property
    def length_m(self) -> float:
        return self.wire.length_m

    @property
    def input(self) -> str:
        return "escape" if self.drive == "escape" else "voltage"

    def termination(self, frequency_hz) -> np.ndarray:
        """What the escaping rail current flows through: the return path's inductance."""
        return 2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.return_inductance_h

    def drive_per_unit(self, frequency_hz) -> np.ndarray:
        """Common-mode voltage per unit of the source quantity (V/V, or V/A for an escaping current)."""
        f = np.asarray(frequency_hz, dtype=float)
        if self.drive == "escape":
            return 2 * np.pi * f * self.return_inductance_h
        if self.drive == "table":
            return 10.0 ** (self.gain.at(f) / 20.0)
        return np.full(f.shape, self.ratio)

    def series_ohm(self, frequency_hz) -> np.ndarray:
        """The ferrite's impedance: R + j omega L, plus a table's values read as resistance."""
        f = np.asarray(frequency_hz, dtype=float)
        z = self.ferrite_ohm + 2j * np.pi * f * self.ferrite_h
        if self.ferrite_table is not None:
            z = z + 10.0 ** (self.ferrite_table.at(f) / 20.0)
        return z

    def admittance(self, frequency_hz) -> np.ndarray:
        """|I_base / V| [S]: the wire's input impedance in series with the ferrite."""
        return 1.0 / np.abs(self.wire.input_impedance(frequency_hz) + self.series_ohm(frequency_hz))

    def common_mode_current(self, frequency_hz, source) -> np.ndarray:
        """The common-mode current at the cable's base [A RMS]."""
        per_volt = on_grid(frequency_hz, self.admittance)
        return np.asarray(source[self.input]) * self.drive_per_unit(frequency_hz) * per_volt

    def field_per_volt(self, frequency_hz, limit_distance_m: float) -> np.ndarray:
        """|E| at the limit's distance per volt of common-mode drive [V/m/V]."""
        def response(f):
            return self.wire.field_per_volt(f, self.series_ohm(f), limit_distance_m,
                                            reflection_factor(f, self.ground_reflection))
        return on_grid(frequency_hz, response)

    def reading(self, frequency_hz, source, limit_distance_m):
        return (np.asarray(source[self.input]) * self.drive_per_unit(frequency_hz)
                * self.field_per_volt(frequency_hz, limit_distance_m))

    def flags(self, frequency_hz, limit_distance_m):
        return {}  # the near field at the limit's distance is part of the model

    def resonances_hz(self, low_hz: float, high_hz: float) -> np.ndarray:
        return self.wire.series_resonances_hz(low_hz, high_hz)

    @classmethod
    def from_table(cls, r: TableReader, limit) -> AntennaCable:
        if limit.measurement != "radiated":
            raise r.error("model", "the antenna model gives a field; it needs a radiated limit")
        if r.has("distance"):
            raise r.error("distance", "the antenna model computes the field at the limit's distance itself")
        if r.has("termination"):
            raise r.error("termination", "the antenna model's escape path is its return_inductance")
        drive = r.get("drive") or "voltage"
        needs = {"voltage": "ratio", "table": "gain", "escape": "return_inductance", "ratio": None}
        if needs[drive] is None:
            raise r.error("drive", "the antenna model takes 'voltage', 'table' or 'escape' (a common-mode "
                          "voltage drives it, not a current)", drive)
        for key, wanted in (("ratio", "voltage"), ("gain", "table"), ("return_inductance", "escape")):
            if r.has(key) and drive != wanted:
                raise r.error(key, f"only with drive = '{wanted}'")
        if not r.has(needs[drive]):
            example = {"ratio": "'-20 dB' (the common-mode voltage relative to the source voltage)",
                       "gain": '[["30 MHz", -30.0], ["1 GHz", -20.0]]', "return_inductance": "'5 nH'"}
            raise r.error(needs[drive], f"missing; drive = '{drive}' needs it, e.g. {example[needs[drive]]}")
        diameter = r.get("diameter")
        length = r.get("length")
        if diameter >= length / 10:
            raise r.error("diameter", f"a thin wire is needed: at most a tenth of the length "
                          f"({length / 10 * 1e3:g} mm)", r.table.get("diameter"))
        resistance = inductance = 0.0
        table = None
        if r.has("ferrite"):
            ferrite = r.reader("ferrite", r.keys["ferrite"].schema)
            resistance, inductance = ferrite.get("resistance") or 0.0, ferrite.get("inductance") or 0.0
            if ferrite.has("impedance"):
                table = _impedance_table(ferrite, "impedance")
            elif not (ferrite.has("resistance") or ferrite.has("inductance")):
                raise r.error("ferrite", "give resistance and/or inductance (series R + L), or an impedance "
                              "table, e.g. { impedance = [[\"100 MHz\", \"120 ohm\"], [\"1 GHz\", \"250 ohm\"]] }")
        return cls(r.get("name"), Wire(length, diameter / 2, r.get("geometry")), drive,
                   r.get("ratio") if drive == "voltage" else 1.0,
                   _gain_table(r, "gain") if drive == "table" else None,
                   r.get("return_inductance") if drive == "escape" else 0.0,
                   resistance, inductance, table, None, _reflection(r))


def _impedance_table(r: TableReader, name: str) -> Trace:
    """A ``[[frequency, impedance], ...]`` table (|Z| in ohm, ascending frequency), kept in dB re 1 ohm."""
    freqs, ohms = _pairs(r, name, "impedance", "resistance", '[["100 MHz", "120 ohm"]]',
                         lambda z: 0 < z <= 1e6, "> 0 ohm and <= 1e6 ohm")
    return Trace(freqs, 20 * np.log10(ohms), "dBohm", outside="hold", origin=r.sub(name))


def _gain_table(r: TableReader, name: str) -> Trace:
    """A ``[[frequency, dB], ...]`` table in strictly ascending frequency."""
    freqs, gains = _pairs(r, name, "dB", "decibel", '[["1 MHz", -20.0], ["1 GHz", -20.0]]',
                          lambda g: -300 <= g <= 300, "a gain from -300 dB to 300 dB")
    return Trace(freqs, gains, "dB", outside="hold", origin=r.sub(name))


def _pairs(r: TableReader, name: str, what: str, dimension: str, example: str, allowed, allowed_text: str):
    """The frequencies and values of a ``[[frequency, value], ...]`` table, frequencies strictly ascending."""
    rows = r.table.get(name)
    expected = f"a list of [frequency, {what}] pairs in ascending frequency, e.g. {example}"
    if not isinstance(rows, list) or not rows:
        raise r.error(name, f"expected {expected}", rows)
    freqs, values = [], []
    for k, point in enumerate(rows):
        if not (isinstance(point, list) and len(point) == 2):
            raise r.error(f"{name}[{k}]", f"expected {expected}", point)
        try:
            freqs.append(parse_quantity(point[0], "frequency"))
            values.append(parse_quantity(point[1], dimension))
        except QuantityError as err:
            raise r.error(f"{name}[{k}]", str(err), point) from None
        if not allowed(values[-1]):
            raise r.error(f"{name}[{k}]", f"out of range; allowed: {allowed_text}", point)
    freqs_a = np.array(freqs)
    if np.any(freqs_a <= 0) or np.any(np.diff(freqs_a) <= 0):
        raise r.error(name, "frequencies must be > 0 Hz and strictly ascending")
    return freqs_a, np.array(values)


@dataclass(frozen=True)
class TransferPath:
    """A user's gain table from the source voltage, current or escaping rail current to the limit's unit.

    The gain is in dB re the limit unit per source unit (e.g. dB(uV/m)/uV).
    A table taken at ``distance_m`` is referred to the limit's distance by
    inverse distance.  An ``escape`` input sees ``termination_ohm`` beyond the
    supply path.
    """

    KIND: ClassVar[str] = "transfer"
    SERVES: ClassVar[tuple[str, ...]] = ("radiated", "conducted")
    KEYS: ClassVar[tuple[Key, ...]] = (
        _NAME, _KIND, Key("input", "choice", required=True, choices=("voltage", "current", "escape")),
        Key("gain", "any"), _DISTANCE, _TERMINATION,
    )

    name: str
    input: str
    gain: Trace
    distance_m: float | None = None
    termination_ohm: float = COMMON_MODE_OHM

    def termination(self, frequency_hz) -> np.ndarray:
        return np.full(np.shape(frequency_hz), self.termination_ohm, dtype=complex)

    def reading(self, frequency_hz, source, limit_distance_m):
        gain = 10.0 ** (self.gain.at(frequency_hz) / 20.0)
        scale = 1.0 if self.distance_m is None or limit_distance_m is None else self.distance_m / limit_distance_m
        return source[self.input] * gain * scale

    def flags(self, frequency_hz, limit_distance_m):
        """Near field where the table's own distance (or the limit's) is below lambda / 2 pi: there the
        inverse-distance scaling to the limit's distance does not hold."""
        distance = self.distance_m or limit_distance_m
        if distance is None:
            return {}
        return {NEAR_FIELD: near_field(frequency_hz, distance)}

    @classmethod
    def from_table(cls, r: TableReader, limit) -> TransferPath:
        distance = _distance(r, limit)
        source = r.get("input")
        if r.has("termination") and source != "escape":
            raise r.error("termination", "only with input = 'escape'")
        return cls(r.get("name"), source, _gain_table(r, "gain"), distance, r.get("termination"))


@dataclass(frozen=True)
class ConductedPath:
    """The escaping rail current into a CISPR 16-1-2 LISN, read at its 50 ohm port.

    ``measure = "voltage"`` gives the port voltage (limits in dBuV), ``"current"``
    the current itself (limits in dBuA).  ``series_ohm`` is the resistor in
    series with the 50 uH inductor (5 ohm in the 50 uH + 5 ohm network; 0 for
    the plain 50 ohm // 50 uH network).
    """

    KIND: ClassVar[str] = "conducted"
    SERVES: ClassVar[tuple[str, ...]] = ("conducted",)
    #: LISN variants: the series resistor of CISPR 16-1-2's 50 uH network
    LISNS: ClassVar[dict[str, float]] = {"50uH+5ohm": 5.0, "50uH": 0.0}
    KEYS: ClassVar[tuple[Key, ...]] = (_NAME, _KIND, Key("lisn", "choice", default="50uH+5ohm",
                                                         choices=("50uH+5ohm", "50uH")))

    name: str
    measure: str = "voltage"
    series_ohm: float = 5.0
    input: str = "escape"
    distance_m: None = None

    def termination(self, frequency_hz) -> np.ndarray:
        return lisn_impedance(frequency_hz, self.series_ohm)

    def reading(self, frequency_hz, source, limit_distance_m):
        current = source["escape"]
        return current * np.abs(self.termination(frequency_hz)) if self.measure == "voltage" else current

    def flags(self, frequency_hz, limit_distance_m):
        return {}

    @classmethod
    def from_table(cls, r: TableReader, limit) -> ConductedPath:
        lisn = r.get("lisn")
        return cls(r.get("name"), "voltage" if limit.unit == "dBuV" else "current", cls.LISNS[lisn])


#: Board-file ``kind`` -> path class.
PATH_KINDS: dict[str, type] = {cls.KIND: cls for cls in (LoopPath, CablePath, TransferPath, ConductedPath)}


def path_from_table(file: str, name: str, table: dict, limit) -> Path:
    """Read one ``[[path]]`` table with the schema of its ``kind``."""
    key = f"path[{name}]"
    if not isinstance(table, dict) or "kind" not in table:
        raise BoardError(file, f"{key}.kind", f"missing; allowed: {', '.join(PATH_KINDS)}")
    kind = table["kind"]
    if kind not in PATH_KINDS:
        raise BoardError(file, f"{key}.kind", f"allowed: {', '.join(PATH_KINDS)}", kind)
    cls = PATH_KINDS[kind]
    r = TableReader(file, key, table, cls.KEYS)
    if limit.measurement not in cls.SERVES:
        serving = [k for k, c in PATH_KINDS.items() if limit.measurement in c.SERVES]
        raise r.error("kind", f"a {limit.measurement} limit ({limit.name}) takes {', '.join(serving)} paths", kind)
    return cls.from_table(r, limit)
