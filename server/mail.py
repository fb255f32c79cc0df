"""Notification e-mail: sent by one background thread per engine.

Off unless ``REMANENCE_SMTP_HOST`` is set. Sending never blocks or fails the request that caused the
event. What is due is decided in the database, not here (``services/notifications.due_letters``: an
entry's mail is due once its group's window has closed, and one process claims it): the thread is
*poked* after a commit that wrote mail-wanted entries and by every worker's tick, and each poke
collects the due letters and sends them through :mod:`smtplib`. A failure (server down, refused
address) is logged and the message dropped, the notification stays in the inbox. The queue is
bounded, and a poke while one is already waiting is not queued twice.
"""

from __future__ import annotations

import logging
import queue
import smtplib
import threading
import weakref
from email.message import EmailMessage
from typing import Any, Callable, Iterable, Optional, Union

log = logging.getLogger("remanence.mail")

#: Bounded work: messages waiting to be sent at most (then new ones are dropped and logged).
QUEUE_LIMIT = 1000
#: Seconds an SMTP connection may take to answer before the message is given up (logged).
SMTP_TIMEOUT_S = 10.0


class Mailer:
    """One SMTP sender: ``send_later`` queues, a daemon thread sends."""

    def __init__(self, settings: Any) -> None:
        self.host, self.port = settings.smtp_host, settings.smtp_port
        self.sender = settings.smtp_from
        self.user, self.password = settings.smtp_user, settings.smtp_password
        self.starttls = settings.smtp_starttls
        self.public_url = (settings.public_url or "").rstrip("/")
        self._queue: queue.Queue[Union[EmailMessage, Callable[[], list[EmailMessage]]]] = queue.Queue(QUEUE_LIMIT)
        self._thread: Optional[threading.Thread] = None
        self._lock = threading.Lock()
        self._poke_waiting = False

    def message(self, *, to: str, subject: str, body: str) -> EmailMessage:
        msg = EmailMessage()
        msg["From"], msg["To"], msg["Subject"] = self.sender, to, subject
        msg.set_content(body)
        return msg

    def link(self, path: str) -> str:
        return f"{self.public_url}{path}" if self.public_url else path

    def send_later(self, messages: Iterable[EmailMessage]) -> None:
        for msg in messages:
            try:
                self._queue.put_nowait(msg)
            except queue.Full:
                log.warning("mail queue full (%d): message to %s dropped", QUEUE_LIMIT, msg["To"])
        self._start()

    def poke(self, collect: Callable[[], list[EmailMessage]]) -> None:
        """Have the thread call ``collect`` (which claims the due letters) and send what it returns;
        no second poke is queued while one waits."""
        with self._lock:
            if self._poke_waiting:
                return
            self._poke_waiting = True
        try:
            self._queue.put_nowait(collect)
        except queue.Full:
            with self._lock:
                self._poke_waiting = False
            log.warning("mail queue full (%d): due letters left for the next tick", QUEUE_LIMIT)
        self._start()

    def wait_sent(self, timeout_s: float = 10.0) -> bool:
        """Block until every queued message was tried (tests); False on time-out."""
        done = threading.Event()

        def _join() -> None:
            self._queue.join()
            done.set()

        threading.Thread(target=_join, daemon=True).start()
        return done.wait(timeout_s)

    def _start(self) -> None:
        with self._lock:
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="remanence-mail", daemon=True)
                self._thread.start()

    def _run(self) -> None:
        while True:
            item = self._queue.get()
            try:
                if callable(item):
                    with self._lock:
                        self._poke_waiting = False
                    try:
                        letters = item()
                    except Exception:  # noqa: BLE001 - database away: nothing was claimed, the next tick retries
                        log.exception("due notification e-mail not collected")
                        letters = []
                else:
                    letters = [item]
                for msg in letters:
                    self._send_logged(msg)
            finally:
                self._queue.task_done()

    def _send_logged(self, msg: EmailMessage) -> None:
        try:
            self._send(msg)
        except (OSError, smtplib.SMTPException) as exc:  # the inbox keeps it; mail is best effort
            log.warning("notification e-mail to %s not sent: %s", msg["To"], exc)

    def _send(self, msg: EmailMessage) -> None:
        with smtplib.SMTP(self.host, self.port, timeout=SMTP_TIMEOUT_S) as smtp:
            if self.starttls:
                smtp.starttls()
            if self.user:
                smtp.login(self.user, self.password)
            smtp.send_message(msg)


_MAILERS: "weakref.WeakKeyDictionary[Any, Mailer]" = weakref.WeakKeyDictionary()


def attach(engine: Any, settings: Any) -> Optional[Mailer]:
    """Give ``engine`` a mailer when ``settings`` has an SMTP host (create_app and the worker call this)."""
    if not settings.smtp_host:
        _MAILERS.pop(engine, None)
        return None
    mailer = _MAILERS[engine] = Mailer(settings)
    return mailer


def mailer_for(engine: Any) -> Optional[Mailer]:
    """The mailer of ``engine``, or None when e-mail is off."""
    try:
        return _MAILERS.get(engine)
    except TypeError:  # not weak-referenceable (a Connection as bind): no mail
        return None
