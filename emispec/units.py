"""Quantities with SI prefixes, as written in board and limit files.

Board files spell quantities the way engineers write them (``"1.2 ns"``,
``"100 nF"``, ``"20 mohm"``, ``"4 cm2"``, ``"0.5 %"``, ``"-30 dB"``).  This
module turns such a string, or a plain number in SI base units, into a float
in SI base units, refusing a quantity of the wrong dimension.  Level
conversions (dBuV and friends) live here too, because they are the other
edge between the SI core and what people read.

A general unit library (pint) was weighed and left out: the handful of
dimensions needed here, the ``cm2`` spelling, decibels as plain level
differences and the exact one-line error messages are simpler to get right
in a small parser than by configuring pint's logarithmic units.
"""

from __future__ import annotations

import math
import re

import numpy as np

__all__ = [
    "QuantityError",
    "DIMENSIONS",
    "parse_quantity",
    "format_quantity",
    "to_db",
    "from_db",
    "db_micro",
]


class QuantityError(ValueError):
    """A quantity string that cannot be read as the requested dimension."""


_PREFIXES = {
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "\u00b5": 1e-6,  # micro sign
    "\u03bc": 1e-6,  # Greek mu
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}

# dimension -> (unit spellings, human description, SI unit shown in messages)
DIMENSIONS: dict[str, tuple[tuple[str, ...], str]] = {
    "frequency": (("Hz",), "Hz"),
    "time": (("s",), "s"),
    "voltage": (("V",), "V"),
    "current": (("A",), "A"),
    "resistance": (("ohm", "Ohm", "ohms", "\u03a9", "\u2126"), "ohm"),
    "inductance": (("H",), "H"),
    "capacitance": (("F",), "F"),
    "length": (("m",), "m"),
    "area": (("m2", "m^2", "m\u00b2"), "m2"),
    "ratio": (("%",), "fraction or %"),
    "decibel": (("dB",), "dB"),
}

#: Prefixes only some dimensions take: centi for lengths and areas (cm, cm2), as the trade writes them.
_OWN_PREFIXES = {"length": {"c": 1e-2}, "area": {"c": 1e-2}}

# ASCII digits only: a full-width or other Unicode digit is not a number here
_NUMBER = r"[-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?"
_QUANTITY = re.compile(rf"^\s*({_NUMBER})\s*(\S*)\s*$", re.ASCII)


def _unit_scale(unit: str, dimension: str) -> float | None:
    """Scale factor of ``unit`` to SI for ``dimension``, or None."""
    spellings, _ = DIMENSIONS[dimension]
    if dimension == "ratio":
        return {"%": 0.01, "": 1.0}.get(unit)
    if dimension == "decibel":
        return 1.0 if unit in ("dB", "") else None
    if unit == "" or unit in spellings:  # plain SI number; "m" is the metre, not milli
        return 1.0
    prefixes = {**_PREFIXES, **_OWN_PREFIXES.get(dimension, {})}
    for spelling in spellings:
        if unit.endswith(spelling):
            prefix = unit[: -len(spelling)]
            if prefix in prefixes:
                scale = prefixes[prefix]
                # an area prefix applies to the length before squaring (cm2)
                return scale**2 if dimension == "area" else scale
    return None


def parse_quantity(value: object, dimension: str) -> float:
    """Read a quantity in SI base units.

    Parameters
    ----------
    value : str or int or float
        ``"25 MHz"``, ``"20 mohm"``, ``"4 cm2"``, ``"50 %"``, ``"-30 dB"``, or
        a plain number already in SI base units (a fraction for ``ratio``,
        decibels for ``decibel``).
    dimension : str
        One of :data:`DIMENSIONS`.

    Returns
    -------
    float
        The value in SI base units (a fraction for ``ratio``, dB for
        ``decibel``).

    Raises
    ------
    QuantityError
        Unreadable text, a unit of another dimension, NaN or infinity.
    """
    if dimension not in DIMENSIONS:
        raise KeyError(dimension)
    expected = DIMENSIONS[dimension][1]
    if isinstance(value, bool):
        raise QuantityError(f"expected a quantity in {expected}, got a boolean")
    if isinstance(value, (int, float)):
        try:
            number, unit = float(value), ""
        except OverflowError:
            raise QuantityError(f"{str(value)[:12]}... ({len(str(value))} digits) is too large") from None
    elif isinstance(value, str):
        match = _QUANTITY.match(value)
        if match is None:
            raise QuantityError(f"cannot read {value!r} as a quantity in {expected}")
        number, unit = float(match.group(1)), match.group(2)
    else:
        raise QuantityError(f"expected a quantity in {expected}, got {type(value).__name__}")
    scale = _unit_scale(unit, dimension)
    if scale is None:
        article = "an" if dimension[0] in "aeiou" else "a"
        raise QuantityError(f"unit {unit!r} is not {article} {dimension} (expected {expected})")
    result = number * scale
    if not math.isfinite(result):
        raise QuantityError(f"{value!r} is not a finite number")
    return result


def format_quantity(value: float, unit: str, digits: int = 4) -> str:
    """Format an SI value with an engineering prefix, e.g. ``48 MHz``."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    exponent = int(math.floor(math.log10(abs(value)) / 3) * 3)
    exponent = min(max(exponent, -12), 12)
    prefix = {-12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}[exponent]
    return f"{value / 10.0**exponent:.{digits}g} {prefix}{unit}"


def to_db(amplitude: np.ndarray | float, reference: float = 1.0) -> np.ndarray:
    """20 log10(amplitude / reference); NaN (not -inf) where amplitude is zero.

    A zero amplitude is a true spectral null of the model; NaN keeps it out of
    maxima and sorting and turns into ``null`` at the output edge.
    """
    amplitude = np.abs(np.asarray(amplitude)).astype(float)  # complex phasors read their magnitude
    with np.errstate(divide="ignore"):
        level = 20.0 * np.log10(amplitude / reference)
    return np.where(amplitude > 0, level, np.nan)


def from_db(level_db: np.ndarray | float, reference: float = 1.0) -> np.ndarray:
    """Inverse of :func:`to_db`: reference * 10**(level/20)."""
    return reference * 10.0 ** (np.asarray(level_db, dtype=float) / 20.0)


def db_micro(amplitude: np.ndarray | float) -> np.ndarray:
    """Level re 1 micro-unit: dBuV for volts, dBuA for amperes, dBuV/m for V/m."""
    return to_db(amplitude, 1e-6)
