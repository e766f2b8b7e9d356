"""Run CPU-bound computations off the event loop, a bounded number at a time, within a time budget.

``Runner`` owns one pool: worker processes (default; a long map never holds the server's interpreter lock,
so the health endpoint and cached answers stay fast while maps compute) or threads (lighter; for tests). The
pool has ``settings.workers`` workers; further jobs queue, and the queueing time counts against the budget.
A job past its budget answers 503 at once; a job that has not started yet is cancelled, and one that has
started finishes in its worker and its answer is dropped (a thread or a running process job cannot be
stopped safely from outside).

The pool is created on the first job, not when the app is built, and shut down when the app stops.
"""

from __future__ import annotations

import asyncio
import logging
import multiprocessing
import os
import threading
from collections.abc import Callable
from concurrent.futures import Executor, Future, ProcessPoolExecutor, ThreadPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from typing import Any

log = logging.getLogger("exomap.web")


class BudgetExceeded(Exception):
    """A job ran past the request time budget."""


def _consume(fut: Future) -> None:
    # An abandoned job's late exception is retrieved here so it is not reported as "never retrieved".
    if not fut.cancelled():
        exc = fut.exception()
        if exc is not None:
            log.warning("an abandoned job failed: %r", exc)


class Runner:
    """A bounded pool of workers with a per-job time budget."""

    def __init__(self, workers: int, kind: str = "process") -> None:
        if kind not in ("process", "thread"):
            raise ValueError(f"unknown executor kind {kind!r}")
        self.workers = workers
        self.kind = kind
        self._pool: Executor | None = None
        self._lock = threading.Lock()

    def _get_pool(self) -> Executor:
        with self._lock:
            if self._pool is None:
                if self.kind == "process":
                    # spawn, not fork: the server process has threads, and forking a threaded process can
                    # copy a held lock into the child.
                    self._pool = ProcessPoolExecutor(
                        max_workers=self.workers,
                        mp_context=multiprocessing.get_context("spawn"),
                        initializer=_lower_priority,
                    )
                else:
                    self._pool = ThreadPoolExecutor(max_workers=self.workers, thread_name_prefix="exomap-job")
            return self._pool

    def warm_up(self) -> None:
        """Start the workers now (each imports the core once) so the first request does not pay for it."""
        pool = self._get_pool()
        futures = [pool.submit(_warm) for _ in range(self.workers)]
        for f in futures:
            f.result(timeout=120)

    async def run(self, fn: Callable[..., Any], *args: Any, budget_s: float) -> Any:
        """Run ``fn(*args)`` in the pool; raise ``BudgetExceeded`` past ``budget_s`` seconds."""
        try:
            fut = self._get_pool().submit(fn, *args)
        except BrokenProcessPool:
            self._reset()
            fut = self._get_pool().submit(fn, *args)
        try:
            return await asyncio.wait_for(asyncio.shield(asyncio.wrap_future(fut)), timeout=budget_s)
        except TimeoutError:
            if not fut.cancel():
                fut.add_done_callback(_consume)
            raise BudgetExceeded(f"the computation took longer than the budget of {budget_s:g} s") from None
        except BrokenProcessPool:
            # A worker died (killed, out of memory): start a fresh pool for the next job and report this one.
            self._reset()
            raise

    def _reset(self) -> None:
        with self._lock:
            pool, self._pool = self._pool, None
        if pool is not None:
            pool.shutdown(wait=False, cancel_futures=True)

    def shutdown(self) -> None:
        """Stop the pool: queued jobs are cancelled; worker processes are joined (a clean exit), threads not
        (a thread still running an abandoned job ends on its own)."""
        with self._lock:
            pool, self._pool = self._pool, None
        if pool is not None:
            pool.shutdown(wait=isinstance(pool, ProcessPoolExecutor), cancel_futures=True)


#: Scheduling niceness added to worker processes: when the CPUs are busy, the server process (health,
#: cached answers, request parsing) is scheduled ahead of the computations.
WORKER_NICENESS = 10


def _lower_priority() -> None:
    try:
        os.nice(WORKER_NICENESS)
    except OSError:  # pragma: no cover - not permitted on this platform
        pass


def _warm() -> bool:
    import exomap.web.jobs  # noqa: F401 - imports numpy/scipy/core in the worker

    for name in ("steady", "branch", "opmap", "check", "dynamics"):
        try:
            __import__(f"exomap.core.{name}")
        except ImportError:
            pass
    return True
