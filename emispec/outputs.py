"""Writing output files without losing what the user had.

- :func:`write_file` writes through what a path names: a symlink's target is
  replaced (the link stays a link); a FIFO, a device or ``-`` (stdout) is
  written directly; a regular file (or a new one) is written to a temporary
  file beside it and renamed over it, so an interrupted run never leaves a
  half-written file over a good one.  Nothing that is not a regular file is
  ever replaced.
- :func:`write_set` writes a set of files into a folder: every target is
  checked first, every file is rendered into a staging folder, and only then
  are they moved into place.  A run killed while rendering leaves its staging
  folder (``.emispec-<pid>-*``); the next run into that folder removes it.
"""

from __future__ import annotations

import os
import shutil
import stat
import sys
import tempfile
from collections.abc import Callable
from pathlib import Path

from .errors import InputError

__all__ = ["OutputError", "write_file", "write_set"]

STAGING_PREFIX = ".emispec-"


class OutputError(InputError):
    """An output that cannot be written (the message says which and why)."""


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _umask()


def _open_mode(data) -> tuple[str, dict]:
    return ("wb", {}) if isinstance(data, bytes) else ("w", {"encoding": "utf-8", "newline": ""})


def _replace_atomically(target: Path, data) -> None:
    mode, kwargs = _open_mode(data)
    fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, mode, **kwargs) as handle:
            handle.write(data)
        os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the file the permissions open() would
        os.replace(tmp, target)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_file(path: str | Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` (``"-"``: stdout) as the module docstring says.

    Raises
    ------
    OutputError
        The path is a directory, or the folder cannot be written.
    """
    if str(path) == "-":
        stream = sys.stdout.buffer if isinstance(data, bytes) else sys.stdout
        stream.write(data)
        stream.flush()
        return
    target = Path(os.path.realpath(path))
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        info = os.stat(target)
    except FileNotFoundError:
        info = None
    except OSError as err:
        raise OutputError(f"{path}: cannot write output ({err.strerror}); nothing was written") from None
    try:
        if info is not None and stat.S_ISDIR(info.st_mode):
            raise OutputError(f"{path}: is a directory; nothing was written")
        if info is not None and not stat.S_ISREG(info.st_mode):  # a FIFO, a device: write into it
            mode, kwargs = _open_mode(data)
            with open(target, mode, **kwargs) as handle:
                handle.write(data)
            return
        _replace_atomically(target, data)
    except OSError as err:
        raise OutputError(f"{path}: cannot write output ({err.strerror or err}); nothing was written") from None


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _clean_leftovers(folder: Path) -> None:
    """Remove staging folders of runs that were killed (their process is gone)."""
    for item in folder.glob(f"{STAGING_PREFIX}*"):
        parts = item.name[len(STAGING_PREFIX):].split("-", 1)
        if item.is_dir() and parts[0].isdigit() and not _alive(int(parts[0])):
            shutil.rmtree(item, ignore_errors=True)


def write_set(folder: str | Path, files: dict[str, Callable[[], str | bytes]]) -> list[Path]:
    """Render every file (name -> function giving its text or bytes) and put the set into ``folder``.

    Returns the paths written.  Before anything is rendered every target is checked: a directory or another
    non-regular file in the way is refused, and nothing is written.
    """
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
        _clean_leftovers(folder)
    except OSError as err:
        raise OutputError(f"{folder}: cannot write output ({err.strerror or err}); nothing was written") from None
    targets = {name: Path(os.path.realpath(folder / name)) for name in files}
    for name, target in targets.items():
        if target.exists() and not target.is_file():
            what = "a directory" if target.is_dir() else "not a regular file"
            raise OutputError(f"{folder / name}: is {what}; nothing was written")
    try:
        staging = Path(tempfile.mkdtemp(dir=folder, prefix=f"{STAGING_PREFIX}{os.getpid()}-"))
    except OSError as err:
        raise OutputError(f"{folder}: cannot write output ({err.strerror or err}); nothing was written") from None
    written: list[Path] = []
    try:
        for name, render in files.items():
            data = render()
            mode, kwargs = _open_mode(data)
            with open(staging / name, mode, **kwargs) as handle:
                handle.write(data)
            os.chmod(staging / name, 0o666 & ~_UMASK)
        for name, target in targets.items():
            os.replace(staging / name, target)
            written.append(folder / name)
        return written
    except OSError as err:
        done = f"; written: {', '.join(p.name for p in written)}" if written else "; nothing was written"
        raise OutputError(f"{folder}: cannot write output ({err.strerror or err}){done}") from None
    finally:
        shutil.rmtree(staging, ignore_errors=True)
