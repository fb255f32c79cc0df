"""The worker: claim a job, run its handler, record the outcome; repeat.

A handler is ``handler(params, progress, should_cancel) -> dict`` (JSON-ready result):

* ``progress(fraction, message)`` reports progress (0..1; kept monotonic) and doubles as the
  heartbeat; database writes are throttled to one every ``heartbeat_min_s`` (0.5 s).
* ``should_cancel()`` is True once a cancel was requested for the job (read from the database
  with the throttled heartbeat), once the job was taken away from this worker (requeued after a
  missed heartbeat), or when the worker is stopping. The handler then raises
  :class:`~server.analysis.xtb.EstimateCancelled`.
* A handler may carry ``store(session, job, result) -> extra result keys``: it runs inside the
  transaction that marks the job done (see :func:`server.jobs.queue.finish`).

Outcomes: a returned dict -> done; ``EstimateCancelled`` -> cancelled (or, when the worker is
stopping and nobody asked to cancel, back to queued without counting the attempt);
:class:`~server.errors.InputError` -> failed with its message; any other exception -> failed
with ``"<Type>: message"`` first and the traceback below it.

While a handler runs, a keep-alive thread refreshes the heartbeat every ``stale_timeout_s / 4``
seconds even if the handler reports nothing (an RDKit embedding, say), so only a dead worker
goes stale. Every worker also runs :func:`server.jobs.queue.requeue_stale` now and then, so the
job of a killed worker is picked up again by whichever worker is alive. And every worker does the
housekeeping (:func:`housekeeping_for`: the notification prune) when it starts and hourly after;
a prune is one DELETE per rule, so several workers doing it is harmless. Every
:data:`MAIL_CHECK_S` between jobs a worker pokes the notification mailer
(``services/notifications.mail_due_later``), so a group's e-mail goes once its window has closed;
the due entries are claimed in the database, so several workers never send one twice.

Two ways to run: :func:`start_embedded` (one thread inside ``remanence serve``, the default)
and :func:`run_worker` (the ``remanence worker`` command; SIGTERM/SIGINT stop it cleanly).

tblite uses OpenMP threads; both entry points set ``OMP_NUM_THREADS=1`` unless it is set
already (it only takes effect if tblite is not loaded yet), because a worker shares its cores
with the web server and other workers.
"""

from __future__ import annotations

import logging
import os
import signal
import socket
import threading
import time
import traceback
from collections.abc import Callable, Mapping
from typing import Any, Optional, Protocol

import sqlalchemy as sa
from sqlalchemy.engine import Engine

from ..analysis.xtb import EstimateCancelled
from ..errors import InputError
from ..models import Job
from . import queue

log = logging.getLogger("remanence.jobs")

#: Least time between two heartbeat writes of one job, seconds.
HEARTBEAT_MIN_S = 0.5
#: Time between two housekeeping runs of one worker, seconds.
HOUSEKEEPING_S = 3600.0
#: Time between two looks for notification e-mail that has come due, seconds (between jobs).
MAIL_CHECK_S = 20.0

ProgressFn = Callable[[float, str], None]
CancelFn = Callable[[], bool]


class Handler(Protocol):
    def __call__(self, params: dict[str, Any], progress: ProgressFn, should_cancel: CancelFn) -> Mapping[str, Any]:
        ...


def default_name() -> str:
    """``hostname:pid``: unique among the workers of one database."""
    return f"{socket.gethostname()}:{os.getpid()}"


class _JobRun:
    """Progress, heartbeat and cancellation state of the job a worker is running."""

    def __init__(self, worker: "Worker", job: Job) -> None:
        self.worker = worker
        self.job_id = job.id
        self.fraction = 0.0
        self.message = "started"
        self.cancel_requested = False
        self.lost = False
        self.stopping = False
        self._last_beat = time.monotonic()  # claim() has just set heartbeat_at
        self._lock = threading.Lock()
        self._done = threading.Event()
        self._keepalive = threading.Thread(target=self._keep_alive, name=f"heartbeat-{job.id}", daemon=True)

    def start(self) -> None:
        self._keepalive.start()

    def stop(self) -> None:
        self._done.set()
        self._keepalive.join()

    def _keep_alive(self) -> None:
        while not self._done.wait(self.worker.keepalive_s):
            self.beat()

    def beat(self) -> None:
        """Write the heartbeat now, and read back whether to go on."""
        with self._lock:
            if self.lost:
                return
            try:
                status = queue.heartbeat_status(self.worker.engine, self.job_id, progress=self.fraction,
                                                message=self.message, worker=self.worker.name)
            except sa.exc.DBAPIError as exc:
                # A missed beat is harmless (the stale timeout is minutes); the next one retries.
                log.warning("job %s: heartbeat not written (%s); retrying at the next beat", self.job_id, exc)
                return
            finally:
                self._last_beat = time.monotonic()
            if status == "cancel_requested":
                self.cancel_requested = True
            elif status == "lost":
                self.lost = True
                log.warning("job %s is no longer running for %s (requeued or ended elsewhere); stopping it",
                            self.job_id, self.worker.name)

    def _beat_if_due(self) -> None:
        if time.monotonic() - self._last_beat >= self.worker.heartbeat_min_s:
            self.beat()

    def progress(self, fraction: float, message: str = "") -> None:
        f = float(fraction)
        if f != f:
            raise ValueError("progress fraction is NaN")
        self.fraction = max(self.fraction, min(1.0, max(0.0, f)))
        if message:
            self.message = str(message)
        self._beat_if_due()

    def should_cancel(self) -> bool:
        if self.worker.stop_event.is_set():
            self.stopping = True
            return True
        self._beat_if_due()
        return self.cancel_requested or self.lost


class Worker:
    """Runs jobs of the kinds in ``handlers`` from the queue in ``engine``'s database, one at a time.

    Parameters
    ----------
    engine : sqlalchemy Engine
        The database (the worker opens short transactions of its own).
    name : str
        Unique worker name, stored on the jobs it runs (default elsewhere: ``hostname:pid``).
    handlers : mapping of job kind to handler
        Only jobs of these kinds are claimed.
    poll_s : float
        Wait between looks at an empty queue, seconds.
    stale_timeout_s : float
        A running job whose heartbeat is older than this is taken back (see ``requeue_stale``).
    max_attempts : int
        Claims of one job before a stale job is failed instead of requeued.
    heartbeat_min_s : float
        Least time between two heartbeat writes, seconds.
    """

    def __init__(
        self,
        engine: Engine,
        *,
        name: str,
        handlers: Mapping[str, Handler],
        poll_s: float = 1.0,
        stale_timeout_s: float = 120.0,
        max_attempts: int = queue.MAX_ATTEMPTS,
        heartbeat_min_s: float = HEARTBEAT_MIN_S,
        housekeeping: Optional[Callable[[Engine], Any]] = None,
        housekeeping_every_s: float = HOUSEKEEPING_S,
        mail_check_s: float = MAIL_CHECK_S,
    ) -> None:
        if not name:
            raise ValueError("a worker needs a name")
        if not handlers:
            raise ValueError("a worker needs at least one handler")
        if not stale_timeout_s > 0 or not poll_s > 0:
            raise ValueError("poll_s and stale_timeout_s must be positive")
        self.engine = engine
        self.name = name
        self.handlers = dict(handlers)
        self.poll_s = float(poll_s)
        self.stale_timeout_s = float(stale_timeout_s)
        self.max_attempts = int(max_attempts)
        self.heartbeat_min_s = float(heartbeat_min_s)
        # Keep-alive well inside the timeout, so a live worker is never taken for dead.
        self.keepalive_s = max(0.05, self.stale_timeout_s / 4)
        self.stale_check_s = max(self.poll_s, self.stale_timeout_s / 4)
        self.stop_event = threading.Event()
        self._next_stale_check = 0.0
        self.housekeeping = housekeeping
        self.housekeeping_every_s = float(housekeeping_every_s)
        self._next_housekeeping = 0.0
        self.mail_check_s = float(mail_check_s)
        self._next_mail_check = 0.0
        self.jobs_run = 0

    def check_stale(self) -> dict[str, list[int]]:
        """Requeue (or give up) jobs of dead workers now."""
        self._next_stale_check = time.monotonic() + self.stale_check_s
        found = queue.requeue_stale(self.engine, timeout_s=self.stale_timeout_s, max_attempts=self.max_attempts)
        for outcome, ids in found.items():
            if ids:
                log.warning("stale jobs %s: %s", outcome, ", ".join(map(str, ids)))
        return found

    def run_once(self) -> bool:
        """Claim and run one job; ``False`` when the queue has nothing this worker can run."""
        if time.monotonic() >= self._next_stale_check:
            self.check_stale()
        if self.housekeeping is not None and time.monotonic() >= self._next_housekeeping:
            self._next_housekeeping = time.monotonic() + self.housekeeping_every_s
            self.housekeeping(self.engine)
        if time.monotonic() >= self._next_mail_check:
            self._next_mail_check = time.monotonic() + self.mail_check_s
            from ..services import notifications

            notifications.mail_due_later(self.engine)  # the mailer's thread claims and sends; never blocks here
        job = queue.claim(self.engine, worker=self.name, kinds=self.handlers)
        if job is None:
            return False
        self._run(job)
        self.jobs_run += 1
        return True

    def run_forever(self, stop: threading.Event) -> None:
        """Run jobs until ``stop`` is set; a job running then is asked to stop and goes back to the queue."""
        self.stop_event = stop
        log.info("worker %s started (kinds: %s)", self.name, ", ".join(sorted(self.handlers)))
        while not stop.is_set():
            try:
                ran = self.run_once()
            except Exception:  # noqa: BLE001 - the loop must outlive a database outage; logged, then retried
                log.exception("worker %s: error outside a job; retrying in %.0f s", self.name, max(5.0, self.poll_s))
                stop.wait(max(5.0, self.poll_s))
                continue
            if not ran:
                stop.wait(self.poll_s)
        log.info("worker %s stopped", self.name)

    # ------------------------------------------------------------------ one job

    def _run(self, job: Job) -> None:
        handler = self.handlers[job.kind]
        run = _JobRun(self, job)
        log.info("job %s (%s) started on %s, attempt %s", job.id, job.kind, self.name, job.attempts)
        run.start()
        try:
            try:
                result = handler(dict(job.params or {}), run.progress, run.should_cancel)
            finally:
                run.stop()
        except EstimateCancelled:
            self._stopped(job, run)
            return
        except InputError as exc:
            self._failed(job, run, str(exc))
            return
        except Exception as exc:  # noqa: BLE001 - any handler error is recorded on the job, with its traceback
            self._failed(job, run, f"{type(exc).__name__}: {exc}\n\n{traceback.format_exc()}")
            return
        if run.lost:
            log.warning("job %s finished on %s after it was taken away; result dropped", job.id, self.name)
            return
        store = getattr(handler, "store", None)
        try:
            done = queue.finish(self.engine, job.id, result=result, worker=self.name, store=store,
                                message="done")
        except InputError as exc:
            self._failed(job, run, str(exc))
            return
        except sa.exc.OperationalError:
            raise  # database unreachable: the job stays running and is requeued by the stale check
        except Exception as exc:  # noqa: BLE001 - a result that cannot be stored fails its job, with the traceback
            self._failed(job, run, f"{type(exc).__name__}: {exc}\n\n{traceback.format_exc()}")
            return
        if done:
            log.info("job %s done", job.id)
        elif queue.mark_cancelled(self.engine, job.id, worker=self.name):
            log.info("job %s finished after a cancel request: cancelled, result dropped", job.id)
        else:
            log.warning("job %s finished on %s after it was taken away; result dropped", job.id, self.name)

    def _stopped(self, job: Job, run: _JobRun) -> None:
        if run.lost:
            log.warning("job %s stopped on %s: it was taken away", job.id, self.name)
        elif run.stopping and not run.cancel_requested:
            queue.release(self.engine, job.id, worker=self.name,
                          message=f"returned to the queue: worker {self.name} stopped")
            log.info("job %s returned to the queue (worker stopping)", job.id)
        else:
            queue.mark_cancelled(self.engine, job.id, worker=self.name)
            log.info("job %s cancelled", job.id)

    def _failed(self, job: Job, run: _JobRun, error: str) -> None:
        if queue.fail(self.engine, job.id, error=error, worker=self.name):
            log.warning("job %s failed: %s", job.id, error.splitlines()[0] if error else "")
        else:
            log.warning("job %s failed on %s after it was taken away: %s", job.id, self.name, error)


# --------------------------------------------------------------------------- entry points


def housekeeping_for(settings: Any) -> Callable[[Engine], Any]:
    """What every worker does hourly besides jobs: prune old notifications (``services/notifications.prune``)."""
    from ..services import notifications

    def _prune(engine: Engine) -> None:
        done = notifications.prune_with(engine, settings)
        if done["read"] or done["unread"]:
            log.info("notifications pruned: %(read)s read, %(unread)s unread", done)

    return _prune


def _default_handlers() -> Mapping[str, Handler]:
    from .handlers import HANDLERS

    return HANDLERS


def start_embedded(app_or_engine: Any, settings: Any, *, handlers: Optional[Mapping[str, Handler]] = None,
                   name: Optional[str] = None) -> tuple[threading.Thread, threading.Event]:
    """Start one worker thread inside the web server process (``remanence serve``'s default).

    ``app_or_engine`` is the FastAPI app (its ``app.state.engine`` is used), an Engine, or None
    (an engine is made from ``settings.database_url`` and disposed when the worker stops). Returns
    the daemon thread and the Event that stops it: on shutdown call ``stop.set()`` then
    ``thread.join(timeout)`` (see :func:`stop_embedded`). The caller decides whether to start it
    (``settings.embedded_worker``).
    """
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    own_engine = False
    if app_or_engine is None:
        from ..db import make_engine

        engine = make_engine(settings.database_url)
        own_engine = True
        from ..services import notifications

        notifications.configure(engine, settings)
    elif isinstance(app_or_engine, Engine):
        engine = app_or_engine
    else:
        engine = app_or_engine.state.engine
    worker = Worker(engine, name=name or f"{default_name()}:embedded", handlers=handlers or _default_handlers(),
                    housekeeping=housekeeping_for(settings))
    stop = threading.Event()

    def _target() -> None:
        try:
            worker.run_forever(stop)
        finally:
            if own_engine:
                engine.dispose()

    thread = threading.Thread(target=_target, name="remanence-worker", daemon=True)
    thread.start()
    return thread, stop


def stop_embedded(thread: threading.Thread, stop: threading.Event, *, timeout_s: float = 30.0) -> bool:
    """Stop an embedded worker: its running job is asked to stop and put back in the queue.

    Returns False if the thread is still alive after ``timeout_s`` (a handler that does not
    poll ``should_cancel``); it is a daemon thread, and its job is requeued by the stale check.
    """
    stop.set()
    thread.join(timeout_s)
    return not thread.is_alive()


def run_worker(settings: Any, *, name: Optional[str] = None, once: bool = False,
               handlers: Optional[Mapping[str, Handler]] = None, poll_s: float = 1.0,
               stale_timeout_s: float = 120.0) -> int:
    """The ``remanence worker`` command: run jobs from ``settings.database_url`` until stopped.

    SIGTERM and SIGINT (Ctrl-C) stop it cleanly: a running job is asked to stop and goes back
    to the queue for another worker; a second Ctrl-C interrupts at once. ``once=True`` runs at
    most one job (if one is queued) and returns. Returns the number of jobs run.
    """
    from ..db import make_engine

    if not logging.getLogger().handlers:
        logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(levelname)s %(message)s")
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    engine = make_engine(settings.database_url)
    from .. import mail

    mail.attach(engine, settings)  # a job's end e-mails its owner when SMTP is configured
    from ..services import notifications

    notifications.configure(engine, settings)
    worker = Worker(engine, name=name or default_name(), handlers=handlers or _default_handlers(),
                    poll_s=poll_s, stale_timeout_s=stale_timeout_s, housekeeping=housekeeping_for(settings))
    stop = threading.Event()
    worker.stop_event = stop
    previous: dict[int, Any] = {}

    def _on_signal(signum: int, _frame: Any) -> None:
        log.info("worker %s: %s received, stopping", worker.name, signal.Signals(signum).name)
        stop.set()
        if signum == signal.SIGINT:
            signal.signal(signal.SIGINT, signal.default_int_handler)  # a second Ctrl-C interrupts

    if threading.current_thread() is threading.main_thread():
        for sig in (signal.SIGTERM, signal.SIGINT):
            previous[sig] = signal.signal(sig, _on_signal)
    try:
        if once:
            worker.run_once()
        else:
            worker.run_forever(stop)
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        engine.dispose()
    return worker.jobs_run

