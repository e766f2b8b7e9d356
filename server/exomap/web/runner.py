"""Run CPU-bound computations off the event loop, a bounded number at a time, within a time budget.

``Runner`` owns one pool of ``settings.workers`` workers:

* ``process`` (default): worker processes of our own (``WorkerProcess``), one job at a time each. A long map
  never holds the server's interpreter lock, the workers run at a lower scheduling priority than the server
  (so health and cached answers stay fast when the CPUs are busy), and a job past its budget is stopped for
  real: its worker process is killed and a fresh one started in the background. (``ProcessPoolExecutor``
  cannot stop one running job without breaking the whole pool, hence the small pool of our own.)
* ``thread``: a thread pool in the server process; lighter, for tests. A job past its budget is answered
  503 at once, but its thread runs on to the end (a thread cannot be stopped from outside).

Jobs beyond the pool size wait, at most ``max_queued`` of them (more are refused at once with ``Busy``); the
waiting time counts against the budget, and waiting holds no thread (see ``Runner``). The pool starts on the
first job (or ``warm_up()``) and stops with the app.
"""

from __future__ import annotations

import asyncio
import logging
import multiprocessing
import os
import queue
import socket
import threading
import time
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

from exomap.web.jobs import Answer

log = logging.getLogger("exomap.web")

#: Scheduling niceness added to worker processes: when the CPUs are busy, the server process (health,
#: cached answers, request parsing) is scheduled ahead of the computations.
WORKER_NICENESS = 10


class BudgetExceeded(Exception):
    """A job ran past the request time budget."""


class Busy(Exception):
    """Every worker is busy and the queue of waiting computations is full."""


class WorkerLost(RuntimeError):
    """A worker process died while running a job (killed from outside, out of memory)."""


# -- worker processes ---------------------------------------------------------------------------------------------
def _worker_main(conn: Any) -> None:
    """Body of a worker process: run jobs from ``conn`` until told to stop (None) or the pipe closes."""
    try:
        os.nice(WORKER_NICENESS)
    except OSError:  # pragma: no cover - not permitted here
        pass
    _tune_allocator()
    _warm()
    conn.send(("ready", None))
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        fn, args = message
        try:
            reply = ("ok", fn(*args))
        except BaseException as exc:  # noqa: BLE001 - every failure goes back to the server, which logs it
            reply = ("error", exc)
        if type(reply[1]) is Answer:
            # a serialised answer: its body goes as raw bytes after a small header, not through pickle (which
            # copies it twice on each side: ~0.5 ms of a 0.75 MB map answer)
            answer = reply[1]
            conn.send(("answer", (answer.gz, answer.timing, answer.span)))
            conn.send_bytes(answer.body)
            continue
        try:
            conn.send(reply)
        except Exception:  # noqa: BLE001 - the value or exception did not pickle; send what can be sent
            conn.send(("error", RuntimeError(f"job result could not be returned: {reply[1]!r}")))


#: glibc allocator settings of a worker process: arrays up to this size come from the heap (not a fresh mmap each)...
MALLOC_MMAP_THRESHOLD = 16 << 20
#: ...and this much freed memory is kept at the top of the heap rather than handed back to the system at once.
MALLOC_TRIM_THRESHOLD = 32 << 20


def _tune_allocator() -> None:
    """Keep a worker's freed array memory for its next job (glibc only; elsewhere nothing changes).

    A map allocates and frees arrays of about 0.3-1 MB many times over. With glibc's defaults they come from
    fresh memory mappings or a heap top that was just given back, so every job touches new pages: 500-2,500
    page faults per 200 x 200 map, ~1 ms of it here. With these settings a worker reuses its heap: no page
    faults after the first job, about 5 % off the map's time (benchmarks/bench_http_map.py), and at most
    ``MALLOC_TRIM_THRESHOLD`` more memory held per idle worker (measured: no change in peak RSS for a
    200 x 200 map).
    """
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):  # not glibc
        return
    M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3  # malloc.h
    mallopt(M_TRIM_THRESHOLD, MALLOC_TRIM_THRESHOLD)
    mallopt(M_MMAP_THRESHOLD, MALLOC_MMAP_THRESHOLD)


def _warm() -> None:
    import exomap.web.jobs  # noqa: F401 - imports numpy/scipy/core once, before the first job

    for name in ("steady", "branch", "opmap", "check", "dynamics"):
        try:
            __import__(f"exomap.core.{name}")
        except ImportError:  # pragma: no cover - a core module missing from this build
            pass


#: Socket buffer asked for on each end of a worker's pipe (the kernel caps it at net.core.wmem_max/rmem_max).
PIPE_BUFFER_BYTES = 4 << 20


def _widen(conn: Any) -> None:
    """Ask for socket buffers that hold a whole answer (a 200 x 200 map is 0.75 MB).

    With the default (~200 kB) the worker's send of a large answer blocks until the server has read the
    first part, so a worker at low priority on a busy machine waits for the CPU again, once per buffer-full,
    before its answer is through (a few ms each time, measured with benchmarks/bench_http_map.py). With room
    for the whole answer, the send completes at once and the server reads it at its own priority.
    """
    try:
        sock = socket.socket(fileno=os.dup(conn.fileno()))
    except (OSError, AttributeError):  # pragma: no cover - not a socket on this platform
        return
    with sock:
        for option in (socket.SO_SNDBUF, socket.SO_RCVBUF):
            try:
                sock.setsockopt(socket.SOL_SOCKET, option, PIPE_BUFFER_BYTES)
            except OSError:  # pragma: no cover - refused: the default stays
                pass


class WorkerProcess:
    """One worker process and the server's end of its pipe."""

    def __init__(self, ctx: Any) -> None:
        self.conn, child = ctx.Pipe(duplex=True)
        for end in (self.conn, child):
            _widen(end)
        self.process = ctx.Process(target=_worker_main, args=(child,), daemon=True, name="exomap-worker")
        self.process.start()
        child.close()

    def wait_ready(self, timeout: float = 120.0) -> None:
        if not self.conn.poll(timeout):
            raise RuntimeError("a worker process did not start in time")
        self.conn.recv()

    def kill(self) -> None:
        try:
            self.process.kill()
            self.process.join(timeout=5)
        finally:
            self.conn.close()

    def stop(self) -> None:
        try:
            self.conn.send(None)
        except OSError:
            pass
        self.process.join(timeout=5)
        if self.process.is_alive():
            self.process.kill()
            self.process.join(timeout=5)
        self.conn.close()


class ProcessWorkers:
    """A fixed number of worker processes, one job each at a time; a job past its budget kills its worker."""

    def __init__(self, workers: int) -> None:
        self.size = workers
        self._ctx = multiprocessing.get_context("spawn")  # not fork: the server process has threads
        self._idle: queue.Queue[WorkerProcess] = queue.Queue()
        self._all: set[WorkerProcess] = set()
        self._lock = threading.Lock()
        self._closed = False
        starting = [self._start() for _ in range(workers)]
        for w in starting:
            w.wait_ready()
            self._idle.put(w)

    def _start(self) -> WorkerProcess:
        w = WorkerProcess(self._ctx)
        with self._lock:
            self._all.add(w)
        return w

    def _replace(self, dead: WorkerProcess) -> None:
        """Kill a worker and start its replacement in the background (the request does not wait for it)."""
        with self._lock:
            self._all.discard(dead)
        dead.kill()

        def start() -> None:
            if self._closed:
                return
            w = self._start()
            try:
                w.wait_ready()
            except RuntimeError:
                log.exception("a replacement worker did not start")
                with self._lock:
                    self._all.discard(w)
                w.kill()
                return
            self._idle.put(w)

        threading.Thread(target=start, name="exomap-worker-start", daemon=True).start()

    def run(self, fn: Callable[..., Any], args: tuple[Any, ...], deadline: float, budget_s: float) -> Any:
        """Run ``fn(*args)`` in a worker (blocking; called from a thread). Raise ``BudgetExceeded`` when
        ``time.monotonic()`` passes ``deadline``, ``WorkerLost`` when the worker dies; re-raise the job's own
        exception."""
        try:
            w = self._idle.get(timeout=max(deadline - time.monotonic(), 0.0))
        except queue.Empty:
            raise BudgetExceeded(f"no worker was free within the budget of {budget_s:g} s") from None
        try:
            w.conn.send((fn, args))
            remaining = deadline - time.monotonic()
            if remaining <= 0 or not w.conn.poll(remaining):
                self._replace(w)
                raise BudgetExceeded(f"the computation took longer than the budget of {budget_s:g} s")
            status, value = w.conn.recv()
            if status == "answer":
                value = Answer(w.conn.recv_bytes(), *value)
        except (EOFError, OSError) as exc:
            self._replace(w)
            raise WorkerLost(f"a worker process died while computing ({type(exc).__name__})") from None
        self._idle.put(w)
        if status == "error":
            raise value
        return value

    def close(self) -> None:
        self._closed = True
        with self._lock:
            workers = list(self._all)
            self._all.clear()
        for w in workers:
            w.stop()


# -- the runner -----------------------------------------------------------------------------------------------------
class Runner:
    """A bounded pool of workers (processes or threads) with admission control and a per-job time budget.

    Admission: at most ``workers`` jobs run and at most ``max_queued`` wait for a worker; a job arriving when
    both are full raises ``Busy`` at once (the API answers 503 with Retry-After rather than letting the request
    wait out its budget). Waiting for a worker is an ``asyncio`` wait on a semaphore: it holds no thread, so
    pages, saves and request parsing (which use the event loop's thread pool) never queue behind computations.
    A running job is waited on from a private thread pool of ``workers`` threads (one per running job, never
    more), not from the event loop's.
    """

    def __init__(self, workers: int, kind: str = "process", max_queued: int = 16) -> None:
        if kind not in ("process", "thread"):
            raise ValueError(f"unknown executor kind {kind!r}")
        self.workers = workers
        self.kind = kind
        self.max_queued = max_queued
        self._processes: ProcessWorkers | None = None
        self._threads: ThreadPoolExecutor | None = None
        self._lock = threading.Lock()
        self._slots: asyncio.Semaphore | None = None
        self.waiting = 0  # jobs admitted and waiting for a worker (read by tests and the load benchmark)
        self.running = 0  # jobs holding a worker slot (a thread job past its budget holds it until it ends)

    def _process_pool(self) -> ProcessWorkers:
        with self._lock:
            if self._processes is None:
                self._processes = ProcessWorkers(self.workers)
            return self._processes

    def _thread_pool(self) -> ThreadPoolExecutor:
        # ``workers`` threads: they run the jobs (thread kind) or wait on the worker pipes (process kind)
        with self._lock:
            if self._threads is None:
                self._threads = ThreadPoolExecutor(max_workers=self.workers, thread_name_prefix="exomap-job")
            return self._threads

    def warm_up(self) -> None:
        """Start the workers now, so the first request does not wait for them to import the core."""
        if self.kind == "process":
            self._process_pool()
        else:
            pool = self._thread_pool()
            for f in [pool.submit(_warm) for _ in range(self.workers)]:
                f.result(timeout=120)

    async def _acquire(self, deadline: float, budget_s: float) -> None:
        """Take a worker slot, or raise ``Busy`` (queue full) or ``BudgetExceeded`` (none free in time)."""
        if self._slots is None:
            self._slots = asyncio.Semaphore(self.workers)
        slots = self._slots
        if slots.locked() and self.waiting >= self.max_queued:
            raise Busy(
                f"{self.running} computations are running and {self.waiting} waiting, the most this server "
                "queues; try again shortly"
            )
        self.waiting += 1
        try:
            async with asyncio.timeout(max(deadline - time.monotonic(), 0.0)):
                await slots.acquire()
        except TimeoutError:
            raise BudgetExceeded(f"no worker was free within the budget of {budget_s:g} s") from None
        finally:
            self.waiting -= 1
        self.running += 1

    def _release(self, _: object = None) -> None:
        self.running -= 1
        assert self._slots is not None
        self._slots.release()

    async def run(self, fn: Callable[..., Any], *args: Any, budget_s: float, deadline: float | None = None) -> Any:
        """Run ``fn(*args)`` off the event loop; raise ``Busy`` when the queue is full, ``BudgetExceeded`` past
        the deadline (default: ``budget_s`` from now; time spent waiting for a worker counts), ``WorkerLost``
        when a worker process dies."""
        loop = asyncio.get_running_loop()
        if self.kind == "process" and self._processes is None:
            # the pool's one-off start (workers importing the core) does not count against a request's budget
            await loop.run_in_executor(None, self._process_pool)
        if deadline is None:
            deadline = time.monotonic() + budget_s
        await self._acquire(deadline, budget_s)
        try:
            if self.kind == "process":
                pool = self._process_pool()
                fut = self._thread_pool().submit(pool.run, fn, args, deadline, budget_s)
            else:
                fut = self._thread_pool().submit(fn, *args)
        except BaseException:
            self._release()
            raise
        # the slot is freed when the job really ends (a thread past its budget keeps it until it finishes)
        fut.add_done_callback(lambda _: _call_in_loop(loop, self._release))
        waiter = asyncio.wrap_future(fut)
        waiter.add_done_callback(_retrieve)  # nobody may be left to read it (the request went away)
        try:
            async with asyncio.timeout(max(deadline - time.monotonic(), 0.0) + (0.5 if self.kind == "process" else 0)):
                return await asyncio.shield(waiter)
        except TimeoutError:
            # process jobs stop themselves at the deadline (pool.run kills the worker); a thread runs on
            fut.add_done_callback(_consume)
            raise BudgetExceeded(f"the computation took longer than the budget of {budget_s:g} s") from None

    def shutdown(self) -> None:
        """Stop the pool: worker processes are stopped and joined; queued thread jobs are cancelled (a thread
        still running an abandoned job ends on its own)."""
        with self._lock:
            processes, self._processes = self._processes, None
            threads, self._threads = self._threads, None
        if processes is not None:
            processes.close()
        if threads is not None:
            threads.shutdown(wait=False, cancel_futures=True)


def _call_in_loop(loop: asyncio.AbstractEventLoop, fn: Callable[[], None]) -> None:
    try:
        loop.call_soon_threadsafe(fn)
    except RuntimeError:  # the loop has closed (server stopped): nothing is waiting for the slot any more
        pass


def _retrieve(fut: asyncio.Future) -> None:
    if not fut.cancelled():
        fut.exception()


def _consume(fut: Future) -> None:
    # An abandoned job's late exception is retrieved here so it is not reported as "never retrieved".
    if not fut.cancelled():
        exc = fut.exception()
        if exc is not None:
            log.warning("an abandoned job failed: %r", exc)
