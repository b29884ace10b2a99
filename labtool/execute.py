"""Run one function over many items: in this process, on a local process pool, or on a Dask cluster.

Every batch command (ingest, measure, Monte Carlo, report groups) goes through :func:`run_batch`, so
results are the same whichever executor runs them: outcomes come back in input order and a failure
of one item (a ``LabtoolError``) is reported with that item instead of stopping the batch.

``--scheduler`` forms: ``local`` (all cores), ``local:N`` (N worker processes; ``local:1`` runs in
this process), ``tcp://HOST:PORT`` (an existing Dask distributed scheduler).
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Iterator, Sequence

from labtool.errors import LabtoolError, UsageError
from labtool.progress import progress


@dataclass(frozen=True)
class Scheduler:
    kind: str  # "local" or "dask"
    workers: int = 1
    address: str | None = None
    connect_timeout_s: float = 10.0

    def __str__(self) -> str:
        return self.address if self.kind == "dask" else f"local:{self.workers}"


@dataclass(frozen=True)
class Outcome:
    """The result of one item: ``value`` when it worked, ``error`` (one line) when it did not."""

    item: Any
    value: Any = None
    error: str | None = None

    @property
    def ok(self) -> bool:
        return self.error is None


def parse_scheduler(text: str | None) -> Scheduler:
    if text is None or text == "local":
        return Scheduler("local", os.cpu_count() or 1)
    if text.startswith("local:"):
        try:
            n = int(text.split(":", 1)[1])
        except ValueError:
            n = 0
        if n < 1:
            raise UsageError(f"--scheduler {text!r}: the worker count must be a whole number ≥ 1")
        return Scheduler("local", n)
    if text.startswith("tcp://"):
        return Scheduler("dask", address=text)
    raise UsageError(f"--scheduler {text!r}: expected local, local:N or tcp://HOST:PORT")


def add_scheduler_option(parser) -> None:
    parser.add_argument("--scheduler", metavar="SPEC", default=None,
                        help="where batch work runs: local (all cores, default), local:N, or "
                             "tcp://HOST:PORT for a Dask distributed scheduler")


def _call(fn: Callable, item: Any) -> Outcome:
    try:
        return Outcome(item, value=fn(item))
    except LabtoolError as exc:
        return Outcome(item, error=str(exc))


def _worker_setup(parent_pid: int) -> None:
    """In a pool worker: one BLAS thread, and no life after the parent.

    The processes are the parallelism; BLAS threads on top only fight for cores (measured: 2 workers
    gave 1.1× instead of 2× on two cores with the default BLAS threads). A parent killed with
    SIGKILL cannot stop its pool, so each worker asks the kernel for SIGKILL when the parent dies
    (Linux prctl PR_SET_PDEATHSIG); elsewhere a thread watches the parent's pid.
    """
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    if sys.platform.startswith("linux"):
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, signal.SIGKILL)
    else:
        threading.Thread(target=_exit_with_parent, args=(parent_pid,), daemon=True).start()
    if os.getppid() != parent_pid:  # the parent died before the request took effect
        os._exit(1)


_PR_SET_PDEATHSIG = 1  # linux/prctl.h


def _exit_with_parent(parent_pid: int) -> None:
    while os.getppid() == parent_pid:
        time.sleep(1.0)
    os._exit(1)


def run_batch(fn: Callable[[Any], Any], items: Sequence[Any], scheduler: Scheduler | None = None, *,
              what: str = "", unit: str = "item", chunksize: int | None = None) -> Iterator[Outcome]:
    """Yield an :class:`Outcome` per item, in input order. ``fn`` must be a picklable top-level function."""
    scheduler = scheduler or Scheduler("local", 1)
    items = list(items)
    if scheduler.kind == "dask":
        yield from _run_dask(fn, items, scheduler, what=what, unit=unit)
        return
    workers = min(scheduler.workers, max(1, len(items)))
    if workers == 1:
        for item in progress(items, total=len(items), what=what, unit=unit):
            yield _call(fn, item)
        return
    chunk = chunksize or max(1, min(64, len(items) // (workers * 8) or 1))
    with ProcessPoolExecutor(max_workers=workers, initializer=_worker_setup, initargs=(os.getpid(),)) as pool:
        results = pool.map(_call, [fn] * len(items), items, chunksize=chunk)
        yield from progress(results, total=len(items), what=what, unit=unit)


def _run_dask(fn, items: list, scheduler: Scheduler, *, what: str, unit: str) -> Iterable[Outcome]:
    try:
        from distributed import Client
    except ImportError:
        raise UsageError("--scheduler tcp://…: Dask is not installed (pip install 'labtool[cluster]')") from None
    try:
        client = Client(scheduler.address, timeout=scheduler.connect_timeout_s)
    except (OSError, TimeoutError) as exc:
        raise UsageError(f"--scheduler {scheduler.address}: cannot reach the Dask scheduler ({exc})") from None
    try:
        futures = client.map(_call, [fn] * len(items), items, pure=False)
        for fut in progress(futures, total=len(items), what=what, unit=unit):
            yield fut.result()
    finally:
        client.close()
