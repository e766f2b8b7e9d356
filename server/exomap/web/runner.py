"""Run CPU-bound computations off the event loop, a bounded number at a time, within a time budget.

``Runner`` owns one pool of ``settings.workers`` workers:

* ``process`` (default): worker processes of our own (``WorkerProcess``), one job at a time each. A long map
  never holds the server's interpreter lock, the workers run at a lower scheduling priority than the server
  (so health and cached answers stay fast when the CPUs are busy), and a job past its budget is stopped for
  real: its worker process is killed and a fresh one started in the background. (``ProcessPoolExecutor``
  cannot stop one running job without breaking the whole pool, hence the small pool of our own.)
* ``thread``: a thread pool in the server process; lighter, for tests. A job past its budget is answered
  503 at once, but its thread runs on to the end (a thread cannot be stopped from outside).

Jobs beyond the pool size queue; the queueing time counts against the budget. The pool starts on the first
job (or ``warm_up()``) and stops with the app.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import queue
import threading
import time
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

import anyio
import anyio.to_thread

log = logging.getLogger("exomap.web")

#: Scheduling niceness added to worker processes: when the CPUs are busy, the server process (health,
#: cached answers, request parsing) is scheduled ahead of the computations.
WORKER_NICENESS = 10


class BudgetExceeded(Exception):
    """A job ran past the request time budget."""


class WorkerLost(RuntimeError):
    """A worker process died while running a job (killed from outside, out of memory)."""


# -- worker processes ---------------------------------------------------------------------------------------------
def _worker_main(conn: Any) -> None:
    """Body of a worker process: run jobs from ``conn`` until told to stop (None) or the pipe closes."""
    try:
        os.nice(WORKER_NICENESS)
    except OSError:  # pragma: no cover - not permitted here
        pass
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
        try:
            conn.send(reply)
        except Exception:  # noqa: BLE001 - the value or exception did not pickle; send what can be sent
            conn.send(("error", RuntimeError(f"job result could not be returned: {reply[1]!r}")))


def _warm() -> None:
    import exomap.web.jobs  # noqa: F401 - imports numpy/scipy/core once, before the first job

    for name in ("steady", "branch", "opmap", "check", "dynamics"):
        try:
            __import__(f"exomap.core.{name}")
        except ImportError:  # pragma: no cover - a core module missing from this build
            pass


class WorkerProcess:
    """One worker process and the server's end of its pipe."""

    def __init__(self, ctx: Any) -> None:
        self.conn, child = ctx.Pipe(duplex=True)
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
    """A bounded pool of workers (processes or threads) with a per-job time budget."""

    def __init__(self, workers: int, kind: str = "process") -> None:
        if kind not in ("process", "thread"):
            raise ValueError(f"unknown executor kind {kind!r}")
        self.workers = workers
        self.kind = kind
        self._processes: ProcessWorkers | None = None
        self._threads: ThreadPoolExecutor | None = None
        self._lock = threading.Lock()

    def _process_pool(self) -> ProcessWorkers:
        with self._lock:
            if self._processes is None:
                self._processes = ProcessWorkers(self.workers)
            return self._processes

    def _thread_pool(self) -> ThreadPoolExecutor:
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

    async def run(self, fn: Callable[..., Any], *args: Any, budget_s: float) -> Any:
        """Run ``fn(*args)`` off the event loop; raise ``BudgetExceeded`` past ``budget_s`` seconds."""
        if self.kind == "process":
            # the pool's one-off start (workers importing the core) does not count against a request's budget
            pool = self._processes or await anyio.to_thread.run_sync(self._process_pool)
            deadline = time.monotonic() + budget_s
            return await anyio.to_thread.run_sync(pool.run, fn, args, deadline, budget_s)
        fut = self._thread_pool().submit(fn, *args)
        try:
            with anyio.fail_after(budget_s):
                return await anyio.to_thread.run_sync(fut.result, abandon_on_cancel=True)
        except TimeoutError:
            if not fut.cancel():
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


def _consume(fut: Future) -> None:
    # An abandoned job's late exception is retrieved here so it is not reported as "never retrieved".
    if not fut.cancelled():
        exc = fut.exception()
        if exc is not None:
            log.warning("an abandoned job failed: %r", exc)
