"""Many boards at once: ensembles of one template, evaluated on any executor.

An ensemble is a template plus a list of members, each a set of values (key
path -> value as written in a board file, or SI values of numeric parameters).
Evaluating it gives one estimate per member, in order; :class:`EnsembleResult`
lines their rows up by (source, harmonic), so that a column of every member is
one matrix (members x rows) even where members have different harmonics (a
frequency change moves the span's edges).

Evaluation takes any ``concurrent.futures``-style executor (anything with
``submit(fn, *args)`` returning a future: a process or thread pool, a Dask
client's executor).  Jobs carry the template and a chunk of members, never
open files; the default is to run in this process.  :func:`process_pool`
makes a process pool whose workers end when their parent does.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import dataclasses
import os
import sys
import threading
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .parameters import Template
from .pipeline import Estimate, Reuse, estimate

__all__ = ["Ensemble", "EnsembleResult", "evaluate", "gather", "process_pool", "dask_client"]


_LOCAL = threading.local()


def _worker_reuse(template: Template) -> tuple[Template, Reuse]:
    """The template this worker thread already holds for the same board file (with its parsed entries) and one
    :class:`emispec.pipeline.Reuse`, both kept from job to job: the values of one key recur across the jobs of
    a cross product, and so do the lines and readings of the sources only that key changes.  Every job carries
    its own copy of the template; without this, each copy's entries would be new objects, found in no memo."""
    if getattr(_LOCAL, "reuse", None) is None:
        _LOCAL.reuse, _LOCAL.templates = Reuse(), {}
    if template.sha256:
        if len(_LOCAL.templates) >= 8:
            _LOCAL.templates.clear()
        template = _LOCAL.templates.setdefault((template.file, str(template.base_dir), template.sha256), template)
    return template, _LOCAL.reuse


def _evaluate_chunk(template: Template, members: Sequence[Mapping], si: bool) -> list[Estimate]:
    """Estimate each member; line spectra are dropped to keep many estimates in memory.

    Members share the work on the sources they do not change (see :class:`emispec.pipeline.Reuse`).
    """
    template, reuse = _worker_reuse(template)
    build = template.board_at if si else template.board
    return [dataclasses.replace(estimate(build(member), reuse), lines=()) for member in members]


def evaluate(template: Template, members: Sequence[Mapping], executor=None, progress=None, si: bool = False,
             chunk: int | None = None) -> list[Estimate]:
    """One estimate per member, in order.

    Parameters
    ----------
    template : Template
    members : sequence of mapping
        Values per member: as written in a board file, or (``si=True``) SI
        values of numeric parameters.
    executor : concurrent.futures.Executor, optional
        Where to run; None runs in this process.
    progress : callable, optional
        Called with the number of members just finished.
    chunk : int, optional
        Members per job (default: about four jobs per worker).
    """
    members = list(members)
    if executor is None:
        build = template.board_at if si else template.board
        reuse, out = Reuse(), []
        for member in members:
            out.append(dataclasses.replace(estimate(build(member), reuse), lines=()))
            if progress is not None:
                progress(1)
        return out
    workers = getattr(executor, "_max_workers", None) or os.cpu_count() or 1
    size = chunk or max(1, len(members) // (4 * workers))
    pieces = [members[i:i + size] for i in range(0, len(members), size)]
    futures = {executor.submit(_evaluate_chunk, template, piece, si): k for k, piece in enumerate(pieces)}
    results = gather(futures, [len(p) for p in pieces], progress)
    return [est for piece in results for est in piece]


def gather(futures: dict, sizes: list[int], progress=None, completed=concurrent.futures.as_completed) -> list:
    """The result of each piece of work, in order (``futures`` maps each future to its piece's index), with
    ``progress(size)`` as each finishes; on any error the others are cancelled."""
    results: list = [None] * len(sizes)
    try:
        for future in completed(futures):
            k = futures[future]
            results[k] = future.result()
            if progress is not None:
                progress(sizes[k])
    except BaseException:
        for future in futures:
            future.cancel()
        raise
    return results


@dataclass(frozen=True)
class EnsembleResult:
    """Estimates of an ensemble's members, with their rows lined up by (source, harmonic)."""

    members: tuple[Mapping, ...]
    estimates: tuple[Estimate, ...]

    @property
    def keys(self) -> list[tuple[str, int]]:
        """Every (source, harmonic) some member has, in the order of first appearance."""
        seen: dict[tuple[str, int], None] = {}
        for est in self.estimates:
            for key in zip(est.rows.source.tolist(), est.rows.harmonic.tolist()):
                seen.setdefault((str(key[0]), int(key[1])), None)
        return list(seen)

    def matrix(self, column: str, detector: str | None = None) -> np.ndarray:
        """A numeric row column of every member: shape (members, len(keys)), NaN where a member lacks the row."""
        keys = self.keys
        index = {k: j for j, k in enumerate(keys)}
        out = np.full((len(self.estimates), len(keys)), np.nan)
        for m, est in enumerate(self.estimates):
            values = est.rows.columns[column]
            values = values[detector] if detector is not None else values
            cols = [index[(str(s), int(h))] for s, h in zip(est.rows.source, est.rows.harmonic)]
            out[m, cols] = values
        return out


class Ensemble:
    """A template and its members (see the module docstring)."""

    def __init__(self, template: Template, members: Sequence[Mapping], si: bool = False):
        self.template, self.members, self.si = template, tuple(members), si

    def __len__(self) -> int:
        return len(self.members)

    def evaluate(self, executor=None, progress=None) -> EnsembleResult:
        estimates = evaluate(self.template, self.members, executor, progress, self.si)
        return EnsembleResult(self.members, tuple(estimates))


def _worker_start(parent: int) -> None:
    """Worker initializer: one FFT thread per process, and exit as soon as the parent is gone (even after SIGKILL)."""
    from . import receiver

    receiver.FFT_WORKERS = 1
    if sys.platform.startswith("linux"):
        try:
            import ctypes
            import signal

            ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
        except (OSError, AttributeError):
            pass

    def watch():
        while True:
            if os.getppid() != parent:
                os._exit(1)
            threading.Event().wait(0.5)

    threading.Thread(target=watch, daemon=True).start()


def process_pool(workers: int | None = None) -> concurrent.futures.ProcessPoolExecutor:
    """A process pool whose workers end with this process."""
    return concurrent.futures.ProcessPoolExecutor(workers or os.cpu_count() or 1, initializer=_worker_start,
                                                  initargs=(os.getpid(),))


class ClusterError(InputError):
    """Dask is not installed, or the scheduler cannot be reached (exit 2)."""


@contextlib.contextmanager
def dask_client(workers: int | None = None, scheduler: str | None = None):
    """A ``dask.distributed`` client: on the cluster at ``scheduler`` (``tcp://host:port``), or on a local
    cluster of ``workers`` processes (one thread each) that ends with the block.

    Raises
    ------
    ClusterError
        Dask is missing (the message says how to install it) or the scheduler does not answer.
    """
    option = "--scheduler" if scheduler else "--workers"
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise ClusterError(f"{option}: needs Dask; install it with pip install 'emispec[cluster]'") from None
    import logging

    logging.getLogger("distributed").setLevel(logging.ERROR)  # its start-up chatter is not ours to show
    if scheduler:
        try:
            client = Client(scheduler, timeout="10s")
        except (OSError, TimeoutError, ValueError) as problem:
            raise ClusterError(f"--scheduler {scheduler}: no Dask scheduler answers there ({problem}); start one "
                               "with dask scheduler, or check the address (tcp://HOST:PORT)") from None
        try:
            yield client
        finally:
            client.close()
        return
    import dask

    # Dask's nannies start workers with MALLOC_TRIM_THRESHOLD_ set, which makes every large numpy temporary a
    # fresh mmap: the tolerance studies then ran 2-3x slower than on a plain process pool (measured)
    environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ", {}))
    environ.pop("MALLOC_TRIM_THRESHOLD_", None)
    with dask.config.set({"distributed.nanny.pre-spawn-environ": environ}):
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None)
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
