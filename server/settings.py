"""Typed settings, read from the environment, each with a default and help text.

The table :data:`SETTINGS` is the single registry: ``Settings.from_env()`` reads it,
``remanence settings`` prints it, and a test checks that the README documents every
entry. Nothing here runs at import time; :func:`get_settings` caches one instance and
tests build their own with :meth:`Settings.from_env` (or ``dataclasses.replace``).
"""

from __future__ import annotations

import dataclasses
import os
import secrets
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping

PROJECT_ROOT = Path(__file__).resolve().parent.parent


def _bool(text: str) -> bool:
    value = text.strip().lower()
    if value in {"1", "true", "yes", "on"}:
        return True
    if value in {"0", "false", "no", "off", ""}:
        return False
    raise ValueError(f"expected true or false, got {text!r}")


@dataclass(frozen=True)
class Setting:
    name: str  # attribute on Settings
    env: str
    help: str
    parse: Any = str


SETTINGS: tuple[Setting, ...] = (
    Setting("data_dir", "REMANENCE_DATA_DIR", "Folder for the default SQLite database, the generated secret key and the structure-search index file.", Path),
    Setting(
        "database_url",
        "REMANENCE_DATABASE_URL",
        "SQLAlchemy URL of the database; default a SQLite file in the data folder. "
        "PostgreSQL: postgresql+psycopg://user@host:5432/dbname.",
    ),
    Setting(
        "secret_key",
        "REMANENCE_SECRET_KEY",
        "Key for pre-login CSRF tokens and known-browser marks (sessions are random ids kept on the server); "
        "generated into the data folder on first run when unset.",
    ),
    Setting(
        "code_prefix",
        "REMANENCE_CODE_PREFIX",
        "Prefix of new compound registry codes (RVZ gives RVZ-00042). Codes are stored: changing it leaves "
        "existing codes as they are.",
    ),
    Setting("code_digits", "REMANENCE_CODE_DIGITS", "Zero-padded digits in compound codes.", int),
    Setting(
        "public_status",
        "REMANENCE_PUBLIC_STATUS",
        "Show the group status page to visitors who are not logged in (embargoed compounds show only their code).",
        _bool,
    ),
    Setting("max_upload_mb", "REMANENCE_MAX_UPLOAD_MB", "Largest instrument file accepted, in MiB.", float),
    Setting(
        "embedded_worker",
        "REMANENCE_EMBEDDED_WORKER",
        "Run one background worker inside `remanence serve` (the embedded default); set false when separate "
        "`remanence worker` processes run.",
        _bool,
    ),
    Setting("cookie_secure", "REMANENCE_COOKIE_SECURE", "Send the session cookie over HTTPS only.", _bool),
    Setting("session_hours", "REMANENCE_SESSION_HOURS", "How long a login lasts after its last use, in hours.", float),
    Setting(
        "search_per_minute",
        "REMANENCE_SEARCH_PER_MINUTE",
        "Structure searches per minute allowed to one caller (token, account or client address), per process.",
        float,
    ),
    Setting("search_burst", "REMANENCE_SEARCH_BURST", "Structure searches one caller may make at once.", int),
    Setting(
        "sqlite_busy_ms",
        "REMANENCE_SQLITE_BUSY_MS",
        "SQLite only: how long a request waits for another writer before answering 503, in milliseconds.",
        int,
    ),
    Setting("header_timeout_s", "REMANENCE_HEADER_TIMEOUT_S",
            "Seconds a client has to send a request's line and headers before the connection is closed.", float),
    Setting("body_timeout_s", "REMANENCE_BODY_TIMEOUT_S",
            "Seconds a client has to send a request's whole body (an upload) before it is answered 408.", float),
    Setting("keep_alive_s", "REMANENCE_KEEP_ALIVE_S",
            "Seconds an idle kept-alive connection stays open.", int),
    Setting("analysis_cpu_s", "REMANENCE_ANALYSIS_CPU_S",
            "CPU seconds the reading and analysis of one uploaded file may use before it is stopped (413).", float),
    Setting("analysis_memory_mb", "REMANENCE_ANALYSIS_MEMORY_MB",
            "Address space, in MiB, of the child process that analyses one upload (the loaded analysis code "
            "takes about 500 MiB of it); past it the upload is refused (413).", float),
    Setting("analysis_wall_s", "REMANENCE_ANALYSIS_WALL_S",
            "Seconds of real time one upload's analysis may take before its child process is killed (413).", float),
    Setting("analysis_workers", "REMANENCE_ANALYSIS_WORKERS",
            "Child processes analysing uploads at once, per server or worker process; more uploads wait.", int),
    Setting("upload_failures", "REMANENCE_UPLOAD_FAILURES",
            "Refused uploads (400, 413, 415, 422) one caller may make within the window before further uploads "
            "answer 429.", int),
    Setting("upload_failure_window_s", "REMANENCE_UPLOAD_FAILURE_WINDOW_S",
            "The window, in seconds, over which refused uploads are counted per caller.", float),
    Setting("smtp_host", "REMANENCE_SMTP_HOST",
            "SMTP server for notification e-mail; empty (the default) sends none. Accounts choose the events and "
            "give their address on the inbox page."),
    Setting("smtp_port", "REMANENCE_SMTP_PORT", "Port of the SMTP server.", int),
    Setting("smtp_from", "REMANENCE_SMTP_FROM", "From address of notification e-mail."),
    Setting("smtp_user", "REMANENCE_SMTP_USER", "SMTP login name; empty: no login."),
    Setting("smtp_password", "REMANENCE_SMTP_PASSWORD", "SMTP password (with REMANENCE_SMTP_USER)."),
    Setting("smtp_starttls", "REMANENCE_SMTP_STARTTLS", "Upgrade the SMTP connection with STARTTLS before login.",
            _bool),
    Setting("notification_keep_read_days", "REMANENCE_NOTIFICATION_KEEP_READ_DAYS",
            "Days a read notification is kept after its latest event; then the hourly prune (in the worker) or "
            "`remanence prune-notifications` removes it.", float),
    Setting("notification_keep_unread_days", "REMANENCE_NOTIFICATION_KEEP_UNREAD_DAYS",
            "Days an unread notification is kept after its latest event (the larger cap); 0 keeps unread ones "
            "until they are read.", float),
    Setting("notification_group_minutes", "REMANENCE_NOTIFICATION_GROUP_MINUTES",
            "Minutes from the first of a burst of like events on one compound (measurements, verdict changes, "
            "conflicts) within which later ones join its inbox entry; its e-mail goes once the window has "
            "closed. More than 0, at most 1440.", lambda text: check_group_minutes(float(text))),
    Setting("public_url", "REMANENCE_PUBLIC_URL",
            "The address people open the registry at (https://registry.example.org), for links in e-mail; "
            "empty: e-mail gives paths only."),
)


#: The bounds of REMANENCE_NOTIFICATION_GROUP_MINUTES: a window of at most one day.
GROUP_MINUTES_MAX = 1440.0


def check_group_minutes(minutes: float) -> float:
    """The notification group window in minutes, or ValueError unless 0 < minutes <= 1440."""
    if not (isinstance(minutes, (int, float)) and 0 < minutes <= GROUP_MINUTES_MAX):
        raise ValueError(f"the notification group window must be more than 0 and at most "
                         f"{GROUP_MINUTES_MAX:g} minutes, got {minutes!r}")
    return float(minutes)


@dataclass(frozen=True)
class Settings:
    data_dir: Path = field(default_factory=lambda: Path.cwd() / "var")
    database_url: str = ""
    secret_key: str = ""
    # RVZ: three letters that abbreviate no technique, unit, element or company of the trade (the
    # earlier RMN reads as "NMR" in French, Spanish, Italian and Portuguese). Nothing parses codes
    # by their prefix: they are looked up as stored, and batch codes extend the compound's code.
    code_prefix: str = "RVZ"
    code_digits: int = 5
    public_status: bool = False
    max_upload_mb: float = 50.0
    embedded_worker: bool = True
    cookie_secure: bool = False
    session_hours: float = 12.0
    sqlite_busy_ms: int = 15_000
    header_timeout_s: float = 10.0
    body_timeout_s: float = 60.0
    keep_alive_s: int = 5
    search_per_minute: float = 60.0
    search_burst: int = 20
    # Budgets for one upload's analysis (server/budget.py). Sized for a 2-core group server: a
    # well-formed file of any kind takes well under a second and 100 MiB here; the margins leave
    # room for a large but honest file on a loaded machine.
    analysis_cpu_s: float = 20.0
    analysis_memory_mb: float = 2048.0
    analysis_wall_s: float = 60.0
    analysis_workers: int = 2
    # Common practice for an instrument PC's token: a person fixing a file's columns retries a few
    # times; dozens of refusals in ten minutes are a script sending the same bad bytes again.
    upload_failures: int = 30
    upload_failure_window_s: float = 600.0
    smtp_host: str = ""
    smtp_port: int = 25
    smtp_from: str = "remanence@localhost"
    smtp_user: str = ""
    smtp_password: str = ""
    smtp_starttls: bool = False
    public_url: str = ""
    # A read notification is history the account has seen; a quarter covers a semester's
    # look back. Unread ones stay for the two years of a campaign. Common practice, not a rule.
    notification_keep_read_days: float = 90.0
    notification_keep_unread_days: float = 730.0
    # A series measured in one sitting, a batch of uploads from the instrument PC: half an hour holds
    # one burst; a day at most, so that an e-mail waits no longer than that. Common practice, not a rule.
    notification_group_minutes: float = 30.0

    def __post_init__(self) -> None:
        check_group_minutes(self.notification_group_minutes)

    @classmethod
    def from_env(cls, environ: Mapping[str, str] | None = None, **overrides: Any) -> "Settings":
        """Read every setting from ``environ`` (default ``os.environ``); ``overrides`` win."""
        env = os.environ if environ is None else environ
        values: dict[str, Any] = {}
        for s in SETTINGS:
            if s.env in env and env[s.env] != "":
                try:
                    values[s.name] = s.parse(env[s.env])
                except ValueError as exc:
                    raise ValueError(f"{s.env}: {exc}") from None
        values.update(overrides)
        return cls(**values).resolved()

    def resolved(self) -> "Settings":
        """Fill in the derived defaults: database URL in the data folder, and the secret key."""
        data_dir = Path(self.data_dir)
        url = self.database_url or f"sqlite:///{data_dir / 'remanence.db'}"
        key = self.secret_key or _stored_secret(data_dir)
        return dataclasses.replace(self, data_dir=data_dir, database_url=url, secret_key=key)

    @property
    def is_sqlite(self) -> bool:
        return self.database_url.startswith("sqlite")

    @property
    def max_upload_bytes(self) -> int:
        return int(self.max_upload_mb * 1024 * 1024)


def _stored_secret(data_dir: Path) -> str:
    """Read the generated secret key, creating it (mode 600) on first run."""
    path = data_dir / "secret_key"
    if path.exists():
        os.chmod(path, 0o600)  # a key copied in with looser rights is tightened
        return path.read_text().strip()
    data_dir.mkdir(parents=True, exist_ok=True, mode=0o700)
    key = secrets.token_urlsafe(48)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "w") as fh:
        fh.write(key + "\n")
    return key


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    return Settings.from_env()
