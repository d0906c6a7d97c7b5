"""Run one function over many items on local worker processes or a Dask cluster.

Generic: it knows nothing of motion or video, only callables and picklable items. Used by
the segmented analysis of one long clip (:mod:`stabilize.segments`) and by batch
(:mod:`stabilize.jobs.batch`).

Workers: local processes (``concurrent.futures`` with the forkserver or spawn start method,
never fork: the parent may hold threads and ffmpeg pipes), a Dask ``LocalCluster``
(``scheduler="local"``) or an existing Dask cluster (``scheduler="tcp://host:port"``), whose
workers must see the same paths and have stabilize installed. A worker is one core: its
numerical libraries run single-threaded (:func:`worker_environment`), and work inside it may
hold OpenCV to one thread (:func:`opencv_threads`). Progress from local workers reaches the
caller over a queue (:class:`ProgressCounter`).
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import socket
import struct
import time
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from contextlib import contextmanager
from queue import Empty
from typing import Any

import cv2

from .errors import StabilizeError
from .io.process import usable_cores

__all__ = [
    "CONNECT_TIMEOUT_S",
    "PROGRESS_EVERY_S",
    "check_scheduler",
    "ProgressCounter",
    "default_workers",
    "opencv_threads",
    "parallel_map",
    "worker_environment",
]


def default_workers() -> int:
    """The cores this process may use.

    Returns
    -------
    int : the number of cores in this process's CPU affinity set (at least 1); where that
    cannot be asked, the machine's core count.
    """
    return usable_cores()


@contextmanager
def opencv_threads(count: int | None) -> Iterator[None]:
    """Run the block with OpenCV limited to ``count`` threads, and restore the previous
    setting afterwards.

    Parameters
    ----------
    count : OpenCV threads inside the block; None leaves the setting as it is.
    """
    if count is None:
        yield
        return
    before = cv2.getNumThreads()
    cv2.setNumThreads(count)
    try:
        yield
    finally:
        cv2.setNumThreads(before)


# ------------------------------------------------------------------ workers
def _context() -> multiprocessing.context.BaseContext:
    methods = multiprocessing.get_all_start_methods()
    return multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")


def parallel_map(fn: Callable[[Any], Any], items: list[Any], *, workers: int,
                 scheduler: str | None = None,
                 on_progress: Callable[[int, int], None] | None = None,
                 ) -> Iterator[tuple[int, Any]]:
    """Run ``fn`` on every item on local processes or a Dask cluster; yield (index, result)
    as each finishes, the result being the exception when the call (or its worker) failed.

    Parameters
    ----------
    fn : a picklable function of one item (module level, so workers can import it).
    items : the picklable items.
    workers : processes to use at most (one core each).
    scheduler : None for a local process pool of ``workers`` processes, ``"local"`` for a
        Dask LocalCluster of ``workers`` single-threaded processes started here, or the
        address of a running Dask scheduler (``tcp://host:port``).
    on_progress : ``on_progress(index, n)`` is called in this process, between results,
        with the counts that ``fn`` reported through :class:`ProgressCounter` while working
        on item ``index``; local processes only (Dask workers report nothing before they
        finish). Counts for an item may still arrive after its result.

    Yields
    ------
    (index, result) : the item's index in ``items`` and ``fn``'s result or exception, in
    the order the items finish.
    """
    if not items:
        return
    if scheduler is None:
        yield from _pool_map(fn, items, workers, on_progress)
    else:
        yield from _dask_map(fn, items, workers, scheduler)


# ------------------------------------------------------------------ progress
#: In a local pool's worker: where progress goes (set by the pool's initializer), and the
#: item the worker is on. None elsewhere (this process, Dask workers).
_progress_queue: Any = None
_current_item: list[int] = [-1]

#: A worker sends its count at most this often (seconds): a bar needs no more, and each
#: message costs a pickle and a pipe write.
PROGRESS_EVERY_S = 0.5


def _init_pool_worker(queue: Any) -> None:
    global _progress_queue
    _progress_queue = queue


class ProgressCounter:
    """An ``on_frame`` for work inside a pool worker: adds up the counts (after skipping the
    first ``skip``) and sends them to the pool's owner every :data:`PROGRESS_EVERY_S`; a
    no-op where there is no pool.

    Parameters
    ----------
    skip : counts to leave out first (work a later run repeats and does not keep).
    cap : most counts passed on after the skipped ones (work past it is not kept either);
        None: no cap.
    """

    def __init__(self, skip: int = 0, cap: int | None = None) -> None:
        self.skip, self.pending, self.sent_at = skip, 0, time.monotonic()
        self.left = cap

    def __call__(self, n: int) -> None:
        if self.skip:
            used = min(self.skip, n)
            self.skip, n = self.skip - used, n - used
        if self.left is not None:
            n = min(n, self.left)
            self.left -= n
        self.pending += n
        if time.monotonic() - self.sent_at >= PROGRESS_EVERY_S:
            self.flush()

    def flush(self) -> None:
        """Send what has been counted and not yet sent."""
        if _progress_queue is not None and self.pending:
            _progress_queue.put((_current_item[0], self.pending))
        self.pending, self.sent_at = 0, time.monotonic()


def _run_item(fn: Callable[[Any], Any], index: int, item: Any) -> Any:
    _current_item[0] = index
    return fn(item)


# A worker is one core: numerical libraries in it must not start threads of their own, or
# the workers oversubscribe the cores they share (common practice; here it gained about 8%).
_ONE_THREAD_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


@contextmanager
def worker_environment() -> Iterator[None]:
    """Start worker processes with :data:`_ONE_THREAD_ENV` (settings the user made win),
    leaving this process's environment as it was."""
    with _env(**_ONE_THREAD_ENV):
        yield


def _pool_map(fn, items, workers, on_progress=None):
    ctx = _context()
    queue = ctx.Queue() if on_progress else None
    with worker_environment(), ProcessPoolExecutor(
            max_workers=min(workers, len(items)), mp_context=ctx,
            initializer=_init_pool_worker, initargs=(queue,)) as pool:
        futures = {pool.submit(_run_item, fn, i, item): i for i, item in enumerate(items)}
        pending = set(futures)
        try:
            while pending:
                done, pending = wait(pending, timeout=PROGRESS_EVERY_S if queue else None,
                                     return_when=FIRST_COMPLETED)
                _drain(queue, on_progress)
                for fut in done:
                    exc = fut.exception()
                    yield futures[fut], exc if exc is not None else fut.result()
        finally:
            for fut in pending:
                fut.cancel()
    if queue is not None:
        _drain(queue, on_progress)
        queue.close()


def _drain(queue, on_progress) -> None:
    while queue is not None:
        try:
            index, n = queue.get_nowait()
        except Empty:
            return
        on_progress(index, n)


#: Seconds a Dask scheduler has to accept a connection, and again to say hello.
CONNECT_TIMEOUT_S = 10.0
# A Dask message starts with the byte length of its frame table (8 bytes, little-endian on
# the machines it runs on): a few dozen bytes. Anything larger is not Dask talking.
_MAX_DASK_PRELUDE = 1 << 20


def check_scheduler(address: str, timeout_s: float = CONNECT_TIMEOUT_S) -> None:
    """Refuse, within ``timeout_s`` seconds each for the connection and for the greeting, an
    address where no Dask scheduler answers.

    A Dask scheduler greets each new connection at once; a server that accepts and stays
    silent, or answers with something else (a web server), is refused here instead of
    waiting forever or reading its bytes as a message length.

    Parameters
    ----------
    address : ``tcp://host:port``, ``tls://host:port`` or ``host:port``; other schemes are
        left to Dask.
    timeout_s : seconds allowed for each step.

    Raises
    ------
    StabilizeError
        Naming the setting and the address.
    """
    scheme, sep, rest = address.partition("://")
    if not sep:
        scheme, rest = "tcp", address
    if scheme not in ("tcp", "tls"):
        return
    where = f"setting 'scheduler': {address}"
    host, _, port_text = rest.rstrip("/").rpartition(":")
    host = host.strip("[]")
    if not host or not port_text.isdigit() or not 0 < int(port_text) < 65536:
        raise StabilizeError(f"{where}: not an address of the form tcp://HOST:PORT")
    try:
        sock = socket.create_connection((host, int(port_text)), timeout=timeout_s)
    except TimeoutError:
        raise StabilizeError(f"{where}: no connection within {timeout_s:g} s") from None
    except OSError as exc:
        raise StabilizeError(f"{where}: cannot reach a Dask scheduler "
                             f"({exc.strerror or exc})") from None
    with sock:
        if scheme == "tls":
            return
        data = b""
        try:
            while len(data) < 8:
                chunk = sock.recv(8 - len(data))
                if not chunk:
                    break
                data += chunk
        except TimeoutError:
            raise StabilizeError(f"{where}: accepted the connection but said nothing within "
                                 f"{timeout_s:g} s; not a Dask scheduler, or a stalled one"
                                 ) from None
        except OSError as exc:
            raise StabilizeError(f"{where}: the connection failed "
                                 f"({exc.strerror or exc})") from None
    if len(data) < 8 or struct.unpack("<Q", data)[0] > _MAX_DASK_PRELUDE:
        raise StabilizeError(f"{where}: answered, but not as a Dask scheduler does")


def _dask_map(fn, items, workers, scheduler):
    try:
        # lazy: Dask is an optional extra and takes seconds to import.
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise StabilizeError("setting 'scheduler' needs Dask: pip install "
                             "'stabilize[cluster]'") from None
    cluster = None
    # Dask's own log lines (several per event, with tracebacks when a run is interrupted) are
    # not this program's messages: its workers and this process keep only critical ones.
    quiet = logging.getLogger("distributed")
    saved_level = quiet.level
    quiet.setLevel(logging.CRITICAL)
    try:
        if scheduler == "local":
            with worker_environment(), _env(DASK_LOGGING__DISTRIBUTED="critical"):
                cluster = LocalCluster(n_workers=workers, threads_per_worker=1,
                                       processes=True, dashboard_address=None)
            client = Client(cluster)
        else:
            check_scheduler(scheduler)
            try:
                client = Client(scheduler, timeout=f"{CONNECT_TIMEOUT_S:g}s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise StabilizeError(f"setting 'scheduler': cannot reach a Dask scheduler at "
                                     f"{scheduler} ({exc})") from None
        with client:
            futures = [client.submit(fn, item, pure=False) for item in items]
            index = {f.key: i for i, f in enumerate(futures)}
            try:
                for fut in as_completed(futures):
                    if fut.status == "error":
                        yield index[fut.key], fut.exception()
                    else:
                        yield index[fut.key], fut.result()
            finally:
                client.cancel([f for f in futures if not f.done()])
    finally:
        try:
            if cluster is not None:
                cluster.close()
        finally:
            quiet.setLevel(saved_level)


@contextmanager
def _env(**values: str) -> Iterator[None]:
    """Environment variables set for processes started inside (the user's own win)."""
    saved = {k: os.environ.get(k) for k in values}
    for k, v in values.items():
        os.environ.setdefault(k, v)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
