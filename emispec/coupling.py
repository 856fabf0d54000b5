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

import numpy as np
from scipy import constants

from .decoupling import lisn_impedance

__all__ = [
    "LOOP_CONSTANT",
    "loop_field",
    "cable_field",
    "near_field",
    "interpolate_db_log_f",
    "LoopPath",
    "CablePath",
    "TransferPath",
    "ConductedPath",
    "COMMON_MODE_OHM",
    "Path",
]

#: pi eta0 / c^2 [s^2 ohm / m^2]: |E| = K f^2 A I / r for a small loop in free
#: space (Paul 2006, sec. 8.1.2, who rounds it to 1.316e-14).
LOOP_CONSTANT = np.pi * constants.mu_0 * constants.c / constants.c**2

#: Field doubling (+6 dB) of an in-phase reflection from a ground plane, as
#: on an open-area test site (Ott 2009, ch. 12).
GROUND_REFLECTION = 2.0


def loop_field(frequency_hz, current_a, area_m2, distance_m, ground_reflection=True):
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
    ground_reflection : bool
        Add the +6 dB of a ground-plane reflection.

    References
    ----------
    Paul (2006), sec. 8.1.2; Ott (2009), ch. 12.
    """
    f = np.asarray(frequency_hz, dtype=float)
    factor = GROUND_REFLECTION if ground_reflection else 1.0
    return factor * LOOP_CONSTANT * f**2 * area_m2 * np.asarray(current_a) / distance_m


def cable_field(frequency_hz, current_a, length_m, distance_m, ground_reflection=True):
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
    ground_reflection : bool
        Add the +6 dB of a ground-plane reflection.

    References
    ----------
    Paul (2006), sec. 8.1.3; Ott (2009), ch. 12.
    """
    f = np.asarray(frequency_hz, dtype=float)
    effective_length = np.minimum(length_m, 0.5 * constants.c / f)
    factor = GROUND_REFLECTION if ground_reflection else 1.0
    return factor * 0.5 * constants.mu_0 * f * effective_length * np.asarray(current_a) / distance_m


def near_field(frequency_hz, distance_m):
    """True where the distance is inside the reactive near field, r < lambda / (2 pi)."""
    return distance_m < constants.c / (2 * np.pi * np.asarray(frequency_hz, dtype=float))


def interpolate_db_log_f(frequency_hz, table_hz, table_db):
    """Interpolate a dB table linearly over log frequency, holding the end values.

    Parameters
    ----------
    frequency_hz : array_like
        Frequencies to evaluate [Hz].
    table_hz, table_db : array_like
        Ascending table frequencies [Hz] and their values [dB].
    """
    return np.interp(np.log10(frequency_hz), np.log10(table_hz), table_db)


#: Common-mode impedance of an attached cable, as in the CDNs and ISNs of
#: CISPR 16-1-2 and IEC 61000-4-6 (150 ohm).
COMMON_MODE_OHM = 150.0


@dataclass(frozen=True)
class LoopPath:
    """Differential-mode radiation of the loop the source current flows in."""

    name: str
    area_m2: float
    distance_m: float | None = None
    ground_reflection: bool = True
    input: str = "current"

    def reading(self, frequency_hz, source, limit_distance_m):
        return loop_field(frequency_hz, source["current"], self.area_m2, limit_distance_m, self.ground_reflection)


@dataclass(frozen=True)
class CablePath:
    """Common-mode radiation of an attached cable.

    ``drive = "ratio"``: the cable's common-mode current is ``ratio`` times the
    source current.  ``drive = "escape"``: it is ``ratio`` (default 1) times the
    rail current that escapes the decoupling into the cable's common-mode
    ``termination_ohm``; a ratio below 1 stands for the part of an escaping
    differential current that converts to common mode.
    """

    name: str
    length_m: float
    ratio: float = 1.0
    distance_m: float | None = None
    ground_reflection: bool = True
    termination_ohm: float = COMMON_MODE_OHM
    drive: str = "ratio"

    @property
    def input(self) -> str:
        return "current" if self.drive == "ratio" else "escape"

    def termination(self, frequency_hz) -> np.ndarray:
        return np.full(np.shape(frequency_hz), self.termination_ohm, dtype=complex)

    def reading(self, frequency_hz, source, limit_distance_m):
        current = self.ratio * source[self.input]
        return cable_field(frequency_hz, current, self.length_m, limit_distance_m, self.ground_reflection)


@dataclass(frozen=True)
class TransferPath:
    """A user's gain table from the source voltage, current or escaping rail current to the limit's unit.

    The gain is in dB re the limit unit per source unit (e.g. dB(uV/m)/uV).
    A table taken at ``distance_m`` is referred to the limit's distance by
    inverse distance.  An ``escape`` input sees ``termination_ohm`` beyond the
    supply path.
    """

    name: str
    input: str
    table_hz: np.ndarray
    table_db: np.ndarray
    distance_m: float | None = None
    termination_ohm: float = COMMON_MODE_OHM

    def termination(self, frequency_hz) -> np.ndarray:
        return np.full(np.shape(frequency_hz), self.termination_ohm, dtype=complex)

    def reading(self, frequency_hz, source, limit_distance_m):
        gain = 10.0 ** (interpolate_db_log_f(frequency_hz, self.table_hz, self.table_db) / 20.0)
        scale = 1.0 if self.distance_m is None or limit_distance_m is None else self.distance_m / limit_distance_m
        return source[self.input] * gain * scale


@dataclass(frozen=True)
class ConductedPath:
    """The escaping rail current into a CISPR 16-1-2 LISN, read at its 50 ohm port.

    ``measure = "voltage"`` gives the port voltage (limits in dBuV), ``"current"``
    the current itself (limits in dBuA).  ``series_ohm`` is the resistor in
    series with the 50 uH inductor (5 ohm in the 50 uH + 5 ohm network; 0 for
    the plain 50 ohm // 50 uH network).
    """

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


Path = LoopPath | CablePath | TransferPath | ConductedPath
