"""Rail decoupling: the impedance at the IC pins, the supply path, and the current that escapes.

A rail's decoupling network is every part between the rail and ground at the
IC pins, in parallel: capacitors as series R-L-C (ESR, ESL plus mounting
inductance, several of a kind in parallel), the power-plane pair as an ideal
capacitor, the regulator as its output resistance and inductance, and parts
measured as Touchstone files or |Z| tables.  The switching current I of a
source on the rail divides between the decoupling Z_dec and the path towards
the outside Z_path (supply trace or plane, an optional ferrite bead, then what
terminates it: a LISN or a cable's common-mode impedance):

    I_escape = I Z_dec / (Z_dec + Z_path).

References
----------
Series R-L-C capacitor model, self-resonance 1/(2 pi sqrt(L C)): e.g.
E. Bogatin, *Signal and Power Integrity - Simplified*, 2nd ed., 2009, ch. 8.
Target impedance Z_t = V_dd x ripple / delta I: L. D. Smith et al., "Power
distribution system design methodology and capacitor selection for modern CMOS
technology", IEEE Trans. Adv. Packag. 22(3), 1999.
Artificial mains network: CISPR 16-1-2, 50 ohm // (50 uH + 5 ohm) V-network.
Shunt-through impedance measurement: Z = (Z0 / 2) S21 / (1 - S21).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import ClassVar

import numpy as np
from scipy import constants

from .flags import declare
from .readers import TouchstoneError, read_impedance_table, read_touchstone
from .schema import BoardError, Key, TableReader
from .trace import interp_log_f

__all__ = [
    "Capacitor",
    "Plane",
    "Regulator",
    "Measured",
    "SeriesRL",
    "Rail",
    "PART_KINDS",
    "TouchstoneError",
    "self_resonance_hz",
    "network_impedance",
    "lisn_impedance",
    "escape_fraction",
    "impedance_for_escape",
    "anti_resonances",
    "target_impedance",
    "part_summary",
    "rail_summary",
]

DECOUPLING_INSUFFICIENT = declare("decoupling-insufficient", "decap",
                                  "decoupling lets too much escape", 30)
ABOVE_TARGET = declare("above-target-impedance", ">Zt", "above the target impedance", 31)
NEAR_ANTI_RESONANCE = declare("near-anti-resonance", "anti-res", "near an anti-resonance", 32)

_ZERO_OR_MORE = {"low": 0.0, "low_open": False}


@dataclass(frozen=True)
class Capacitor:
    """``count`` equal capacitors in parallel, each a series ESR + (ESL + mounting L) + C."""

    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("kind", "text"), Key("capacitance", "capacitance", required=True, low=0.0),
        Key("esr", "resistance", default=0.0, **_ZERO_OR_MORE),
        Key("esl", "inductance", default=0.0, **_ZERO_OR_MORE),
        Key("mounting_inductance", "inductance", default=0.0, **_ZERO_OR_MORE),
        Key("count", "count", default=1, low=1, high=10000),
    )

    capacitance_f: float
    esr_ohm: float = 0.0
    esl_h: float = 0.0
    mounting_h: float = 0.0
    count: int = 1

    @property
    def inductance_h(self) -> float:
        return self.esl_h + self.mounting_h

    @property
    def srf_hz(self) -> float:
        return self_resonance_hz(self.capacitance_f, self.inductance_h)

    def impedance(self, frequency_hz) -> np.ndarray:
        w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
        return (self.esr_ohm + 1j * w * self.inductance_h + 1 / (1j * w * self.capacitance_f)) / self.count

    @classmethod
    def from_table(cls, r: TableReader, ctx) -> Capacitor:
        return cls(r.get("capacitance"), r.get("esr"), r.get("esl"), r.get("mounting_inductance"), r.get("count"))


@dataclass(frozen=True)
class Plane:
    """A power/ground plane pair as a parallel-plate capacitor C = eps0 epsr A / d."""

    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("kind", "text"), Key("area", "area", required=True, low=0.0),
        Key("separation", "length", required=True, low=0.0),
        Key("permittivity", "number", required=True, low=1.0, high=100.0, what="a relative permittivity"),
    )

    area_m2: float
    separation_m: float
    permittivity: float

    @property
    def capacitance_f(self) -> float:
        return constants.epsilon_0 * self.permittivity * self.area_m2 / self.separation_m

    def impedance(self, frequency_hz) -> np.ndarray:
        return 1 / (2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.capacitance_f)

    @classmethod
    def from_table(cls, r: TableReader, ctx) -> Plane:
        permittivity = r.get("permittivity")
        return cls(r.get("area"), r.get("separation"), permittivity)


@dataclass(frozen=True)
class SeriesRL:
    """A series resistance and inductance: a regulator output, a supply trace, a bead's simple model."""

    KEYS: ClassVar[tuple[Key, ...]] = (Key("resistance", "resistance", default=0.0, **_ZERO_OR_MORE),
                                       Key("inductance", "inductance", default=0.0, **_ZERO_OR_MORE))

    resistance_ohm: float = 0.0
    inductance_h: float = 0.0

    def impedance(self, frequency_hz) -> np.ndarray:
        return self.resistance_ohm + 2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.inductance_h

    @classmethod
    def from_table(cls, r: TableReader, ctx=None) -> SeriesRL:
        return cls(r.get("resistance"), r.get("inductance"))

    @classmethod
    def regulator_from_table(cls, r: TableReader, ctx) -> SeriesRL:
        part = cls.from_table(r)
        if part.resistance_ohm == 0 and part.inductance_h == 0:
            raise r.error("resistance", "give the regulator's output resistance and/or inductance (> 0)")
        return part


Regulator = SeriesRL


@dataclass(frozen=True)
class Measured:
    """An impedance known at measured frequencies (Touchstone file or table), ``count`` in parallel.

    Between points |Z| is interpolated in log over log f and the phase linearly
    over log f.  Beyond the measured range the part keeps its last resistance and
    its reactance scales like an inductor (above) or a capacitor (below).
    """

    KEYS: ClassVar[tuple[Key, ...]] = (Key("kind", "text"), Key("file", "text", required=True),
                                       Key("count", "count", default=1, low=1, high=10000))

    frequency_hz: np.ndarray
    z_ohm: np.ndarray
    count: int = 1
    source: str = field(default="", compare=False)

    def impedance(self, frequency_hz) -> np.ndarray:
        f = np.asarray(frequency_hz, dtype=float)
        magnitude = 10 ** interp_log_f(f, self.frequency_hz, np.log10(np.abs(self.z_ohm)))
        phase = interp_log_f(f, self.frequency_hz, np.unwrap(np.angle(self.z_ohm)))
        z = magnitude * np.exp(1j * phase)
        for edge, beyond in ((0, f < self.frequency_hz[0]), (-1, f > self.frequency_hz[-1])):
            if beyond.any():
                z_edge, f_edge = self.z_ohm[edge], self.frequency_hz[edge]
                scale = f[beyond] / f_edge if z_edge.imag > 0 else f_edge / f[beyond]
                z[beyond] = z_edge.real + 1j * z_edge.imag * scale
        return z / self.count

    @classmethod
    def from_file(cls, r: TableReader, key: str, ctx, reader, count: int = 1) -> Measured:
        """A part (or bead) measured in the file named at ``key``, read once per board through ``ctx.files``."""
        path = Path(ctx.base_dir) / r.get(key)
        try:
            data = ctx.files.read(reader, path)
        except TouchstoneError as err:
            raise r.error(key, str(err), str(path)) from None
        return cls(data.frequency_hz, data.z_ohm, count, source=str(r.table[key]))

    @classmethod
    def touchstone_from_table(cls, r: TableReader, ctx) -> Measured:
        return cls.from_file(r, "file", ctx, read_touchstone, r.get("count"))

    @classmethod
    def table_from_table(cls, r: TableReader, ctx) -> Measured:
        return cls.from_file(r, "file", ctx, read_impedance_table, r.get("count"))


Part = Capacitor | Plane | SeriesRL | Measured

#: Board-file part ``kind`` -> (its keys, how its table is read).
PART_KINDS = {
    "capacitor": (Capacitor.KEYS, Capacitor.from_table),
    "plane": (Plane.KEYS, Plane.from_table),
    "regulator": ((Key("kind", "text"),) + SeriesRL.KEYS, SeriesRL.regulator_from_table),
    "touchstone": (Measured.KEYS, Measured.touchstone_from_table),
    "table": (Measured.KEYS, Measured.table_from_table),
}


@dataclass(frozen=True)
class Rail:
    """A supply rail: its decoupling parts at the IC pins and its path to the outside."""

    BEAD_KEYS: ClassVar[tuple[Key, ...]] = SeriesRL.KEYS + (Key("table", "text"),)
    SUPPLY_KEYS: ClassVar[tuple[Key, ...]] = SeriesRL.KEYS + (Key("bead", "table", schema=BEAD_KEYS),)
    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("name", "text", required=True), Key("voltage", "voltage", required=True, low=0.0),
        Key("supply_path", "table", schema=SUPPLY_KEYS), Key("target_impedance", "resistance", low=0.0),
        Key("ripple", "ratio", required=True, low=0.0, high=1.0),
        Key("transient_current", "current", required=True, low=0.0),
        Key("part", "tables", schema=lambda table: PART_KINDS[table["kind"]][0]),
    )

    name: str
    voltage_v: float
    parts: tuple[tuple[str, Part], ...]
    supply: SeriesRL
    bead: SeriesRL | Measured | None = None
    target_ohm: float | None = None

    def decoupling_impedance(self, frequency_hz) -> np.ndarray:
        """Z_dec: all parts in parallel at the IC pins."""
        return network_impedance([part for _, part in self.parts], frequency_hz)

    def supply_impedance(self, frequency_hz) -> np.ndarray:
        """The supply path from the pins to the connector (trace or plane, then the bead)."""
        z = self.supply.impedance(frequency_hz)
        return z if self.bead is None else z + self.bead.impedance(frequency_hz)

    @classmethod
    def from_table(cls, r: TableReader, ctx) -> Rail:
        voltage = r.get("voltage")
        supply, bead = SeriesRL(), None
        if r.has("supply_path"):
            s = r.reader("supply_path", cls.SUPPLY_KEYS)
            supply = SeriesRL.from_table(s)
            if s.has("bead"):
                b = s.reader("bead", cls.BEAD_KEYS)
                bead = Measured.from_file(b, "table", ctx, read_impedance_table) if b.has("table") else \
                    SeriesRL.from_table(b)
        target = None
        if r.has("target_impedance"):
            if r.has("ripple") or r.has("transient_current"):
                raise r.error("target_impedance", "give target_impedance, or ripple and transient_current, not both")
            target = r.get("target_impedance")
        elif r.has("ripple") or r.has("transient_current"):
            target = target_impedance(voltage, r.get("ripple"), r.get("transient_current"))
        parts_raw = r.table.get("part")
        if not isinstance(parts_raw, list) or not parts_raw or not all(isinstance(t, dict) for t in parts_raw):
            raise r.error("part", "expected at least one [[rail.part]] table")
        parts = tuple(_part_from_table(r.file, f"{r.sub('part')}[{k}]", t, ctx) for k, t in enumerate(parts_raw))
        return cls(r.get("name"), voltage, parts, supply, bead, target)


def _part_from_table(file: str, key: str, table: dict, ctx) -> tuple[str, Part]:
    kind = table.get("kind") if isinstance(table, dict) else None
    if kind not in PART_KINDS:
        raise BoardError(file, f"{key}.kind", f"allowed: {', '.join(PART_KINDS)}", kind)
    keys, build = PART_KINDS[kind]
    return kind, build(TableReader(file, key, table, keys), ctx)


def self_resonance_hz(capacitance_f: float, inductance_h: float) -> float:
    """f = 1 / (2 pi sqrt(L C)); infinite for a capacitor without inductance."""
    return np.inf if inductance_h <= 0 else 1.0 / (2 * np.pi * np.sqrt(inductance_h * capacitance_f))


def network_impedance(parts, frequency_hz) -> np.ndarray:
    """Impedance of parts in parallel: 1 / sum(1 / Z_i)."""
    f = np.asarray(frequency_hz, dtype=float)
    admittance = np.zeros(f.shape, dtype=complex)
    for part in parts:
        admittance = admittance + 1.0 / part.impedance(f)
    return 1.0 / admittance


def lisn_impedance(frequency_hz, series_ohm: float = 5.0, inductance_h: float = 50e-6, port_ohm: float = 50.0):
    """Impedance a supply line sees into the CISPR 16-1-2 V-network: port_ohm // (series_ohm + j w L).

    ``series_ohm = 0`` gives the plain 50 ohm // 50 uH network.
    """
    branch = series_ohm + 2j * np.pi * np.asarray(frequency_hz, dtype=float) * inductance_h
    return branch * port_ohm / (branch + port_ohm)


def escape_fraction(z_dec, z_path) -> np.ndarray:
    """Fraction of the switching current that leaves through the path: Z_dec / (Z_dec + Z_path)."""
    return np.asarray(z_dec) / (np.asarray(z_dec) + np.asarray(z_path))


def impedance_for_escape(fraction, z_dec, z_path) -> np.ndarray:
    """The |Z_dec|, at the present phase of ``z_dec``, for which |Z_dec / (Z_dec + Z_path)| = ``fraction``.

    With Z = |Z| exp(j theta): |Z|^2 = d^2 |Z exp(j theta) + Z_path|^2 is a
    quadratic in |Z|, (1 - d^2)|Z|^2 - 2 d^2 Re(Z_path exp(-j theta)) |Z| - d^2 |Z_path|^2 = 0,
    whose positive root is the answer; infinite where d >= 1 (any |Z_dec| will do).
    """
    d = np.asarray(fraction, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        rotated = (z_path * np.exp(-1j * np.angle(z_dec))).real
        a, b, c = 1 - d**2, -2 * d**2 * rotated, -(d**2) * np.abs(z_path) ** 2
        return np.where(a > 0, (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a), np.inf)


def anti_resonances(frequency_hz, z_ohm, min_prominence_db: float = 3.0):
    """Peaks of |Z|: their frequencies, |Z| and the band around each where |Z| is within 3 dB of the peak.

    Returns
    -------
    list of (f_peak, |Z|_peak, f_low, f_high)
    """
    from scipy.signal import find_peaks  # scipy.signal is slow to import; only rails need it

    f = np.asarray(frequency_hz, dtype=float)
    level = 20 * np.log10(np.abs(z_ohm))
    peaks, _ = find_peaks(level, prominence=min_prominence_db)
    out = []
    for p in peaks:
        below = level < level[p] - 3.0
        left = np.flatnonzero(below[:p])
        right = np.flatnonzero(below[p:])
        lo = f[left[-1]] if left.size else f[0]
        hi = f[p + right[0]] if right.size else f[-1]
        out.append((float(f[p]), float(np.abs(z_ohm[p])), float(lo), float(hi)))
    return out


def target_impedance(voltage_v: float, ripple_fraction: float, transient_a: float) -> float:
    """Z_t = V_dd x allowed ripple / transient current (Smith et al. 1999)."""
    return voltage_v * ripple_fraction / transient_a


def part_summary(kind: str, part) -> dict:
    """What a rail listing shows of one part: its values and, for a capacitor, its self-resonance."""
    if isinstance(part, Capacitor):
        return {"kind": kind, "capacitance_f": part.capacitance_f, "esr_ohm": part.esr_ohm,
                "inductance_h": part.inductance_h, "count": part.count,
                "srf_hz": part.srf_hz if np.isfinite(part.srf_hz) else None}
    if isinstance(part, Plane):
        return {"kind": kind, "capacitance_f": part.capacitance_f, "count": 1, "srf_hz": None}
    if isinstance(part, SeriesRL):
        return {"kind": kind, "resistance_ohm": part.resistance_ohm, "inductance_h": part.inductance_h,
                "count": 1, "srf_hz": None}
    # a measured part resonates where its reactance changes sign
    x = part.z_ohm.imag
    crossing = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
    srf = float(part.frequency_hz[crossing[0]]) if crossing.size else None
    return {"kind": kind, "file": part.source, "count": part.count, "srf_hz": srf}


def rail_summary(rail: Rail, span_hz: tuple[float, float]) -> dict:
    """Parts with their self-resonances and the anti-resonance peaks of Z_dec around the analysed span."""
    grid = np.geomspace(span_hz[0] / 10, span_hz[1] * 2, 4000)
    return {
        "name": rail.name,
        "voltage_v": rail.voltage_v,
        "target_impedance_ohm": rail.target_ohm,
        "parts": [part_summary(kind, part) for kind, part in rail.parts],
        "anti_resonances": [
            {"frequency_hz": f, "impedance_ohm": z, "band_hz": [lo, hi]}
            for f, z, lo, hi in anti_resonances(grid, rail.decoupling_impedance(grid))
        ],
    }
