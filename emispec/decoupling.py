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

With a ``package`` part the switching current is drawn at the die: the
on-die capacitance C_die shunts it there, and the package's R + L lies
between the die and the pins where the board's decoupling sits.  Every
escape fraction is then a Moebius function of Z_dec,
alpha Z_dec / (beta Z_dec + gamma) (:meth:`Rail.escape_coefficients`).

References
----------
Series R-L-C capacitor model, self-resonance 1/(2 pi sqrt(L C)): e.g.
E. Bogatin, *Signal and Power Integrity - Simplified*, 2nd ed., 2009, ch. 8.
Target impedance Z_t = V_dd x ripple / delta I: L. D. Smith et al., "Power
distribution system design methodology and capacitor selection for modern CMOS
technology", IEEE Trans. Adv. Packag. 22(3), 1999.
Artificial mains network: CISPR 16-1-2, 50 ohm // (50 uH + 5 ohm) V-network.
Shunt-through impedance measurement: Z = (Z0 / 2) S21 / (1 - S21).
Spreading inductance of the plane pair between a capacitor's via and the IC's via,
L = (mu0 / pi) h ln(2 s / D): H. Johnson, "Parasitic inductance of bypass
capacitors", EDN, 2003 (the two-wire line of the vias and their images in the planes).
Dielectric loss of the plane pair: Y = j w C (1 - j tan delta) (e.g. D. M. Pozar,
*Microwave Engineering*, 4th ed., 2012, sec. 1.3).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import ClassVar

import numpy as np

from .constants import EPSILON_0, MU_0
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
    "Package",
    "Rail",
    "spreading_inductance",
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

#: Via drill diameter assumed for the spreading inductance when none is given (common practice, no source).
VIA_DIAMETER_M = 0.3e-3
#: Frequency up to which the target impedance is checked when the rail names none and has no package
#: (common practice, no source: a board's decoupling matters up to the package/die resonance, typically
#: around 100 MHz).
TARGET_BANDWIDTH_HZ = 100e6


def spreading_inductance(separation_m: float, distance_m: float, via_diameter_m: float = VIA_DIAMETER_M) -> float:
    """Inductance of the plane pair between a capacitor's via and the IC's via [H].

    L = (mu0 / pi) h ln(2 s / D) for vias of diameter D a distance s apart in planes h apart (s >> D).

    References
    ----------
    H. Johnson, "Parasitic inductance of bypass capacitors", EDN, 2003.
    """
    return MU_0 / np.pi * separation_m * np.log(2 * distance_m / via_diameter_m)


@dataclass(frozen=True)
class Capacitor:
    """``count`` equal capacitors in parallel, each a series ESR + (ESL + mounting L + spreading L) + C.

    The spreading inductance of the plane pair between the capacitor and the IC comes from its ``distance``
    (:func:`spreading_inductance`); the mutual inductance between the ``count`` capacitors' paths is left out,
    which makes several capacitors at one spot look a little better than they are.
    """

    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("kind", "text"), Key("capacitance", "capacitance", required=True, low=0.0, high=1.0),
        Key("esr", "resistance", default=0.0, high=1e3, **_ZERO_OR_MORE),
        Key("esl", "inductance", default=0.0, high=1e-6, **_ZERO_OR_MORE),
        Key("mounting_inductance", "inductance", default=0.0, high=1e-6, **_ZERO_OR_MORE),
        Key("count", "count", default=1, low=1, high=10000),
        Key("distance", "length", low=0.0, high=1.0),
        Key("via_diameter", "length", default=VIA_DIAMETER_M, low=0.0, high=0.01),
        Key("plane_separation", "length", low=0.0, high=0.01),
    )

    capacitance_f: float
    esr_ohm: float = 0.0
    esl_h: float = 0.0
    mounting_h: float = 0.0
    count: int = 1
    spreading_h: float = 0.0

    @property
    def inductance_h(self) -> float:
        return self.esl_h + self.mounting_h + self.spreading_h

    def summary(self) -> dict:
        return {"capacitance_f": self.capacitance_f, "esr_ohm": self.esr_ohm, "inductance_h": self.inductance_h,
                "spreading_inductance_h": self.spreading_h, "count": self.count,
                "srf_hz": self.srf_hz if np.isfinite(self.srf_hz) else None}

    def scaled(self, inductance: float, capacitance: float) -> Capacitor:
        return replace(self, capacitance_f=self.capacitance_f * capacitance, esl_h=self.esl_h * inductance,
                       mounting_h=self.mounting_h * inductance, spreading_h=self.spreading_h * inductance)

    @property
    def srf_hz(self) -> float:
        return self_resonance_hz(self.capacitance_f, self.inductance_h)

    def impedance(self, frequency_hz) -> np.ndarray:
        w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
        return (self.esr_ohm + 1j * w * self.inductance_h + 1 / (1j * w * self.capacitance_f)) / self.count

    @classmethod
    def from_table(cls, r: TableReader, ctx, plane_separation: float | None = None) -> Capacitor:
        spreading = 0.0
        if r.has("distance"):
            separation = r.get("plane_separation") if r.has("plane_separation") else plane_separation
            if separation is None:
                raise r.error("plane_separation", "missing; the spreading inductance needs the plane pair's "
                              "separation (or one plane part on the rail)")
            distance, diameter = r.get("distance"), r.get("via_diameter")
            if not 2 * distance > diameter * 1.0001:
                raise r.error("distance", f"must be more than half the via diameter ({diameter * 1e3:g} mm)",
                              r.table["distance"])
            spreading = spreading_inductance(separation, distance, diameter)
        elif r.has("plane_separation") or r.has("via_diameter"):
            raise r.error("distance", "missing; plane_separation and via_diameter go with a distance to the IC")
        return cls(r.get("capacitance"), r.get("esr"), r.get("esl"), r.get("mounting_inductance"), r.get("count"),
                   spreading)


@dataclass(frozen=True)
class Plane:
    """A power/ground plane pair as a parallel-plate capacitor C = eps0 epsr A / d with dielectric loss.

    Y = j w C (1 - j tan delta).  The loss tangent defaults to 0 (lossless), which keeps the anti-resonance
    peaks as high as they can be; FR-4 is about 0.02 (common practice, no source).
    """

    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("kind", "text"), Key("area", "area", required=True, low=0.0, high=1.0),
        Key("separation", "length", required=True, low=0.0, high=0.01),
        Key("permittivity", "number", required=True, low=1.0, high=100.0, what="a relative permittivity"),
        Key("loss_tangent", "number", default=0.0, low=0.0, high=0.2, what="a loss tangent"),
    )

    area_m2: float
    separation_m: float
    permittivity: float
    loss_tangent: float = 0.0

    @property
    def capacitance_f(self) -> float:
        return EPSILON_0 * self.permittivity * self.area_m2 / self.separation_m

    def impedance(self, frequency_hz) -> np.ndarray:
        w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
        return 1 / (1j * w * self.capacitance_f * (1 - 1j * self.loss_tangent))

    def summary(self) -> dict:
        return {"capacitance_f": self.capacitance_f, "loss_tangent": self.loss_tangent, "count": 1, "srf_hz": None}

    def scaled(self, inductance: float, capacitance: float) -> Plane:
        return replace(self, permittivity=self.permittivity * capacitance)

    @classmethod
    def from_table(cls, r: TableReader, ctx, plane_separation: float | None = None) -> Plane:
        permittivity = r.get("permittivity")
        return cls(r.get("area"), r.get("separation"), permittivity, r.get("loss_tangent"))


@dataclass(frozen=True)
class SeriesRL:
    """A series resistance and inductance: a regulator output, a supply trace, a bead's simple model."""

    KEYS: ClassVar[tuple[Key, ...]] = (Key("resistance", "resistance", default=0.0, high=1e3, **_ZERO_OR_MORE),
                                       Key("inductance", "inductance", default=0.0, high=1e-3, **_ZERO_OR_MORE))

    resistance_ohm: float = 0.0
    inductance_h: float = 0.0

    def impedance(self, frequency_hz) -> np.ndarray:
        return self.resistance_ohm + 2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.inductance_h

    def summary(self) -> dict:
        return {"resistance_ohm": self.resistance_ohm, "inductance_h": self.inductance_h, "count": 1, "srf_hz": None}

    def scaled(self, inductance: float, capacitance: float) -> SeriesRL:
        return replace(self, inductance_h=self.inductance_h * inductance)

    @classmethod
    def from_table(cls, r: TableReader, ctx=None, plane_separation=None) -> SeriesRL:
        return cls(r.get("resistance"), r.get("inductance"))

    @classmethod
    def regulator_from_table(cls, r: TableReader, ctx, plane_separation=None) -> SeriesRL:
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

    def summary(self) -> dict:
        x = self.z_ohm.imag  # a measured part resonates where its reactance changes sign
        crossing = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
        srf = float(self.frequency_hz[crossing[0]]) if crossing.size else None
        return {"file": self.source, "count": self.count, "srf_hz": srf}

    def scaled(self, inductance: float, capacitance: float) -> Measured:
        return self  # a measurement is what it is

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
    def touchstone_from_table(cls, r: TableReader, ctx, plane_separation=None) -> Measured:
        return cls.from_file(r, "file", ctx, read_touchstone, r.get("count"))

    @classmethod
    def table_from_table(cls, r: TableReader, ctx, plane_separation=None) -> Measured:
        return cls.from_file(r, "file", ctx, read_impedance_table, r.get("count"))


@dataclass(frozen=True)
class Package:
    """The IC package between the die and the board's pins: series R + L, and the on-die capacitance.

    Not a part in parallel with the others: the switching current is drawn at the die, where the on-die
    capacitance (with its ESR) shunts it, and reaches the pins through the package.
    """

    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("kind", "text"), Key("inductance", "inductance", required=True, low=0.0, high=1e-6),
        Key("resistance", "resistance", default=0.0, low=0.0, low_open=False, high=10.0),
        Key("die_capacitance", "capacitance", required=True, low=0.0, high=1e-3),
        Key("die_esr", "resistance", default=0.0, low=0.0, low_open=False, high=10.0),
    )

    inductance_h: float
    resistance_ohm: float
    die_capacitance_f: float
    die_esr_ohm: float = 0.0

    @property
    def resonance_hz(self) -> float:
        """Where the package inductance resonates with the on-die capacitance."""
        return self_resonance_hz(self.die_capacitance_f, self.inductance_h)

    def series_impedance(self, frequency_hz) -> np.ndarray:
        return self.resistance_ohm + 2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.inductance_h

    def die_impedance(self, frequency_hz) -> np.ndarray:
        return self.die_esr_ohm + 1 / (2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.die_capacitance_f)

    def scaled(self, inductance: float, capacitance: float) -> Package:
        return replace(self, inductance_h=self.inductance_h * inductance,
                       die_capacitance_f=self.die_capacitance_f * capacitance)

    @classmethod
    def from_table(cls, r: TableReader, ctx, plane_separation=None) -> Package:
        return cls(r.get("inductance"), r.get("resistance"), r.get("die_capacitance"), r.get("die_esr"))


Part = Capacitor | Plane | SeriesRL | Measured

#: Board-file part ``kind`` -> (its keys, how its table is read).
PART_KINDS = {
    "capacitor": (Capacitor.KEYS, Capacitor.from_table),
    "plane": (Plane.KEYS, Plane.from_table),
    "regulator": ((Key("kind", "text"),) + SeriesRL.KEYS, SeriesRL.regulator_from_table),
    "touchstone": (Measured.KEYS, Measured.touchstone_from_table),
    "table": (Measured.KEYS, Measured.table_from_table),
    "package": (Package.KEYS, Package.from_table),
}


@dataclass(frozen=True)
class Rail:
    """A supply rail: its decoupling parts at the IC pins, the package to the die, and its path to the outside.

    ``inductance_tolerance`` and ``capacitance_tolerance`` (fractions, default 0.2) are the part tolerances
    over which |Z_dec| is searched for its largest value at each frequency; ``target_up_to_hz`` the
    frequency up to which the target impedance is checked.
    """

    BEAD_KEYS: ClassVar[tuple[Key, ...]] = SeriesRL.KEYS + (Key("table", "text"),)
    SUPPLY_KEYS: ClassVar[tuple[Key, ...]] = SeriesRL.KEYS + (Key("bead", "table", schema=BEAD_KEYS),)
    KEYS: ClassVar[tuple[Key, ...]] = (
        Key("name", "text", required=True), Key("voltage", "voltage", required=True, low=0.0, high=1e4),
        Key("supply_path", "table", schema=SUPPLY_KEYS), Key("target_impedance", "resistance", low=0.0, high=1e3),
        Key("ripple", "ratio", required=True, low=0.0, high=1.0),
        Key("transient_current", "current", required=True, low=0.0, high=1e4),
        Key("target_up_to", "frequency", low=0.0, high=100e9),
        Key("inductance_tolerance", "ratio", default=0.2, low=0.0, high=0.9, low_open=False),
        Key("capacitance_tolerance", "ratio", default=0.2, low=0.0, high=0.9, low_open=False),
        Key("part", "tables", schema=lambda table: PART_KINDS[table["kind"]][0]),
    )

    name: str
    voltage_v: float
    parts: tuple[tuple[str, Part], ...]
    supply: SeriesRL
    bead: SeriesRL | Measured | None = None
    target_ohm: float | None = None
    package: Package | None = None
    target_up_to_hz: float = TARGET_BANDWIDTH_HZ
    inductance_tolerance: float = 0.2
    capacitance_tolerance: float = 0.2

    def decoupling_impedance(self, frequency_hz) -> np.ndarray:
        """Z_dec: all parts in parallel at the IC pins."""
        return network_impedance([part for _, part in self.parts], frequency_hz)

    def supply_impedance(self, frequency_hz) -> np.ndarray:
        """The supply path from the pins to the connector (trace or plane, then the bead)."""
        z = self.supply.impedance(frequency_hz)
        return z if self.bead is None else z + self.bead.impedance(frequency_hz)

    def escape_coefficients(self, frequency_hz, z_termination) -> tuple:
        """(alpha, beta, gamma): the fraction of the switching current leaving through the supply path into
        ``z_termination`` is alpha Z_dec / (beta Z_dec + gamma).

        Without a package: 1, 1, Z_p (the current divider Z_dec / (Z_dec + Z_p), Z_p = Z_supply + Z_term).
        With one (die capacitance Z_c, package Z_k): Z_c, Z_c + Z_k + Z_p, (Z_c + Z_k) Z_p.
        """
        z_p = self.supply_impedance(frequency_hz) + z_termination
        if self.package is None:
            one = np.ones(np.shape(z_p), dtype=complex)
            return one, one, z_p
        z_c = self.package.die_impedance(frequency_hz)
        z_k = self.package.series_impedance(frequency_hz)
        return z_c, z_c + z_k + z_p, (z_c + z_k) * z_p

    def escape(self, frequency_hz, z_termination, z_dec=None) -> np.ndarray:
        """Complex fraction of the switching current that leaves through the supply path into ``z_termination``."""
        z = self.decoupling_impedance(frequency_hz) if z_dec is None else z_dec
        alpha, beta, gamma = self.escape_coefficients(frequency_hz, z_termination)
        return alpha * z / (beta * z + gamma)

    def scaled(self, inductance: float, capacitance: float) -> Rail:
        """The rail with every part's inductances and capacitances scaled (measured parts stay as measured)."""
        parts = tuple((kind, part.scaled(inductance, capacitance)) for kind, part in self.parts)
        package = None if self.package is None else self.package.scaled(inductance, capacitance)
        return replace(self, parts=parts, package=package)

    def worst_impedance(self, frequency_hz, steps: int = 9) -> np.ndarray:
        """The largest |Z_dec| at each frequency with the inductances and capacitances anywhere within their
        tolerances (all of a kind moving together, on a grid of ``steps`` x ``steps``)."""
        f = np.asarray(frequency_hz, dtype=float)
        worst = np.abs(self.decoupling_impedance(f))
        for k_l in np.linspace(1 - self.inductance_tolerance, 1 + self.inductance_tolerance, steps):
            for k_c in np.linspace(1 - self.capacitance_tolerance, 1 + self.capacitance_tolerance, steps):
                worst = np.maximum(worst, np.abs(self.scaled(k_l, k_c).decoupling_impedance(f)))
        return worst

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
        keys = [f"{r.sub('part')}[{k}]" for k in range(len(parts_raw))]
        planes = [(key, t) for key, t in zip(keys, parts_raw) if t.get("kind") == "plane"]
        separation = None
        if len(planes) == 1:  # the plane pair the capacitors' spreading inductance runs in
            separation = TableReader(r.file, planes[0][0], planes[0][1], Plane.KEYS).get("separation")
        parsed = [_part_from_table(r.file, key, t, ctx, separation) for key, t in zip(keys, parts_raw)]
        packages = [(key, part) for key, (kind, part) in zip(keys, parsed) if kind == "package"]
        if len(packages) > 1:
            raise BoardError(r.file, packages[1][0], "a rail has at most one package")
        parts = tuple((kind, part) for kind, part in parsed if kind != "package")
        if not parts:
            raise r.error("part", "needs at least one decoupling part besides the package")
        package = packages[0][1] if packages else None
        default_bandwidth = package.resonance_hz if package is not None else TARGET_BANDWIDTH_HZ
        up_to = r.get("target_up_to") if r.has("target_up_to") else default_bandwidth
        return cls(r.get("name"), voltage, parts, supply, bead, target, package, up_to,
                   r.get("inductance_tolerance"), r.get("capacitance_tolerance"))


def _part_from_table(file: str, key: str, table: dict, ctx, plane_separation=None) -> tuple[str, Part]:
    kind = table.get("kind") if isinstance(table, dict) else None
    if kind not in PART_KINDS:
        raise BoardError(file, f"{key}.kind", f"allowed: {', '.join(PART_KINDS)}", kind)
    keys, build = PART_KINDS[kind]
    return kind, build(TableReader(file, key, table, keys), ctx, plane_separation)


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


def impedance_for_escape(fraction, z_dec, alpha, beta=None, gamma=None) -> np.ndarray:
    """The |Z_dec|, at the present phase of ``z_dec``, for which |alpha Z_dec / (beta Z_dec + gamma)| = ``fraction``.

    Called with a path impedance only (``impedance_for_escape(d, z_dec, z_path)``) it inverts the plain divider
    Z_dec / (Z_dec + Z_path).  With Z = r exp(j theta), r |alpha| = d |beta r exp(j theta) + gamma| is a
    quadratic in r, (|alpha|^2 - d^2 |beta|^2) r^2 - 2 d^2 Re(beta exp(j theta) conj(gamma)) r - d^2 |gamma|^2 = 0,
    whose positive root is the answer; infinite where no |Z_dec| reaches ``fraction`` (any value will do).
    """
    if beta is None:
        alpha, beta, gamma = np.ones_like(alpha), np.ones_like(alpha), alpha
    d = np.asarray(fraction, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        cross = (beta * np.exp(1j * np.angle(z_dec)) * np.conj(gamma)).real
        a = np.abs(alpha) ** 2 - d**2 * np.abs(beta) ** 2
        b = -2 * d**2 * cross
        c = -(d**2) * np.abs(gamma) ** 2
        return np.where(a > 0, (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a), np.inf)


def _prominent_peaks(level: np.ndarray, prominence: float) -> np.ndarray:
    """Indices of local maxima standing at least ``prominence`` above the higher of the two lowest points that
    separate them from higher ground on either side (the topographic prominence, as scipy.signal.find_peaks
    defines it; written here to spare every start the import of scipy.signal)."""
    inner = np.flatnonzero((level[1:-1] > level[:-2]) & (level[1:-1] >= level[2:])) + 1
    keep = []
    for p in inner:
        higher_left = np.flatnonzero(level[:p] > level[p])
        higher_right = np.flatnonzero(level[p + 1:] > level[p])
        start = higher_left[-1] + 1 if higher_left.size else 0
        stop = p + 1 + higher_right[0] if higher_right.size else level.size
        base = max(level[start:p + 1].min(), level[p:stop].min())
        if level[p] - base >= prominence:
            keep.append(p)
    return np.array(keep, dtype=np.int64)


def anti_resonances(frequency_hz, z_ohm, min_prominence_db: float = 3.0):
    """Peaks of |Z|: their frequencies, |Z| and the band around each where |Z| is within 3 dB of the peak.

    Returns
    -------
    list of (f_peak, |Z|_peak, f_low, f_high)
    """
    f = np.asarray(frequency_hz, dtype=float)
    level = 20 * np.log10(np.abs(z_ohm))
    peaks = _prominent_peaks(level, min_prominence_db)
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
    """What a rail listing shows of one part: its kind, values and self-resonance (None where it has none)."""
    return {"kind": kind, **part.summary()}


def rail_summary(rail: Rail, span_hz: tuple[float, float]) -> dict:
    """Parts with their self-resonances and the anti-resonance peaks of Z_dec around the analysed span."""
    grid = np.geomspace(span_hz[0] / 10, span_hz[1] * 2, 4000)
    return {
        "name": rail.name,
        "voltage_v": rail.voltage_v,
        "target_impedance_ohm": rail.target_ohm,
        "parts": [part_summary(kind, part) for kind, part in rail.parts],
        "package": None if rail.package is None else {
            "inductance_h": rail.package.inductance_h, "resistance_ohm": rail.package.resistance_ohm,
            "die_capacitance_f": rail.package.die_capacitance_f, "resonance_hz": rail.package.resonance_hz},
        "target_up_to_hz": rail.target_up_to_hz,
        "tolerance": {"inductance": rail.inductance_tolerance, "capacitance": rail.capacitance_tolerance},
        "anti_resonances": [
            {"frequency_hz": f, "impedance_ohm": z, "band_hz": [lo, hi]}
            for f, z, lo, hi in anti_resonances(grid, rail.decoupling_impedance(grid))
        ],
    }
