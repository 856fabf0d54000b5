"""IBIS output-buffer models: the edge rates a vendor states for a driver.

An IBIS file (ANSI/EIA-656-B, the I/O Buffer Information Specification) describes each buffer of a part as
a ``[Model]``.  emispec reads only what sets a clock's edges:

- **[Ramp]**: ``dV/dt_r`` and ``dV/dt_f`` as ``dV/dt`` per corner (typ, min, max), where dV is the 20-80 %
  part of the swing the buffer develops into ``R_load`` (50 ohm unless stated) and dt the time it takes:
  dt *is* the 20-80 % edge time.  For a linear ramp the 10-90 % time is dt x 0.8 / 0.6 = dt x 4 / 3 and
  the 0-100 % time dt / 0.6 (:func:`emispec.waveform.full_edge_time`);
- **[Rising Waveform] / [Falling Waveform]**: voltage against time into a stated fixture (``R_fixture``
  to ``V_fixture``, with optional C/L fixture parts), from which the 10-90 % time between the table's first
  and last values is measured (first crossings, linear interpolation).

Everything else in the file is skipped.  Numbers take the IBIS scaling letters (T G M k m u n p f, with M
mega and m milli) followed by any unit text, which is ignored; ``NA`` in a min or max column means the typ
value applies; the comment character is ``|`` unless ``[Comment Char]`` sets another; keywords are read
without regard to case, with ``_`` and space alike.

References
----------
ANSI/EIA-656-B, I/O Buffer Information Specification (IBIS) version 4.0 and later: general syntax rules,
the [Model], [Ramp], [Rising Waveform] and [Falling Waveform] keywords.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError
from .readers import read_text

__all__ = ["IbisError", "IbisModel", "EdgeRamp", "WaveformTable", "read_ibis", "CORNERS", "CHOICES"]

#: The columns of IBIS data, in file order.
CORNERS = ("typ", "min", "max")
#: What a board may ask of a ramp: one column, or the fastest of them (the conservative default).
CHOICES = ("fastest",) + CORNERS
#: The load IBIS assumes for [Ramp] when R_load is not stated [ohm].
DEFAULT_R_LOAD = 50.0

_SCALE = {"T": 1e12, "G": 1e9, "M": 1e6, "k": 1e3, "m": 1e-3, "u": 1e-6, "n": 1e-9, "p": 1e-12, "f": 1e-15}
_NUMBER = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)([TGMkmunpf]?)[A-Za-z]*$")


class IbisError(InputError):
    """An IBIS file that cannot be read for what emispec needs: the message names the file and line."""


@dataclass(frozen=True)
class EdgeRamp:
    """One edge of [Ramp]: dV [V] and dt [s] (20-80 %) per corner (None where the file gives NA)."""

    dv_v: dict
    dt_s: dict

    def corner(self, which: str) -> tuple[str, float, float]:
        """(corner, dV, dt) of column ``which``, or of the shortest dt for ``"fastest"``; NA means typ."""
        if which == "fastest":
            which = min((c for c in CORNERS if self.dt_s[c] is not None), key=lambda c: self.dt_s[c])
        if self.dt_s[which] is None:
            which = "typ"
        return which, self.dv_v[which], self.dt_s[which]


@dataclass(frozen=True)
class WaveformTable:
    """A [Rising Waveform] or [Falling Waveform] table and its fixture (SI; voltages NaN where NA)."""

    edge: str
    fixture: dict
    time_s: np.ndarray
    voltage_v: np.ndarray  # (points, 3): typ, min, max

    def time_1090_s(self) -> dict:
        """Per corner: the 10-90 % time between the table's first and last values (None where NA)."""
        out = {}
        for k, corner in enumerate(CORNERS):
            v = self.voltage_v[:, k]
            ok = np.isfinite(v)
            out[corner] = _ten_ninety(self.time_s[ok], v[ok]) if np.count_nonzero(ok) >= 2 else None
        return out


@dataclass(frozen=True)
class IbisModel:
    """The parts of one [Model] that set its edges."""

    name: str
    model_type: str
    r_load_ohm: float
    rise: EdgeRamp | None
    fall: EdgeRamp | None
    waveforms: tuple[WaveformTable, ...] = field(default_factory=tuple)


def _ten_ninety(t: np.ndarray, v: np.ndarray) -> float | None:
    start, end = v[0], v[-1]
    if start == end:
        return None
    x = (v - start) / (end - start)  # 0 -> 1 whichever way the edge goes

    def first(level):
        above = np.flatnonzero(x >= level)
        if len(above) == 0 or above[0] == 0:
            return t[0] if len(above) else None
        j = above[0]
        return t[j - 1] + (level - x[j - 1]) * (t[j] - t[j - 1]) / (x[j] - x[j - 1])

    t10, t90 = first(0.1), first(0.9)
    return None if t10 is None or t90 is None else float(t90 - t10)


def _number(text: str, file: str, line: int, what: str) -> float:
    match = _NUMBER.match(text)
    if match is None:
        raise IbisError(f"{file} line {line}: {what}: cannot read {text!r} as a number (e.g. 1.2n, 0.5, 3.3V)")
    return float(match.group(1)) * _SCALE.get(match.group(2), 1.0)


def _keyword(name: str) -> str:
    return " ".join(name.replace("_", " ").lower().split())


def read_ibis(path: str | Path) -> dict[str, IbisModel]:
    """The output models of an IBIS file by name (see the module docstring).

    Raises
    ------
    IbisError
        A file without [IBIS Ver], or a [Ramp] or waveform line that cannot be read (file and line named).
    FileError
        The file cannot be read as text.
    """
    source = read_text(path, "IBIS file")
    file = source.file
    comment = "|"
    models: dict[str, IbisModel] = {}
    current: dict | None = None
    block = None
    seen_version = False

    def finish():
        if current is not None:
            models[current["name"]] = IbisModel(
                current["name"], current["type"], current["r_load"], current["ramp"].get("r"),
                current["ramp"].get("f"), tuple(WaveformTable(w["edge"], w["fixture"], np.array(w["t"]),
                                                              np.array(w["v"]).reshape(-1, 3))
                                                for w in current["waveforms"] if w["t"]))

    for lineno, raw in enumerate(source.text.splitlines(), start=1):
        stripped = raw.strip()
        if stripped.lower().startswith("[comment char]"):
            rest = stripped[len("[comment char]"):].strip()
            if not rest.endswith("_char") or len(rest) != 6:
                raise IbisError(f"{file} line {lineno}: [Comment Char]: expected a character and _char, e.g. #_char")
            comment = rest[0]
            continue
        text = raw.split(comment, 1)[0].strip()
        if not text:
            continue
        if text.startswith("["):
            close = text.find("]")
            if close < 0:
                raise IbisError(f"{file} line {lineno}: a keyword without its closing ']'")
            keyword, argument = _keyword(text[1:close]), text[close + 1:].strip()
            if keyword == "ibis ver":
                seen_version = True
            if keyword in ("model", "end", "model selector", "define package model", "component"):
                finish()
                current, block = None, None
            if keyword == "end":
                break
            if keyword == "model":
                if not argument:
                    raise IbisError(f"{file} line {lineno}: [Model] without a name")
                current = dict(name=argument.split()[0], type="", r_load=DEFAULT_R_LOAD, ramp={}, waveforms=[])
                block = "model"
            elif current is not None:
                block = keyword
                if keyword in ("rising waveform", "falling waveform"):
                    current["waveforms"].append(dict(edge=keyword.split()[0], fixture={}, t=[], v=[]))
            continue
        if current is None:
            continue
        words = text.replace("=", " = ").split()
        if block == "model" and words[0].lower() == "model_type" and len(words) > 1:
            current["type"] = words[-1]
        elif block == "ramp":
            _ramp_line(words, current, file, lineno)
        elif block in ("rising waveform", "falling waveform"):
            _waveform_line(words, current["waveforms"][-1], file, lineno)
    finish()
    if not seen_version:
        raise IbisError(f"{file}: not an IBIS file (no [IBIS Ver] line)")
    return models


def _ramp_line(words, model, file, lineno):
    name = words[0].lower()
    if name == "r_load":
        value = words[-1]
        model["r_load"] = _number(value, file, lineno, "[Ramp] R_load")
        if not model["r_load"] > 0:
            raise IbisError(f"{file} line {lineno}: [Ramp] R_load: must be > 0 ohm")
        return
    if name not in ("dv/dt_r", "dv/dt_f"):
        raise IbisError(f"{file} line {lineno}: [Ramp]: expected dV/dt_r, dV/dt_f or R_load, not {words[0]!r}")
    if len(words) != 4:
        raise IbisError(f"{file} line {lineno}: [Ramp] {words[0]}: expected typ, min and max (dV/dt or NA)")
    dv, dt = {}, {}
    for corner, cell in zip(CORNERS, words[1:]):
        if cell.upper() == "NA" and corner != "typ":
            dv[corner] = dt[corner] = None
            continue
        parts = cell.split("/")
        if len(parts) != 2:
            raise IbisError(f"{file} line {lineno}: [Ramp] {words[0]} {corner}: expected dV/dt such as 1.2/0.5n, "
                            f"not {cell!r}")
        dv[corner] = abs(_number(parts[0], file, lineno, f"[Ramp] {words[0]} {corner} dV"))
        dt[corner] = _number(parts[1], file, lineno, f"[Ramp] {words[0]} {corner} dt")
        if not (dv[corner] > 0 and dt[corner] > 0):
            raise IbisError(f"{file} line {lineno}: [Ramp] {words[0]} {corner}: dV and dt must be > 0")
    model["ramp"][name[-1]] = EdgeRamp(dv, dt)


_FIXTURE_KEYS = {"r_fixture", "v_fixture", "v_fixture_min", "v_fixture_max", "l_fixture", "c_fixture", "r_dut",
                 "l_dut", "c_dut"}


def _waveform_line(words, table, file, lineno):
    name = words[0].lower()
    if name in _FIXTURE_KEYS:
        table["fixture"][name] = _number(words[-1], file, lineno, f"[{table['edge'].title()} Waveform] {words[0]}")
        return
    if len(words) != 4:
        raise IbisError(f"{file} line {lineno}: [{table['edge'].title()} Waveform]: expected time, typ, min, max")
    t = _number(words[0], file, lineno, "waveform time")
    values = [np.nan if (c.upper() == "NA" and k) else _number(c, file, lineno, f"waveform {CORNERS[k]}")
              for k, c in enumerate(words[1:])]
    if table["t"] and not t > table["t"][-1]:
        raise IbisError(f"{file} line {lineno}: waveform time does not increase")
    table["t"].append(t)
    table["v"].extend(values)
