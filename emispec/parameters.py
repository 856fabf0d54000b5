"""The parameter layer: a board parsed once, and boards built from it with values changed.

A **key path** names one value of a board file: ``clock[sdram_clk].rise_time``,
``clock[sdram_clk].spread.deviation``, ``path[eth_loop].area``,
``rail[io_3v3].part[0].count``, ``guard_band``.  A segment ``name[sel]`` picks
the entry of an array of tables whose ``name`` is ``sel``, or the entry at
index ``sel``.

A :class:`Template` holds the parsed board file, every file it names (read
once) and the entries parsed so far.  :meth:`Template.board` builds a board
with some values set as they would be written in the file; its numeric
:class:`Parameter` values, in SI (dB for common-mode ratios), give
:meth:`Template.board_at` for parameter vectors.  Either way only the entries
whose tables changed are checked again, no file is read, and a bad value gets
the same one-line error as in a file: a variant is exactly the board file that
carries its values.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from .board import TOP_KEYS, Board, EntryMemo, board_from_mapping, read_board_data
from .readers import FileCache
from .schema import BoardError, Key, key_unit
from .units import parse_quantity

__all__ = ["Parameter", "Template", "set_value", "split_key", "scope_of", "key_label", "raw_value", "written_like",
           "edited_board_text"]

_SEGMENT = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)(?:\[([^\]]+)\])?$")


def split_key(key: str, file: str = "<board>") -> list[tuple[str, str | None]]:
    """``clock[a].spread.rate`` -> [("clock", "a"), ("spread", None), ("rate", None)]."""
    out = []
    for part in key.split("."):
        match = _SEGMENT.match(part)
        if match is None:
            raise BoardError(file, key, f"cannot read key segment {part!r}; write e.g. clock[cpu_clk].rise_time")
        out.append(match.groups())
    return out


def key_label(key: str) -> str:
    """``sdram_clk.rise_time`` for ``clock[sdram_clk].rise_time``: short, and still unambiguous in a table."""
    try:
        segments = split_key(key)
    except BoardError:
        return key
    return ".".join(sel if sel is not None and not sel.isdigit() else (f"{name}[{sel}]" if sel else name)
                    for name, sel in segments)


def _select(entries, name: str, selector: str, key: str, file: str) -> int:
    if not isinstance(entries, list):
        raise BoardError(file, key, f"no array {name!r} to select {selector!r} from")
    for index, entry in enumerate(entries):
        if isinstance(entry, dict) and entry.get("name") == selector:
            return index
    if selector.isdigit() and int(selector) < len(entries):
        return int(selector)
    names = [e.get("name") for e in entries if isinstance(e, dict)]
    raise BoardError(file, key, f"no {name} named {selector!r}; defined: {names}")


def set_value(data: dict, key: str, value, file: str = "<board>") -> dict:
    """A copy of the parsed board with ``value`` at ``key`` (the original is not changed).

    Only the tables on the way to the value are copied; every other table is
    the same object as in ``data``, which is what lets a rebuilt board reuse
    the entries that did not change.
    """
    segments = split_key(key, file)
    top = dict(data)
    node = top
    for depth, (name, selector) in enumerate(segments):
        last = depth == len(segments) - 1
        if selector is None:
            if last:
                node[name] = value
                return top
            child = node.get(name, {})
            if not isinstance(child, dict):
                raise BoardError(file, key, f"{name!r} is not a table")
            node[name] = dict(child)
            node = node[name]
            continue
        if last:
            raise BoardError(file, key, "a key path must end in a value, not a table")
        entries = node.get(name)
        index = _select(entries, name, selector, key, file)
        node[name] = list(entries)
        node[name][index] = dict(entries[index])
        node = node[name][index]
    return top


def schema_key(data: dict, key: str, file: str = "<board>") -> Key | None:
    """The :class:`Key` declaration of the value at ``key`` (None where no schema covers it)."""
    keys: tuple[Key, ...] | None = TOP_KEYS
    node: object = data
    for name, selector in split_key(key, file):
        declared = {k.name: k for k in keys or ()}.get(name)
        if declared is None:
            return None
        if selector is None:
            if declared.kind not in ("table",):
                return declared
            node = node.get(name, {}) if isinstance(node, dict) else {}
            keys = declared.keys_of(node)
            continue
        entries = node.get(name) if isinstance(node, dict) else None
        node = entries[_select(entries, name, selector, key, file)]
        keys = declared.keys_of(node)
    return None


@dataclass(frozen=True)
class Parameter:
    """A numeric key of a board: its path, its declaration, and its value in SI (dB for a gain)."""

    key: str
    declaration: Key
    value: float | None

    @property
    def unit(self) -> str:
        return key_unit(self.declaration)

    @property
    def label(self) -> str:
        return key_label(self.key)

    def written(self, value: float):
        """``value`` (SI) as a board file would carry it."""
        kind = self.declaration.kind
        if kind == "gain":
            return f"{float(value)!r} dB"
        if kind == "count":
            return int(round(value))
        return float(value)


def _si_value(declaration: Key, raw) -> float | None:
    """The SI value of a numeric key as written (None where it cannot be read: the board check reports it)."""
    try:
        if declaration.kind == "gain":
            if isinstance(raw, str) and raw.strip().endswith("dB"):
                return parse_quantity(raw, "decibel")
            return 20 * math.log10(parse_quantity(raw, "ratio"))
        if declaration.kind in ("count", "number"):
            return float(raw)
        return parse_quantity(raw, declaration.kind)
    except (ValueError, TypeError):
        return None


def _walk(node: dict, keys: tuple[Key, ...], prefix: str, out: dict) -> None:
    for declared in keys:
        if declared.name not in node:
            continue
        raw = node[declared.name]
        path = f"{prefix}.{declared.name}" if prefix else declared.name
        if declared.numeric:
            out[path] = Parameter(path, declared, _si_value(declared, raw))
        elif declared.kind == "table" and isinstance(raw, dict):
            sub = declared.keys_of(raw)
            if sub:
                _walk(raw, sub, path, out)
        elif declared.kind == "tables" and isinstance(raw, list):
            for index, entry in enumerate(raw):
                if isinstance(entry, dict):
                    sub = declared.keys_of(entry)
                    name = entry.get("name")
                    label = name if isinstance(name, str) else index
                    if sub:
                        _walk(entry, sub, f"{path}[{label}]", out)


def scope_of(key: str) -> str | None:
    """The source a key path belongs to (``clock[x]...`` or ``current[x]...``), else None (the whole board)."""
    match = re.match(r"^(?:clock|current)\[([^\]]+)\]\.", key)
    return match.group(1) if match and not match.group(1).isdigit() else None


class Template:
    """A board file parsed once: its tables, the files it names and the entries already checked.

    Parameters
    ----------
    data : dict
        The parsed board file (see :func:`emispec.board.read_board_data`).
    file, base_dir, sha256
        Its name, the folder relative paths start from, the hash of its bytes.

    The nominal board is checked on construction, so a template always stands
    for a valid board.  Templates pickle without their memo of parsed entries
    (it is rebuilt on first use), so jobs on other processes or machines carry
    the template once and parameter vectors after that.
    """

    def __init__(self, data: dict, file: str = "<board>", base_dir: Path | None = None, sha256: str = ""):
        self.data, self.file, self.base_dir, self.sha256 = data, file, Path(base_dir or Path.cwd()), sha256
        self.files = FileCache()
        self._memo = EntryMemo()
        self.nominal = self.board()

    @classmethod
    def load(cls, path: str | Path) -> Template:
        data, file, base_dir, sha256 = read_board_data(path)
        return cls(data, file, base_dir, sha256)

    def __getstate__(self):
        state = self.__dict__.copy()
        state["_memo"] = None
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._memo = EntryMemo()

    def board(self, values: Mapping[str, object] | None = None) -> Board:
        """The board with ``values`` (key path -> value as written in a board file) set."""
        data = self.data
        for key, value in (values or {}).items():
            data = set_value(data, key, value, self.file)
        return board_from_mapping(data, self.file, self.base_dir, self.sha256, self.files, self._memo)

    def board_at(self, values: Mapping[str, float]) -> Board:
        """The board with numeric parameters set from SI values (dB for common-mode ratios)."""
        return self.board({key: self.parameter(key).written(value) for key, value in values.items()})

    def parameters(self) -> dict[str, Parameter]:
        """Every numeric key present in the board file, with its value in SI."""
        if self.__dict__.get("_parameters") is None:  # the data never changes: walk it once
            out: dict[str, Parameter] = {}
            _walk(self.data, TOP_KEYS, "", out)
            self._parameters = out
        return dict(self._parameters)

    def parameter(self, key: str) -> Parameter:
        """The numeric parameter at ``key``, present in the file or not (then its value is None)."""
        present = self.parameters().get(key)
        if present is not None:
            return present
        declared = schema_key(self.data, key, self.file)
        if declared is None or not declared.numeric:
            what = "not a key of this board" if declared is None else f"not numeric ({declared.kind})"
            raise BoardError(self.file, key, what)
        return Parameter(key, declared, None)


_NUMBER_AND_UNIT = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")


def _table_of(data: Mapping, key: str, file: str) -> tuple[Mapping | None, str]:
    """The table that holds the value at ``key`` (None where the file has no such table) and the value's name."""
    node = data
    segments = split_key(key, file)
    for name, selector in segments[:-1]:
        if not isinstance(node, Mapping) or name not in node:
            return None, segments[-1][0]
        node = node[name] if selector is None else node[name][_select(node[name], name, selector, key, file)]
    return (node if isinstance(node, Mapping) else None), segments[-1][0]


def raw_value(data: Mapping, key: str, file: str = "<board>"):
    """The value at ``key`` as the board file wrote it (None where it wrote none)."""
    table, name = _table_of(data, key, file)
    return None if table is None else table.get(name)


def written_like(declaration: Key, raw, value: float, digits: int = 5):
    """``value`` (SI; dB for a gain) as the board file wrote the key before: in its unit and prefix where it had
    one (``"1 cm2"`` -> ``"2.513 cm2"``), a fraction for a gain written as one, else a plain number."""
    if declaration.kind == "gain" and not (isinstance(raw, str) and raw.strip().endswith("dB")):
        return float(f"{10 ** (value / 20):.{digits}g}") if isinstance(raw, (int, float)) else f"{value:.{digits}g} dB"
    if declaration.kind == "count":
        return int(round(value))
    match = _NUMBER_AND_UNIT.match(raw) if isinstance(raw, str) else None
    if match and match.group(2):
        number = float(match.group(1))
        try:
            factor = parse_quantity(raw, "decibel" if declaration.kind == "gain" else declaration.kind) / number
        except (ValueError, ZeroDivisionError):
            factor = None
        if factor:
            return f"{value / factor:.{digits}g} {match.group(2)}"
    return float(f"{value:.{digits + 2}g}")


def edited_board_text(text: str, values: Mapping[str, float], file: str = "<board>") -> str:
    """The board file's text with only the keys in ``values`` changed (SI; dB for gains), every comment and the
    layout kept (tomlkit).  A key the file did not write is added to its table."""
    import tomlkit

    document = tomlkit.parse(text)
    for key, value in values.items():
        declared = schema_key(document, key, file)
        if declared is None or not declared.numeric:
            raise BoardError(file, key, "not a numeric key of this board")
        table, name = _table_of(document, key, file)
        if table is None:
            raise BoardError(file, key, "the board file has no table here to write the value into")
        table[name] = written_like(declared, table.get(name), value)
    return tomlkit.dumps(document)
