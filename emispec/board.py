"""Board file (TOML) -> model objects, with one-line errors naming file and key.

This is the edge where quantities with units become SI floats.  The board
file is an assembly of entries: the limit, ``[[rail]]``, ``[[path]]`` and the
source arrays (``[[clock]]``, ``[[current]]``).  Each entry is read by the
model class it becomes, against that class's key schema (see
:mod:`emispec.schema`); this module only wires them together in dependency
order: limit -> rails -> paths -> clocks -> currents.  Every problem raises
:class:`BoardError` carrying the file, the key path
(``clock[cpu_clk].rise_time``), the offending value and what is allowed.

When a board is rebuilt with a few values changed (:mod:`emispec.parameters`),
a memo hands back every entry whose table and dependencies are unchanged, so
only the changed entries are checked again.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path as FilePath

from .coupling import PATH_KINDS, Path, path_from_table
from .decoupling import Rail
from .limits import Limit, LimitError, limit_from_mapping, load_limit
from .readers import FileCache, FileError, read_toml
from .schema import BoardError, Key, TableReader
from .sources import COMBINES, MODES, SOURCE_SECTIONS, BoardContext, Clock, Current, Source
from .units import QuantityError, parse_quantity

__all__ = ["BoardError", "Board", "Clock", "Current", "TOP_KEYS", "load_board", "read_board_data",
           "board_from_mapping", "EntryMemo"]

#: What an entry's name may be: it stands in key paths (clock[NAME].rise_time) and file names (rail-NAME.png).
NAME = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_-]{0,63}", re.ASCII)

TOP_KEYS = (
    Key("title", "text"),
    Key("guard_band", "decibel", default=0.0, low=0.0, high=60.0, low_open=False),
    Key("limit", "any"),
    Key("max_frequency", "frequency", low=0.0, high=1e12),
    Key("harmonics", "choice", default="envelope", choices=MODES),
    Key("combine", "choice", default="power", choices=COMBINES),
    Key("highest_internal_frequency", "any"),
    *(Key(section, "tables", schema=cls.KEYS) for section, cls in SOURCE_SECTIONS.items()),
    Key("path", "tables", schema=lambda table: PATH_KINDS[table["kind"]].KEYS),
    Key("rail", "tables", schema=Rail.KEYS),
    Key("tolerance", "tables"),  # read by emispec.tolerances; an estimate uses the nominal values
)


@dataclass(frozen=True)
class Board:
    """Everything an estimate needs, in SI units."""

    title: str
    file: str
    sha256: str
    guard_band_db: float
    limit: Limit
    sources: tuple[Source, ...]
    paths: dict[str, Path]
    max_frequency_hz: float | None = None
    rails: dict[str, Rail] = field(default_factory=dict)
    highest_frequency_hz: float | None = None

    @property
    def clocks(self) -> tuple[Source, ...]:
        return tuple(s for s in self.sources if s.section == "clock")

    @property
    def currents(self) -> tuple[Source, ...]:
        return tuple(s for s in self.sources if s.section == "current")

    def source(self, name: str) -> Source:
        return next(s for s in self.sources if s.name == name)


class EntryMemo:
    """Parsed entries by (section, name), reused while their table and dependencies are the same objects."""

    def __init__(self) -> None:
        self._entries: dict[tuple, tuple] = {}

    def get(self, key: tuple, table: object, deps: tuple | None, build):
        """The entry at ``key`` parsed from ``table`` with ``deps`` (None: always parse)."""
        hit = self._entries.get(key)
        if hit is not None and deps is not None and hit[0] is table and len(hit[1]) == len(deps) and all(
                a is b for a, b in zip(hit[1], deps)):
            return hit[2]
        value = build()
        self._entries[key] = (table, deps, value)
        return value


def _named_tables(file: str, data: dict, kind: str) -> list[tuple[str, dict]]:
    tables = data.get(kind, [])
    if not isinstance(tables, list) or not all(isinstance(t, dict) for t in tables):
        raise BoardError(file, kind, f"expected an array of tables, written [[{kind}]]")
    named, seen = [], set()
    for index, table in enumerate(tables):
        name = table.get("name")
        if not isinstance(name, str) or not name.strip():
            raise BoardError(file, f"{kind}[{index}].name", "missing; every entry needs a unique name", name)
        if not NAME.fullmatch(name):
            raise BoardError(file, f"{kind}[{index}].name", "a name may use letters, digits, '_' and '-' (up to 64; "
                             "it becomes part of key paths and file names)", name)
        if name in seen:
            raise BoardError(file, f"{kind}[{name}].name", f"duplicate name; each {kind} name must be unique", name)
        seen.add(name)
        named.append((name, table))
    return named


def _references(table: dict, limit, paths: dict, rails: dict, sources: dict, defaults: tuple) -> tuple | None:
    """What a source's entry depends on: the limit, the board's default harmonics, and the parsed entries its
    table names (its paths, its rail, the clock it follows); None if any is missing (then the entry is checked
    again, and the check reports it)."""
    try:
        named = [paths[p] for p in table.get("paths", ())]
        if "rail" in table:
            named.append(rails[table["rail"]])
        if "clock" in table:
            named.append(sources[table["clock"]])
    except (KeyError, TypeError):
        return None
    return (limit, *defaults, *named)


def _parse_limit(file: str, raw: object, base_dir: FilePath, files: FileCache) -> Limit:
    try:
        if isinstance(raw, str):
            return files.read(load_limit, raw, base_dir)
        if isinstance(raw, dict):
            return limit_from_mapping(raw, "inline", file, base_dir)
    except LimitError as err:
        if isinstance(raw, dict):
            raise BoardError(file, f"limit.{err.key}", err.problem) from None
        problem = err.problem if err.key == "limit" else str(err)
        raise BoardError(file, "limit", problem, raw) from None
    raise BoardError(file, "limit", "expected a bundled limit name, a file path or an inline table", raw)


def board_from_mapping(data: dict, file: str = "<board>", base_dir: FilePath | None = None, sha256: str = "",
                       files: FileCache | None = None, memo: EntryMemo | None = None) -> Board:
    """Build a :class:`Board` from a parsed board table.

    ``files`` caches what the board's parts and limit read from disk;
    ``memo`` reuses entries parsed before from the same table objects.
    """
    base_dir = base_dir or FilePath.cwd()
    files = files if files is not None else FileCache()
    memo = memo if memo is not None else EntryMemo()
    top = TableReader(file, "", data, TOP_KEYS)
    if "limit" not in data:
        raise top.error("limit", "missing; name a bundled limit (see `emispec limits`), a file, or an inline table")
    raw_limit = data["limit"]
    limit = memo.get(("limit",), raw_limit, (), lambda: _parse_limit(file, raw_limit, base_dir, files))
    ctx = BoardContext(file, base_dir, limit, files=files)
    rails = {name: memo.get(("rail", name), table, (),
                            lambda table=table, name=name: Rail.from_table(
                                TableReader(file, f"rail[{name}]", table, Rail.KEYS), ctx))
             for name, table in _named_tables(file, data, "rail")}
    paths = {name: memo.get(("path", name), table, (limit,),
                            lambda table=table, name=name: path_from_table(file, name, table, limit))
             for name, table in _named_tables(file, data, "path")}
    harmonics, combine = top.get("harmonics"), top.get("combine")
    ctx = BoardContext(file, base_dir, limit, paths, rails, {}, files, harmonics, combine)
    sources: dict[str, Source] = {}
    for section, cls in SOURCE_SECTIONS.items():
        parsed = {}
        for name, table in _named_tables(file, data, section):
            if name in sources:
                other = sources[name].section
                raise BoardError(file, f"{section}[{name}].name", f"a {other} has this name; names must be unique")
            deps = _references(table, limit, paths, rails, sources, (harmonics, combine))
            parsed[name] = memo.get((section, name), table, deps, lambda table=table, name=name, cls=cls: cls.from_table(
                TableReader(file, f"{section}[{name}]", table, cls.KEYS), ctx))
        sources.update(parsed)
        if section == "clock":
            ctx = BoardContext(file, base_dir, limit, paths, rails, dict(parsed), files, harmonics, combine)
    if not sources:
        raise top.error("clock", "no source defined; add at least one [[clock]] or [[current]] table")
    title = top.get("title")
    return Board(
        title=title if title is not None else FilePath(file).stem,
        file=file,
        sha256=sha256,
        guard_band_db=top.get("guard_band"),
        limit=limit,
        sources=tuple(sources.values()),
        paths=paths,
        max_frequency_hz=top.get("max_frequency"),
        rails=rails,
        highest_frequency_hz=_highest(top),
    )


def _highest(top: TableReader) -> float | None:
    """``highest_internal_frequency``: a frequency, or "unknown" (infinite: the rule's widest span)."""
    raw = top.table.get("highest_internal_frequency")
    if raw is None:
        return None
    if raw == "unknown":
        return float("inf")
    try:
        value = parse_quantity(raw, "frequency")
    except QuantityError as err:
        raise top.error("highest_internal_frequency", f"{err}; or 'unknown'", raw) from None
    if not 0 < value <= 1e12:
        raise top.error("highest_internal_frequency", "out of range; allowed: > 0 Hz and <= 1e+12 Hz, or 'unknown'",
                        raw)
    return value


def read_board_data(path: str | FilePath) -> tuple[dict, str, FilePath, str]:
    """The parsed board file before validation: (data, file name, its folder, sha256 of its bytes)."""
    path = FilePath(path)
    try:
        data, source = read_toml(path, "board file")
    except FileError as err:
        raise BoardError(err.file, "toml" if err.where == "toml" else "file", err.problem) from None
    _refuse_non_finite(source.file, data, "")
    return data, source.file, path.parent, source.sha256


def load_board(path: str | FilePath) -> Board:
    """Read and validate a board file.

    Raises
    ------
    BoardError
        Anything wrong with the file, one line naming the file and key.
    """
    data, file, base_dir, sha256 = read_board_data(path)
    return board_from_mapping(data, file, base_dir, sha256)


#: How deep tables and arrays may nest in a board file (the deepest real one is 4).
MAX_DEPTH = 16


def _refuse_non_finite(file: str, node: object, key: str, depth: int = 0) -> None:
    if depth > MAX_DEPTH:
        raise BoardError(file, key, f"nested more than {MAX_DEPTH} levels deep")
    if isinstance(node, float) and not math.isfinite(node):
        raise BoardError(file, key or "value", "NaN and infinity are not allowed", node)
    if isinstance(node, dict):
        for k, v in node.items():
            _refuse_non_finite(file, v, f"{key}.{k}" if key else k, depth + 1)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            name = v.get("name") if isinstance(v, dict) else None
            label = name if isinstance(name, str) and NAME.fullmatch(name) else i
            _refuse_non_finite(file, v, f"{key}[{label}]", depth + 1)
