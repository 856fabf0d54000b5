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

import csv
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import constants, signal

__all__ = [
    "Capacitor",
    "Plane",
    "Regulator",
    "Measured",
    "SeriesRL",
    "Rail",
    "TouchstoneError",
    "self_resonance_hz",
    "network_impedance",
    "lisn_impedance",
    "escape_fraction",
    "anti_resonances",
    "target_impedance",
    "read_touchstone",
    "read_impedance_table",
    "part_summary",
    "rail_summary",
]


class TouchstoneError(ValueError):
    """A Touchstone or impedance-table file that cannot be used."""


@dataclass(frozen=True)
class Capacitor:
    """``count`` equal capacitors in parallel, each a series ESR + (ESL + mounting L) + C."""

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


@dataclass(frozen=True)
class Plane:
    """A power/ground plane pair as a parallel-plate capacitor C = eps0 epsr A / d."""

    area_m2: float
    separation_m: float
    permittivity: float

    @property
    def capacitance_f(self) -> float:
        return constants.epsilon_0 * self.permittivity * self.area_m2 / self.separation_m

    def impedance(self, frequency_hz) -> np.ndarray:
        return 1 / (2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.capacitance_f)


@dataclass(frozen=True)
class SeriesRL:
    """A series resistance and inductance: a regulator output, a supply trace, a bead's simple model."""

    resistance_ohm: float = 0.0
    inductance_h: float = 0.0

    def impedance(self, frequency_hz) -> np.ndarray:
        return self.resistance_ohm + 2j * np.pi * np.asarray(frequency_hz, dtype=float) * self.inductance_h


Regulator = SeriesRL


@dataclass(frozen=True)
class Measured:
    """An impedance known at measured frequencies (Touchstone file or table), ``count`` in parallel.

    Between points |Z| is interpolated in log over log f and the phase linearly
    over log f.  Beyond the measured range the part keeps its last resistance and
    its reactance scales like an inductor (above) or a capacitor (below).
    """

    frequency_hz: np.ndarray
    z_ohm: np.ndarray
    count: int = 1
    source: str = field(default="", compare=False)

    def impedance(self, frequency_hz) -> np.ndarray:
        f = np.asarray(frequency_hz, dtype=float)
        lf, lf_data = np.log10(f), np.log10(self.frequency_hz)
        magnitude = 10 ** np.interp(lf, lf_data, np.log10(np.abs(self.z_ohm)))
        phase = np.interp(lf, lf_data, np.unwrap(np.angle(self.z_ohm)))
        z = magnitude * np.exp(1j * phase)
        for edge, beyond in ((0, f < self.frequency_hz[0]), (-1, f > self.frequency_hz[-1])):
            if beyond.any():
                z_edge, f_edge = self.z_ohm[edge], self.frequency_hz[edge]
                scale = f[beyond] / f_edge if z_edge.imag > 0 else f_edge / f[beyond]
                z[beyond] = z_edge.real + 1j * z_edge.imag * scale
        return z / self.count


Part = Capacitor | Plane | SeriesRL | Measured


@dataclass(frozen=True)
class Rail:
    """A supply rail: its decoupling parts at the IC pins and its path to the outside."""

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


def anti_resonances(frequency_hz, z_ohm, min_prominence_db: float = 3.0):
    """Peaks of |Z|: their frequencies, |Z| and the band around each where |Z| is within 3 dB of the peak.

    Returns
    -------
    list of (f_peak, |Z|_peak, f_low, f_high)
    """
    f = np.asarray(frequency_hz, dtype=float)
    level = 20 * np.log10(np.abs(z_ohm))
    peaks, _ = signal.find_peaks(level, prominence=min_prominence_db)
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


def read_touchstone(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Impedance from a one-port reflection (.s1p) or a two-port shunt-through measurement (.s2p).

    Needs scikit-rf (``pip install 'emispec[touchstone]'``).
    """
    try:
        import skrf
    except ImportError:
        raise TouchstoneError(
            "reading Touchstone files needs scikit-rf; install it with: pip install 'emispec[touchstone]'"
        ) from None
    try:
        network = skrf.Network(str(path))
    except Exception as err:  # noqa: BLE001 - skrf raises many kinds
        raise TouchstoneError(f"cannot read {path} as Touchstone ({err})") from None
    z0 = network.z0[:, 0]
    if network.nports == 1:
        s11 = network.s[:, 0, 0]
        z = z0 * (1 + s11) / (1 - s11)
    elif network.nports == 2:
        s21 = network.s[:, 1, 0]
        z = 0.5 * z0 * s21 / (1 - s21)
    else:
        raise TouchstoneError(f"{path}: expected a 1-port or a 2-port (shunt-through) file")
    return np.asarray(network.f, dtype=float), np.asarray(z, dtype=complex)


def read_impedance_table(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """CSV with a header: frequency_hz plus magnitude_ohm and phase_deg, or resistance_ohm and reactance_ohm.

    Lines starting with '#' are comments.
    """
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as err:
        raise TouchstoneError(f"cannot read {path} ({err.strerror})") from None
    rows = list(csv.DictReader(line for line in text.splitlines() if line.strip() and not line.startswith("#")))
    if not rows:
        raise TouchstoneError(f"{path}: no data rows")
    columns = set(rows[0])
    try:
        f = np.array([float(r["frequency_hz"]) for r in rows])
        if {"magnitude_ohm", "phase_deg"} <= columns:
            z = np.array([float(r["magnitude_ohm"]) * np.exp(1j * np.radians(float(r["phase_deg"]))) for r in rows])
        elif {"resistance_ohm", "reactance_ohm"} <= columns:
            z = np.array([float(r["resistance_ohm"]) + 1j * float(r["reactance_ohm"]) for r in rows])
        else:
            raise KeyError("columns")
    except (KeyError, ValueError):
        raise TouchstoneError(
            f"{path}: expected columns frequency_hz with magnitude_ohm and phase_deg, or with resistance_ohm and "
            "reactance_ohm"
        ) from None
    if np.any(f <= 0) or np.any(np.diff(f) <= 0) or np.any(np.abs(z) == 0) or not np.all(np.isfinite(z)):
        raise TouchstoneError(f"{path}: frequencies must be > 0 and ascending, impedances finite and non-zero")
    return f, z


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
