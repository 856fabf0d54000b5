"""Every file emispec reads, in one place: board and limit TOML, two-column CSV lines, Touchstone, impedance tables,
captures, measured scans.

Each reader takes a path and returns the data with where it came from, or
raises :class:`FileError` (file, where in it, what is wrong) that the caller
turns into its own one-line error with the key that named the file.  All text
goes through :func:`read_text`: only regular files are read, up to
:data:`MAX_BYTES`, a UTF-8 byte-order mark is dropped, and text that is not
UTF-8 is refused with the offset of the first bad byte.

A :class:`FileCache` remembers what was read, so that a board parsed once
(:mod:`emispec.parameters`) builds any number of variants without touching the
disk again.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import stat
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import InputError
from .units import QuantityError, parse_quantity

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = [
    "MAX_BYTES",
    "FileError",
    "TouchstoneError",
    "TextFile",
    "ImpedanceData",
    "FileCache",
    "read_text",
    "read_toml",
    "read_two_column_csv",
    "read_touchstone",
    "read_impedance_table",
    "CaptureData",
    "read_capture",
    "ScanData",
    "read_scan",
    "SCAN_UNITS",
    "FREQUENCY_UNITS",
]

#: Largest file emispec reads (board, limit, table, Touchstone) [bytes].
MAX_BYTES = 16 * 1024 * 1024


class FileError(InputError):
    """A file that cannot be used: the file, where in it, and what is wrong."""

    def __init__(self, file: str, where: str, problem: str):
        self.file, self.where, self.problem = file, where, problem
        super().__init__(f"{file}: {where}: {problem}".replace("\n", " "))

    def __reduce__(self):  # raised in a pool worker, it must reach the command line whole
        return type(self), (self.file, self.where, self.problem)


class TouchstoneError(ValueError):
    """A Touchstone or impedance-table file that cannot be used (the message names the file)."""


@dataclass(frozen=True)
class TextFile:
    """A text file's contents, its name and the sha256 of its bytes."""

    text: str
    file: str
    sha256: str


def _kind(mode: int) -> str:
    for test, name in ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a pipe (FIFO)"),
                       (stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
                       (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return name
    return "not a regular file"


def read_text(path: str | Path, what: str = "file") -> TextFile:
    """Read a regular text file of at most :data:`MAX_BYTES` as UTF-8 (a byte-order mark is dropped).

    Raises
    ------
    FileError
        Missing, unreadable, not a regular file, too large, or not UTF-8.
    """
    path = Path(path)
    file = str(path)
    try:
        info = os.stat(path)
    except OSError as err:
        raise FileError(file, what, f"cannot read the {what} ({err.strerror or err})") from None
    if not stat.S_ISREG(info.st_mode):
        raise FileError(file, what, f"cannot read the {what}: it is {_kind(info.st_mode)}")
    if info.st_size > MAX_BYTES:
        raise FileError(file, what, f"the {what} is {info.st_size / 2**20:.1f} MiB; emispec reads files up to "
                        f"{MAX_BYTES // 2**20} MiB")
    try:
        with open(path, "rb") as handle:
            raw = handle.read(MAX_BYTES + 1)
    except OSError as err:
        raise FileError(file, what, f"cannot read the {what} ({err.strerror or err})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise FileError(file, what, f"not UTF-8 text (byte 0x{raw[err.start]:02x} at offset {err.start}); "
                        "save it as UTF-8") from None
    return TextFile(text.removeprefix("\ufeff"), file, hashlib.sha256(raw).hexdigest())


def read_toml(path: str | Path, what: str = "file") -> tuple[dict, TextFile]:
    """Parse a TOML file; returns the table and the text it came from."""
    source = read_text(path, what)
    try:
        return tomllib.loads(source.text), source
    except tomllib.TOMLDecodeError as err:
        raise FileError(source.file, "toml", f"not valid TOML: {err}") from None
    except RecursionError:
        raise FileError(source.file, "toml", "not valid TOML: nested too deeply") from None


def read_two_column_csv(path: str | Path, what: str = "limit") -> tuple[np.ndarray, np.ndarray, dict]:
    """Rows ``frequency,level`` (quantities or plain numbers); ``# key: value`` comment lines carry metadata.

    The first row that is not a comment is a header when every cell starts
    with a letter (``frequency,level``); any other row that is not two
    numbers is an error naming its line, so a typo in the first data row
    (``3O MHz``) is never taken for a header.  Returns the frequencies [Hz],
    the levels [dB] and the metadata.
    """
    source = read_text(path, what)
    file = source.file
    meta, freqs, levels = {}, [], []
    first = True
    for lineno, line in enumerate(source.text.splitlines(), start=1):
        if not line.strip():
            continue
        if line.lstrip().startswith("#"):
            name, sep, val = line.lstrip("# ").partition(":")
            if sep:
                meta[name.strip().lower()] = val.strip()
            continue
        cells = [cell.strip() for cell in next(csv.reader([line]))]
        if first and cells and all(cell[:1].isalpha() for cell in cells):
            first = False  # a header row
            continue
        first = False
        if len(cells) != 2:
            raise FileError(file, f"line {lineno}", "expected two columns: frequency, level in dB")
        try:
            freqs.append(parse_quantity(cells[0], "frequency"))
            levels.append(parse_quantity(cells[1], "decibel"))
        except QuantityError as err:
            raise FileError(file, f"line {lineno}", str(err)) from None
    if len(freqs) < 2:
        raise FileError(file, what, "needs at least two (frequency, level) rows")
    return np.array(freqs), np.array(levels), meta


@dataclass(frozen=True)
class ImpedanceData:
    """A part's measured impedance: frequencies [Hz], complex impedances [ohm], and the file."""

    frequency_hz: np.ndarray
    z_ohm: np.ndarray
    origin: str = field(default="", compare=False)

    def __iter__(self):
        return iter((self.frequency_hz, self.z_ohm))


def read_touchstone(path: Path) -> ImpedanceData:
    """Impedance from a one-port reflection (.s1p) or a two-port shunt-through measurement (.s2p).

    Z = Z0 (1 + S11) / (1 - S11) for a one-port; Z = (Z0 / 2) S21 / (1 - S21)
    for a shunt element between two Z0 ports.  Needs scikit-rf
    (``pip install 'emispec[touchstone]'``).
    """
    try:
        import skrf
    except ImportError:
        raise TouchstoneError(
            "reading Touchstone files needs scikit-rf; install it with: pip install 'emispec[touchstone]'"
        ) from None
    try:
        text = read_text(path, "Touchstone file").text
    except FileError as err:
        raise TouchstoneError(f"{path}: {err.problem}") from None
    handle = io.StringIO(text)
    handle.name = Path(path).name  # scikit-rf takes the number of ports from the extension
    try:
        network = skrf.Network(handle)
    except Exception as err:  # noqa: BLE001 - skrf raises many kinds
        raise TouchstoneError(f"cannot read {path} as Touchstone ({err})") from None
    z0 = network.z0[:, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        if network.nports == 1:
            s11 = network.s[:, 0, 0]
            z = z0 * (1 + s11) / (1 - s11)
        elif network.nports == 2:
            s21 = network.s[:, 1, 0]
            z = 0.5 * z0 * s21 / (1 - s21)
        else:
            raise TouchstoneError(f"{path}: expected a 1-port or a 2-port (shunt-through) file")
    f = np.asarray(network.f, dtype=float)
    bad = ~np.isfinite(z) | (np.abs(z) < 1e-9) | (np.abs(z) > 1e9)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise TouchstoneError(f"{path}: at {f[k]:g} Hz the part is an ideal open or short (|Z| = {abs(z[k]):.3g} "
                              "ohm); a decoupling part lies between 1 nohm and 1 Gohm")
    return ImpedanceData(f, np.asarray(z, dtype=complex), str(path))


def read_impedance_table(path: Path) -> ImpedanceData:
    """CSV with a header: frequency_hz plus magnitude_ohm and phase_deg, or resistance_ohm and reactance_ohm.

    Lines starting with '#' are comments.
    """
    try:
        text = read_text(path, "table").text
    except FileError as err:
        raise TouchstoneError(f"{path}: {err.problem}") from None
    lines = [(k, line) for k, line in enumerate(text.splitlines(), start=1)
             if line.strip() and not line.startswith("#")]
    if len(lines) < 2:
        raise TouchstoneError(f"{path}: no data rows")
    header = [cell.strip() for cell in next(csv.reader([lines[0][1]]))]
    if {"magnitude_ohm", "phase_deg"} <= set(header):
        pair = ("magnitude_ohm", "phase_deg")
    elif {"resistance_ohm", "reactance_ohm"} <= set(header):
        pair = ("resistance_ohm", "reactance_ohm")
    else:
        pair = None
    if "frequency_hz" not in header or pair is None:
        raise TouchstoneError(
            f"{path}: expected columns frequency_hz with magnitude_ohm and phase_deg, or with resistance_ohm and "
            "reactance_ohm"
        )
    where = [header.index(name) for name in ("frequency_hz", *pair)]
    values = np.empty((len(lines) - 1, 3))
    for row, (lineno, line) in enumerate(lines[1:]):
        cells = next(csv.reader([line]))
        if len(cells) != len(header):
            raise TouchstoneError(f"{path}: line {lineno}: expected {len(header)} cells, found {len(cells)}")
        try:
            values[row] = [float(cells[k]) for k in where]
        except ValueError:
            raise TouchstoneError(f"{path}: line {lineno}: expected numbers in {', '.join(header)}") from None
        if not np.all(np.isfinite(values[row])):
            raise TouchstoneError(f"{path}: line {lineno}: NaN and infinity are not allowed")
    f, a, b = values.T
    if pair[0] == "magnitude_ohm":
        if np.any(a <= 0) or np.any(a > 1e9):
            raise TouchstoneError(f"{path}: magnitude_ohm must be > 0 and <= 1e9 ohm")
        z = a * np.exp(1j * np.radians(b))
    else:
        z = a + 1j * b
    if np.any(f <= 0) or np.any(np.diff(f) <= 0) or np.any(np.abs(z) < 1e-9) or np.any(np.abs(z) > 1e9):
        raise TouchstoneError(f"{path}: frequencies must be > 0 and ascending, |Z| from 1 nohm to 1 Gohm")
    return ImpedanceData(f, z, str(path))


class FileCache:
    """What a board's parse has read, by reader and resolved path, so variants read no file again."""

    def __init__(self) -> None:
        self._data: dict[tuple[str, str], object] = {}

    def read(self, reader, path: str | Path, *args):
        key = (reader.__name__, os.path.abspath(path), *args)
        if key not in self._data:
            self._data[key] = reader(path, *args)
        return self._data[key]


@dataclass(frozen=True)
class CaptureData:
    """A time-domain record: sample times [s], the chosen column's values [V], its name and the file."""

    time_s: np.ndarray
    voltage_v: np.ndarray
    column: str
    file: str


_TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "μs": 1e-6, "ns": 1e-9, "ps": 1e-12}
_VOLT_UNITS = {"v": 1.0, "mv": 1e-3, "uv": 1e-6, "µv": 1e-6, "kv": 1e3}


def _unit_of(name: str) -> tuple[str, str]:
    """A column header split into its name and the unit in brackets or parentheses (``Time (ns)``)."""
    text = name.strip()
    for opening, closing in (("[", "]"), ("(", ")")):
        if text.endswith(closing) and opening in text:
            head, _, unit = text[:-1].rpartition(opening)
            if head.strip() and unit.strip().lower() in (*_TIME_UNITS, *_VOLT_UNITS):
                return head.strip(), unit.strip()
    return text, ""


def _split(line: str) -> list[str]:
    """Cells of a table line: tab, semicolon or comma separated, or whitespace (ngspice ``wrdata``)."""
    for sep in ("\t", ";", ","):
        if sep in line:
            cells = [c.strip() for c in line.split(sep)]
            if sep != "," and all(c.count(",") <= 1 and "." not in c for c in cells):
                cells = [c.replace(",", ".") for c in cells]  # decimal comma beside a tab or semicolon
            return cells
    return line.split()


def _numbers(cells: list[str]) -> list[float] | None:
    try:
        values = [float(c) for c in cells]
    except ValueError:
        return None
    return values if len(values) >= 2 else None


def _raw_columns(source: TextFile) -> tuple[list[str], np.ndarray]:
    """Columns of an ngspice ASCII raw file (``set filetype=ascii`` before ``write``)."""
    lines = source.text.splitlines()
    names, values_at = [], None
    for i, line in enumerate(lines):
        if line.startswith("Binary:"):
            raise FileError(source.file, f"line {i + 1}", "a binary raw file; write it with 'set filetype=ascii' "
                            "before 'write', or export a table with 'wrdata'")
        if line.startswith("Variables:"):
            j = i + 1
            while j < len(lines) and lines[j].startswith(("\t", " ")) and len(lines[j].split()) >= 3:
                names.append(lines[j].split()[1])
                j += 1
        if line.startswith("Values:"):
            values_at = i + 1
            break
    if not names or values_at is None:
        raise FileError(source.file, "raw file", "expected 'Variables:' and 'Values:' sections")
    tokens = " ".join(lines[values_at:]).split()
    width = len(names) + 1  # each point starts with its index
    if len(tokens) % width:
        raise FileError(source.file, "Values", f"the values do not come in groups of {width} (index + "
                        f"{len(names)} variables)")
    try:
        table = np.array(tokens, dtype=float).reshape(-1, width)[:, 1:]
    except ValueError:
        raise FileError(source.file, "Values", "a value is not a number (complex data is not a transient)") from None
    return names, table


def _table_columns(source: TextFile) -> tuple[list[str], np.ndarray]:
    """Columns of a CSV/TSV/whitespace table: metadata and '#' lines before the header skipped."""
    rows, header, first = [], None, None
    previous = None
    for lineno, line in enumerate(source.text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith(("#", "*", ";")):
            continue
        cells = _split(line)
        values = _numbers(cells)
        if values is None:
            if rows:
                raise FileError(source.file, f"line {lineno}", f"expected {len(rows[0])} numbers, got {line[:40]!r}")
            previous = cells
            continue
        if rows and len(values) != len(rows[0]):
            raise FileError(source.file, f"line {lineno}", f"expected {len(rows[0])} numbers, got {len(values)}")
        if first is None:
            first = lineno
            header = previous if previous is not None and len(previous) == len(values) else None
        rows.append(values)
    if not rows:
        raise FileError(source.file, "table", "no rows of numbers (time, voltage, ...)")
    table = np.array(rows)
    names = header or [f"column {k + 1}" for k in range(table.shape[1])]
    if header is None and table.shape[1] >= 4 and table.shape[1] % 2 == 0 \
            and all(np.array_equal(table[:, 0], table[:, k]) for k in range(2, table.shape[1], 2)):
        names[2::2] = [names[0]] * (table.shape[1] // 2 - 1)  # ngspice wrdata: a time column before each vector
    return names, table


def read_capture(path: str | Path, column: str | None = None, what: str = "capture") -> CaptureData:
    """A scope capture or simulator output: CSV/TSV (units from the header), ngspice ``wrdata`` or ASCII raw.

    The first column is time (seconds unless the header says ``(ms)``, ``[ns]``...); the others are voltages
    (volts unless ``(mV)``).  ``column`` picks one by its name; without it the file must have one.  A time
    column that repeats (ngspice ``wrdata`` writes one before each vector) is dropped.
    """
    source = read_text(path, what)
    if source.text.startswith("Title:"):
        names, table = _raw_columns(source)
    else:
        names, table = _table_columns(source)
    if table.shape[1] < 2:
        raise FileError(source.file, what, "needs a time column and at least one voltage column")
    time_name, time_unit = _unit_of(names[0])
    time_scale = _TIME_UNITS.get(time_unit.lower(), 1.0)
    voltages = {}
    for k in range(1, table.shape[1]):
        name, unit = _unit_of(names[k])
        if names[k] == names[0] and np.array_equal(table[:, k], table[:, 0]):
            continue
        voltages[names[k]] = (table[:, k] * _VOLT_UNITS.get(unit.lower(), 1.0), name)
    wanted = None
    if column is not None:
        wanted = next((k for k, (_, name) in voltages.items() if column in (k, name)), None)
        if wanted is None:
            raise FileError(source.file, "column", f"no column {column!r}; columns: {', '.join(voltages)}")
    elif len(voltages) == 1:
        wanted = next(iter(voltages))
    else:
        raise FileError(source.file, "column", f"{len(voltages)} voltage columns ({', '.join(voltages)}); "
                        "name one")
    time = table[:, 0] * time_scale
    steps = np.diff(time)
    if not np.all(steps > 0):
        bad = int(np.argmax(~(steps > 0))) + 2
        raise FileError(source.file, f"sample {bad}", "time does not increase (the record must be in time order)")
    values = voltages[wanted][0]
    if not np.all(np.isfinite(values)):
        raise FileError(source.file, wanted, "a value is not finite")
    return CaptureData(time, values, wanted, source.file)


@dataclass(frozen=True)
class ScanData:
    """A measured scan: one level column per detector (dB of ``unit``, as in the file), and the file's metadata.

    ``frequency_hz`` ascending; ``levels`` maps a detector name (PK, QP, AV, RMS-AV) to its column;
    ``metadata`` holds the ``key;value`` lines before the header (keys in lower case).
    """

    frequency_hz: np.ndarray
    levels: dict
    unit: str
    metadata: dict
    file: str


_FREQUENCY_NAMES = ("frequency", "freq", "f")
#: Frequency units a scan's header (or --frequency-unit) may name, in lower case.
FREQUENCY_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
#: Detector names a scan's header may carry, in lower case without spaces, dashes or underscores.
_DETECTOR_WORDS = {"pk": "PK", "peak": "PK", "maxpeak": "PK", "qp": "QP", "quasipeak": "QP", "av": "AV",
                   "avg": "AV", "average": "AV", "cav": "AV", "rmsav": "RMS-AV", "rmsaverage": "RMS-AV"}
#: Level units a scan may be in, as written (lower case, micro as u) -> emispec's spelling.
SCAN_UNITS = {"dbuv/m": "dBuV/m", "dbuv": "dBuV", "dbua": "dBuA", "dbm": "dBm"}


def _level_unit(text: str) -> str | None:
    """The level unit named anywhere in a header cell (``Level [dBµV/m]``, ``PK (dBuV)``), or None."""
    folded = text.lower().replace("µ", "u").replace("μ", "u").replace(" ", "")
    for written in sorted(SCAN_UNITS, key=len, reverse=True):  # dbuv/m before dbuv
        if written in folded:
            return SCAN_UNITS[written]
    return None


def _detector_of(name: str) -> str | None:
    words = name.split("[")[0].split("(")[0].lower().replace("-", " ").replace("_", " ").split()
    joined = "".join(words)
    for candidate in [joined] + ["".join(words[i:i + 2]) for i in range(len(words) - 1)] + words:
        if candidate in _DETECTOR_WORDS:
            return _DETECTOR_WORDS[candidate]
    return None


def read_scan(path: str | Path, detector: str | None = None, unit: str | None = None,
              frequency_unit: str | None = None, what: str = "scan") -> ScanData:
    """A receiver or spectrum-analyser export (see README, "Measured scans").

    Separators comma, semicolon or tab (decimal comma beside the latter two); metadata lines (``key;value``)
    and ``#`` comments before the header; a header naming the frequency column (``Frequency``, ``Freq``,
    ``f``, unit Hz/kHz/MHz/GHz in brackets or parentheses) and level columns named by their detector (a single
    unnamed level column is ``detector``, default PK), level units from the header or ``unit``; or no header:
    frequency (in ``frequency_unit``, default Hz) and one level column.

    Raises
    ------
    FileError
        Naming the line and what was expected.
    """
    source = read_text(path, what)
    file = source.file
    metadata, header, header_line, rows = {}, None, None, []
    for lineno, line in enumerate(source.text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        cells = _split(line)
        try:
            values = [float(c) for c in cells]
        except ValueError:
            values = None
        if values is not None and len(values) >= 2:
            if rows and len(values) != len(rows[0][1]):
                raise FileError(file, f"line {lineno}", f"expected {len(rows[0][1])} numbers, got {len(values)}")
            rows.append((lineno, values))
            continue
        if values is not None and len(values) == 1:
            raise FileError(file, f"line {lineno}", "one column: expected a frequency and at least one level")
        if rows or _numbers([cells[0], "0"]) is not None:  # a number first: a data row with text in it
            expected = f"{len(rows[0][1])} numbers" if rows else "numbers"
            raise FileError(file, f"line {lineno}", f"expected {expected} (frequency, level...), got "
                            f"{line.strip()[:40]!r}")
        bare = cells[0].split("[")[0].split("(")[0].strip().lower()
        if len(cells) >= 2 and bare in _FREQUENCY_NAMES:
            header, header_line = cells, lineno
        elif len(cells) >= 2 and cells[0].strip():
            metadata[cells[0].strip().lower()] = ";".join(cells[1:]).strip()
    if not rows:
        raise FileError(file, what, "no rows of numbers (frequency and level)")
    table = np.array([v for _, v in rows])
    if header is not None and len(header) != table.shape[1]:
        raise FileError(file, f"line {header_line}", f"the header names {len(header)} columns, the rows hold "
                        f"{table.shape[1]}")
    if header is None:
        if table.shape[1] != 2:
            raise FileError(file, f"line {rows[0][0]}", f"{table.shape[1]} columns without a header: expected two "
                            "(frequency, level), or a header naming them")
        scale_name = (frequency_unit or "Hz").lower()
        names = [f"frequency ({frequency_unit or 'Hz'})", "level"]
    else:
        names = header
        inside = header[0][len(header[0].split("[")[0].split("(")[0]):].strip("[]() ").lower()
        scale_name = inside or (frequency_unit or "Hz").lower()
    if scale_name not in FREQUENCY_UNITS:
        raise FileError(file, f"line {header_line or rows[0][0]}", f"frequency unit {scale_name!r}; expected Hz, "
                        "kHz, MHz or GHz")
    frequency = table[:, 0] * FREQUENCY_UNITS[scale_name]
    levels, units = {}, set()
    for k in range(1, table.shape[1]):
        named = _detector_of(names[k])
        if named is None:
            if table.shape[1] > 2:
                raise FileError(file, f"line {header_line}", f"column {names[k]!r}: name its detector (PK, QP, AV) "
                                "when a scan has several level columns")
            named = detector or "PK"
        if named in levels:
            raise FileError(file, f"line {header_line}", f"two columns for detector {named}")
        levels[named] = table[:, k]
        found = _level_unit(names[k])
        if found is not None:
            units.add(found)
    if len(units) > 1:
        raise FileError(file, f"line {header_line}", f"level columns in different units ({', '.join(sorted(units))})")
    found = units.pop() if units else None
    if unit == "dB":  # a correction table: frequency against a dB figure, whatever its header calls it
        found = "dB"
    elif unit is not None:
        found = SCAN_UNITS.get(unit.lower().replace("µ", "u").replace("μ", "u"))
        if found is None:
            raise FileError(file, "unit", f"{unit!r}; expected one of dBuV/m, dBuV, dBuA, dBm")
    if found is None:
        raise FileError(file, f"line {header_line or rows[0][0]}", "no level unit in the header (dBuV/m, dBuV, "
                        "dBuA, dBm); give it with --unit")
    steps = np.diff(frequency)
    if not np.all(steps > 0):
        bad = int(np.argmax(~(steps > 0))) + 1
        raise FileError(file, f"line {rows[bad][0]}", "frequency does not increase (the scan must be in frequency "
                        "order)")
    if not (np.all(np.isfinite(table)) and frequency[0] > 0):
        bad = int(np.argmax(~np.all(np.isfinite(table), axis=1) | (table[:, 0] <= 0)))
        raise FileError(file, f"line {rows[bad][0]}", "expected a frequency > 0 and finite levels")
    return ScanData(frequency, levels, found, metadata, file)
