"""Key schemas of the board file and the reader that applies them.

Every table of a board file (a clock, a path, a rail part, a spread) is read
against a tuple of :class:`Key` declarations that live beside the model class
the table becomes.  A key declares its kind (a dimension of
:mod:`emispec.units`, or a choice, a name, a flag, a count...), whether it is
required, its default and its allowed range.  The same declarations tell the
parameter layer (:mod:`emispec.parameters`) which keys are numeric and in which
unit, so that a key that `vary`, `solve` and the later ensemble features set is
checked exactly as it would be in a file.

Every problem is a :class:`BoardError` carrying the file, the key path
(``clock[cpu_clk].rise_time``), the offending value and what is allowed; only
the command line turns it into a one-line message and exit status 2.
"""

from __future__ import annotations

import difflib
import unicodedata
from dataclasses import dataclass, replace

from .errors import InputError
from .units import DIMENSIONS, QuantityError, from_db, parse_quantity

__all__ = ["BoardError", "Key", "TableReader", "NUMERIC_KINDS", "key_unit"]

#: Kinds of key whose value is a number (and so a parameter that can be varied).
NUMERIC_KINDS = frozenset(DIMENSIONS) | {"count", "number", "gain"}


class BoardError(InputError):
    """A board file problem: file, key path, value and what is allowed."""

    def __init__(self, file: str, key: str, problem: str, value: object = None):
        self.file, self.key, self.value, self.problem = file, key, value, problem
        shown = "" if value is None else f" = {_short(value)}"
        super().__init__(one_line(f"{file}: {key}{shown}: {problem}"))

    def __reduce__(self):  # raised in a pool worker, it must reach the command line whole (exit 2, not 1)
        return type(self), (self.file, self.key, self.problem, self.value)


def one_line(text: str) -> str:
    """Control characters (a newline in a name the user wrote) shown escaped, so a message stays one line."""
    return "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


@dataclass(frozen=True)
class Key:
    """One key of a board-file table.

    Parameters
    ----------
    name : str
        The key as written in the file.
    kind : str
        A dimension of :data:`emispec.units.DIMENSIONS` (the value is a
        quantity), or ``"choice"`` (one of ``choices``), ``"text"`` (a
        non-empty string), ``"bool"``, ``"count"`` (a whole number),
        ``"number"`` (a plain number), ``"gain"`` (a current ratio written as
        ``"-40 dB"`` or as a fraction up to 1; its parameter unit is dB),
        ``"names"`` (a non-empty list of names), ``"table"``, ``"tables"`` or
        ``"any"`` (read by the model's own code).
    required, default
        A missing required key is an error; a missing optional key reads as
        ``default``.
    low, high, low_open, high_open
        Allowed range in SI units (open or closed at each end).
    choices : tuple
        Allowed values of a ``"choice"`` key.
    schema : tuple of Key, or callable
        The keys of a ``"table"`` (or of each entry of ``"tables"``); a
        callable takes the table and returns them (a path's keys depend on its
        ``kind``).
    """

    name: str
    kind: str
    required: bool = False
    default: object = None
    low: float | None = None
    high: float | None = None
    low_open: bool = True
    high_open: bool = False
    choices: tuple = ()
    what: str = ""
    schema: object = None

    @property
    def numeric(self) -> bool:
        return self.kind in NUMERIC_KINDS

    def keys_of(self, table: object) -> tuple[Key, ...] | None:
        """The keys of the sub-table ``table`` (None where this key has no schema or the table has no known kind)."""
        if callable(self.schema):
            try:
                return self.schema(table)
            except (KeyError, TypeError):
                return None
        return self.schema

    def range_text(self) -> str:
        """``"; allowed: > 0 s and <= 1 s"``, or empty when the key has no range."""
        if self.low is None and self.high is None:
            return ""
        unit = key_unit(self)
        lower = "" if self.low is None else f"{'>' if self.low_open else '>='} {self.low:g} {unit}".rstrip()
        upper = "" if self.high is None else f"{'<' if self.high_open else '<='} {self.high:g} {unit}".rstrip()
        return "; allowed: " + " and ".join(part for part in (lower, upper) if part)


def key_unit(key: Key) -> str:
    """The unit a numeric key's value is expressed in inside emispec (SI, dB for gains, none for counts)."""
    if key.kind == "gain":
        return "dB"
    if key.kind in DIMENSIONS and key.kind != "ratio":
        return DIMENSIONS[key.kind][1]
    return ""


class TableReader:
    """Reads one table of the board file against its key schema, turning every problem into a BoardError."""

    def __init__(self, file: str, key: str, table: object, keys: tuple[Key, ...]):
        self.file, self.key = file, key
        self.keys = {k.name: k for k in keys}
        if not isinstance(table, dict):
            raise BoardError(file, key or "board", "expected a table")
        self.table = table
        for name in table:
            if name not in self.keys:
                allowed = tuple(self.keys)
                close = difflib.get_close_matches(name, allowed, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                raise BoardError(file, self.sub(name), f"unknown key; {hint}allowed: {', '.join(allowed)}")

    def sub(self, name: str) -> str:
        return f"{self.key}.{name}" if self.key else name

    def error(self, name: str, problem: str, value: object = None) -> BoardError:
        return BoardError(self.file, self.sub(name), problem, value)

    def has(self, name: str) -> bool:
        return name in self.table

    def reader(self, name: str, keys: tuple[Key, ...]) -> TableReader:
        """A reader for the sub-table at ``name``."""
        return TableReader(self.file, self.sub(name), self.table[name], keys)

    def get(self, name: str, **bounds):
        """The value of key ``name``, read and checked as its :class:`Key` declares (SI units).

        ``bounds`` replace fields of the declaration for this read, for a range
        that depends on another key (a modulation rate below f0 / 100).
        """
        key = replace(self.keys[name], **bounds) if bounds else self.keys[name]
        if name not in self.table:
            if key.required:
                raise self.error(name, self._missing(key))
            return key.default
        raw = self.table[name]
        kind = key.kind
        if kind in DIMENSIONS:
            return self._quantity(key, raw, kind)
        if kind == "gain":
            return self._gain(key, raw)
        if kind == "choice":
            if raw not in key.choices:
                raise self.error(name, f"allowed: {', '.join(map(str, key.choices))}", raw)
            return raw
        if kind == "text":
            if not isinstance(raw, str) or not raw.strip():
                raise self.error(name, "expected a non-empty string", raw)
            if any(unicodedata.category(c) == "Cc" for c in raw):
                raise self.error(name, "control characters (a newline, a tab) are not allowed in text", raw)
            if len(raw) > 200:
                raise self.error(name, f"{len(raw)} characters; allowed: up to 200", raw)
            return raw
        if kind == "bool":
            if not isinstance(raw, bool):
                raise self.error(name, "expected true or false", raw)
            return raw
        if kind == "count":
            if not (isinstance(raw, int) and not isinstance(raw, bool) and key.low <= raw <= key.high):
                raise self.error(name, f"expected a whole number from {key.low:g} to {key.high:g}", raw)
            return raw
        if kind == "number":
            if not isinstance(raw, (int, float)) or isinstance(raw, bool) or not key.low <= raw <= key.high:
                raise self.error(name, f"expected {key.what or 'a number'} from {key.low:g} to {key.high:g}", raw)
            return float(raw)
        if kind == "names":
            if not isinstance(raw, list) or not raw or not all(isinstance(p, str) for p in raw):
                raise self.error(name, f"expected a non-empty list of {key.what or 'names'}", raw)
            return raw
        return raw  # "table", "tables", "any": read by the model's own code

    def _missing(self, key: Key) -> str:
        if key.kind in DIMENSIONS:
            return f"missing; give a {key.kind}" + key.range_text()
        if key.kind == "text":
            return "missing; give a name"
        if key.kind == "choice":
            return f"missing; allowed: {', '.join(map(str, key.choices))}"
        return f"missing; give {key.what or 'a value'}"

    def _quantity(self, key: Key, raw, dimension: str) -> float:
        try:
            value = parse_quantity(raw, dimension)
        except QuantityError as err:
            raise self.error(key.name, str(err) + key.range_text(), raw) from None
        too_low = key.low is not None and (value <= key.low if key.low_open else value < key.low)
        too_high = key.high is not None and (value >= key.high if key.high_open else value > key.high)
        if too_low or too_high:
            raise self.error(key.name, "out of range" + key.range_text(), raw)
        return value

    def _gain(self, key: Key, raw) -> float:
        """A current ratio written in dB (``"-40 dB"``, at most 0 dB) or as a fraction from 0 to 1."""
        if isinstance(raw, str) and raw.strip().endswith("dB"):
            level = self._quantity(Key(key.name, "decibel", low=-300.0, low_open=False, high=0.0), raw, "decibel")
            return float(from_db(level))
        return self._quantity(Key(key.name, "ratio", low=1e-15, low_open=False, high=1.0), raw, "ratio")
