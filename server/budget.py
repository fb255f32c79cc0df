"""A CPU-time, memory and wall-clock budget for the analysis of one upload.

An upload's read and analysis (the kind module's ``read`` and ``analyse``) run in a child
process taken from a small pool, never in the web or worker process itself, so a hostile or
pathological file cannot hold the server:

* **CPU time:** before each task the child sets its soft ``RLIMIT_CPU`` to the CPU seconds it
  has used so far plus the budget; the kernel then sends ``SIGXCPU``, whose handler raises
  :class:`_OverCpu` in the task (setrlimit(2), "RLIMIT_CPU").
* **Memory:** the child's soft ``RLIMIT_AS`` caps its address space for the task, so an
  allocation past it fails with ``MemoryError`` (numpy, pandas, gemmi and RDKit turn a failed
  allocation into one) instead of swapping the machine.
* **Wall clock:** the parent waits at most the wall budget for an answer; past it, or when the
  child dies (a C loop that never returns to Python, a crash), the parent kills that child and
  starts a fresh one. The wall budget is the backstop for what the two limits cannot stop.

Only soft limits are set: an unprivileged process cannot raise a hard limit again, and a child
serves many tasks (``max_tasks`` each, then it is replaced, so slow leaks in C extensions do not
accumulate). Children start from multiprocessing's *forkserver* (POSIX), which forks them from a
clean single-threaded process that has imported the analysis modules once: starting one costs
milliseconds, and no lock held by a thread of the server (the embedded job worker, the database
pool) is copied into a child. The children never touch the database, so the pool serves SQLite
and PostgreSQL deployments alike.

Pools are shared within one process by their budget (:func:`pool_for`): every app built with the
same budget uses the same children. An over-budget task raises :class:`~server.errors.OverLimit`
naming the limit (413 "analysis_cpu_s", "analysis_memory_mb" or "analysis_wall_s"); nothing has
been stored by then, since analysis happens before anything is added to the session.
"""

from __future__ import annotations

import atexit
import math
import multiprocessing
import pickle
import queue
import resource
import signal
import threading
import traceback
from dataclasses import dataclass
from typing import Any, Callable

from .errors import OverLimit

__all__ = ["Budget", "AnalysisPool", "pool_for", "close_pools"]

#: Modules the forkserver imports once, so children start with the analysis code loaded.
PRELOAD = ["server.services.measurements", "server.services.profiled_uploads"]


@dataclass(frozen=True)
class Budget:
    """What one analysis may use: ``cpu_s`` CPU seconds, ``memory_mb`` MiB of address space,
    ``wall_s`` seconds of real time; ``workers`` children at once."""

    cpu_s: float
    memory_mb: float
    wall_s: float
    workers: int
    max_tasks: int = 200

    @classmethod
    def of(cls, settings: Any) -> "Budget":
        return cls(cpu_s=settings.analysis_cpu_s, memory_mb=settings.analysis_memory_mb,
                   wall_s=settings.analysis_wall_s, workers=settings.analysis_workers)


class _OverCpu(BaseException):
    """Raised in a child by SIGXCPU (a BaseException, so no ``except Exception`` in a task swallows it)."""


def _on_sigxcpu(signum, frame):  # noqa: ANN001, ARG001
    raise _OverCpu()


def _set_soft(which: int, soft: int) -> None:
    _, hard = resource.getrlimit(which)
    if hard != resource.RLIM_INFINITY:
        soft = min(soft, hard)
    resource.setrlimit(which, (soft, hard))


def _child(conn, cpu_s: float, memory_bytes: int) -> None:  # noqa: ANN001
    """A child's loop: take (fn, args), run it within the budget, answer ("ok", value) or
    ("limit", name) or ("error", exception)."""
    signal.signal(signal.SIGXCPU, _on_sigxcpu)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C of the server is the parent's to handle
    while True:
        try:
            task = conn.recv()
        except EOFError:
            return
        fn, args = task
        used = resource.getrusage(resource.RUSAGE_SELF)
        _set_soft(resource.RLIMIT_CPU, math.ceil(used.ru_utime + used.ru_stime + cpu_s))
        _set_soft(resource.RLIMIT_AS, memory_bytes)
        try:
            answer: tuple = ("ok", fn(*args))
        except _OverCpu:
            answer = ("limit", "cpu")
        except MemoryError:
            answer = ("limit", "memory")
        except Exception as exc:  # a task's own error (an InputError) goes back to the caller unchanged
            answer = ("error", exc)
        finally:
            _set_soft(resource.RLIMIT_AS, resource.RLIM_INFINITY)
            _set_soft(resource.RLIMIT_CPU, resource.RLIM_INFINITY)
        try:
            conn.send(answer)
        except Exception:  # an answer that does not pickle is the task's bug, reported as such
            conn.send(("error", RuntimeError("analysis answer could not be sent back:\n" + traceback.format_exc())))


class _Child:
    def __init__(self, ctx, budget: Budget) -> None:  # noqa: ANN001
        self.conn, theirs = ctx.Pipe()
        self.process = ctx.Process(target=_child, args=(theirs, budget.cpu_s, int(budget.memory_mb * 1024 * 1024)),
                                   daemon=True, name="remanence-analysis")
        self.process.start()
        theirs.close()
        self.tasks = 0

    def kill(self) -> None:
        self.process.kill()
        self.process.join(5)
        self.conn.close()


class AnalysisPool:
    """At most ``budget.workers`` children; :meth:`run` waits for a free one."""

    def __init__(self, budget: Budget) -> None:
        self.budget = budget
        method = "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"
        self._ctx = multiprocessing.get_context(method)
        if method == "forkserver":
            self._ctx.set_forkserver_preload(PRELOAD)
        self._idle: "queue.LifoQueue[_Child]" = queue.LifoQueue()
        self._slots = threading.BoundedSemaphore(budget.workers)
        self._closed = False
        self._warm_lock = threading.Lock()
        self._warmed = False

    def warm(self) -> None:
        """Start one child ahead of the first task (once per pool), so the first upload does not pay for
        starting the forkserver, which imports the analysis modules (seconds on a loaded machine).

        The child is left idle in the pool like one given back after a task. Nothing happens when every
        slot is busy (tasks are starting children already) or the pool is closed."""
        with self._warm_lock:
            if self._warmed or self._closed:
                return
            self._warmed = True
        if not self._slots.acquire(blocking=False):
            return
        try:
            child = _Child(self._ctx, self.budget)
            if self._closed:
                child.kill()
            else:
                self._idle.put(child)
        finally:
            self._slots.release()

    def warm_in_background(self) -> threading.Thread:
        """:meth:`warm` in a daemon thread (the app's start-up calls this and does not wait for it)."""
        thread = threading.Thread(target=self.warm, name="remanence-analysis-warm", daemon=True)
        thread.start()
        return thread

    def run(self, fn: Callable[..., Any], *args: Any) -> Any:
        """``fn(*args)`` in a child within the budget; its exceptions are raised here as they were.

        Raises
        ------
        OverLimit
            413 when the task used up its CPU time, memory or wall time (``limit`` names which).
        """
        if self._closed:
            raise RuntimeError("the analysis pool is closed")
        payload = (fn, args)
        pickle.dumps(payload)  # an argument that cannot go to a child is a bug here, not a budget matter
        with self._slots:
            child = self._take()
            try:
                child.conn.send(payload)
                if not child.conn.poll(self.budget.wall_s):
                    child.kill()
                    child = None
                    raise self._over("wall")
                status, value = child.conn.recv()
            except (EOFError, OSError, BrokenPipeError):
                # The child died mid-task: killed by the kernel at a limit, or crashed in C code.
                child.process.join(1)
                code = child.process.exitcode
                child.kill()
                child = None
                if code is not None and code >= 0:  # it exited on its own: it could not start, not a budget matter
                    raise RuntimeError(f"the analysis child process exited with code {code}") from None
                raise self._over("cpu" if code == -signal.SIGXCPU else "memory") from None
            finally:
                if child is not None:
                    self._give_back(child)
        if status == "ok":
            return value
        if status == "limit":
            raise self._over(value)
        raise value

    def _take(self) -> _Child:
        while True:
            try:
                child = self._idle.get_nowait()
            except queue.Empty:
                return _Child(self._ctx, self.budget)
            if child.process.is_alive():
                return child
            child.kill()

    def _give_back(self, child: _Child) -> None:
        child.tasks += 1
        if child.tasks >= self.budget.max_tasks or self._closed:
            child.kill()
        else:
            self._idle.put(child)

    def _over(self, which: str) -> OverLimit:
        b = self.budget
        if which == "cpu":
            return OverLimit(f"the analysis of this file used its whole CPU-time budget ({b.cpu_s:g} s, "
                             "REMANENCE_ANALYSIS_CPU_S) and was stopped; nothing was stored",
                             limit="analysis_cpu_s", value=b.cpu_s)
        if which == "memory":
            return OverLimit(f"the analysis of this file needed more than its memory budget ({b.memory_mb:g} MiB, "
                             "REMANENCE_ANALYSIS_MEMORY_MB) and was stopped; nothing was stored",
                             limit="analysis_memory_mb", value=b.memory_mb)
        return OverLimit(f"the analysis of this file took longer than its time budget ({b.wall_s:g} s, "
                         "REMANENCE_ANALYSIS_WALL_S) and was stopped; nothing was stored",
                         limit="analysis_wall_s", value=b.wall_s)

    def close(self) -> None:
        self._closed = True
        while True:
            try:
                self._idle.get_nowait().kill()
            except queue.Empty:
                return


_pools: dict[Budget, AnalysisPool] = {}
_pools_lock = threading.Lock()


def pool_for(settings: Any) -> AnalysisPool:
    """The process's pool for the budget in ``settings`` (created on first use, shared by every app with it)."""
    budget = Budget.of(settings)
    with _pools_lock:
        pool = _pools.get(budget)
        if pool is None:
            pool = _pools[budget] = AnalysisPool(budget)
        return pool


@atexit.register
def close_pools() -> None:
    """Stop every pool's children (at exit; tests call it too)."""
    with _pools_lock:
        for pool in _pools.values():
            pool.close()
        _pools.clear()
