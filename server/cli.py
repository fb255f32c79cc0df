"""The ``remanence`` command.

    remanence init                         create or upgrade the database (runs the migrations)
    remanence serve [--host H] [--port P]  serve the web app and API
    remanence demo [--load-only]           fresh demo database, then serve it
    remanence user add NAME --role R [--display-name TEXT]  add an account (password from a prompt or --password-stdin)
    remanence user password NAME           change a password (ends the account's sessions)
    remanence token create --name N --scope S [--kinds K,...] [--embargoed] [--profile P]
                                           create an API token; prints it alone on the last line
    remanence token revoke ID              revoke a token at once
    remanence reanalyze [--kind K]         recompute stored measurements from their raw files
    remanence worker [--name N] [--once]   run background jobs against the configured database
    remanence verify                       re-hash every stored raw file
    remanence backup PATH                  consistent snapshot + manifest (SQLite online backup; pg_dump)
    remanence restore PATH                 restore into an empty database, checked against the manifest
    remanence settings                     list the settings, their environment variables and values
    remanence setup postgres [--apply]     check (and, with --apply, fix) the packaged RDKit cartridge
    remanence doctor [--backups DIR]       check database, cartridge, workers, data folder, backups
"""

from __future__ import annotations

import argparse
import getpass
import os
import shutil
import sys
from typing import Sequence

from sqlmodel import Session

from .settings import SETTINGS, Settings


def _settings() -> Settings:
    return Settings.from_env()


def _prepare_database(settings: Settings):
    """Upgrade the schema, then rebuild stored figures that follow an older rule (``services/stats.py``:
    once, then never again); returns the engine for the caller to use and dispose."""
    from .db import make_engine, upgrade
    from .services import stats

    upgrade(settings.database_url)
    engine = make_engine(settings.database_url)
    with Session(engine) as session:
        n = stats.ensure_current(session)
    if n:
        print(f"rebuilt the figures of {n} compound(s) under {stats.RULE}")
    return engine


def cmd_init(args: argparse.Namespace) -> int:
    settings = _settings()
    engine = _prepare_database(settings)
    if engine.dialect.name == "postgresql":
        _report_cartridge(engine)
    engine.dispose()
    print(f"database ready: {_display_url(settings.database_url)}")
    return 0


def cmd_rebuild_stats(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services import stats

    engine = make_engine(_settings().database_url)
    with Session(engine) as session:
        n = stats.refresh_all(session)
    engine.dispose()
    print(f"rebuilt the figures of {n} compound(s) under {stats.RULE}")
    return 0


def _report_cartridge(engine) -> bool:
    """Enable the cartridge back end if the server allows it; else say why and what to run."""
    from . import pg_cartridge
    from .services.search import enable_cartridge

    state = enable_cartridge(engine)
    if state.ready:
        built = " (structure table built from the registry)" if state.created_table else ""
        print(f"structure search: RDKit cartridge{built}")
        return True
    print(f"structure search runs in process: {state.error}")
    if pg_cartridge.is_known_defect(state.error):
        print(pg_cartridge.fix_instructions())
    return False


def _display_url(url: str) -> str:
    from sqlalchemy.engine import make_url

    return make_url(url).render_as_string(hide_password=True)


def cmd_serve(args: argparse.Namespace) -> int:
    import uvicorn

    from .app import create_app
    from .serving import uvicorn_config

    settings = _settings()
    _prepare_database(settings).dispose()
    app = create_app(settings)
    print(f"Remanence at http://{args.host}:{args.port}", flush=True)
    uvicorn.Server(uvicorn_config(app, settings, host=args.host, port=args.port, log_level=args.log_level)).run()
    return 0


DEMO_USER = "demo"
DEMO_PASSWORD = "bowl-inversion"


def cmd_demo(args: argparse.Namespace) -> int:
    from sqlmodel import select

    from .db import make_engine, upgrade
    from .models import User
    from .services import accounts

    settings = _settings()
    if settings.is_sqlite and not os.environ.get("REMANENCE_DATABASE_URL"):
        # The demo gets a database of its own, made fresh each time.
        demo_dir = settings.data_dir / "demo"
        shutil.rmtree(demo_dir, ignore_errors=True)
        demo_dir.mkdir(parents=True)
        os.environ["REMANENCE_DATABASE_URL"] = f"sqlite:///{demo_dir / 'remanence-demo.db'}"
        settings = _settings()
    upgrade(settings.database_url)
    engine = make_engine(settings.database_url)
    with Session(engine) as session:
        if not session.exec(select(User).where(User.username == DEMO_USER)).first():
            accounts.create_user(session=session, username=DEMO_USER, password=DEMO_PASSWORD, role="admin",
                                 actor="cli:demo")
    from seed_demo import load as demo_load

    demo_load.load(settings)
    engine.dispose()
    print(f"demo database: {_display_url(settings.database_url)}")
    print(f"demo login: user '{DEMO_USER}', password '{DEMO_PASSWORD}'")
    if args.load_only:
        return 0
    args.host = args.host or "127.0.0.1"
    return cmd_serve(args)


def _read_password(args: argparse.Namespace) -> str:
    if args.password_stdin:
        return sys.stdin.readline().rstrip("\n")
    first = getpass.getpass("password: ")
    if first != getpass.getpass("again: "):
        raise SystemExit("the two passwords differ")
    return first


def cmd_user_add(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .errors import InputError
    from .services import accounts
    from .services.errors import Duplicate

    settings = _settings()
    engine = make_engine(settings.database_url)
    password = _read_password(args)
    try:
        with Session(engine) as session:
            user = accounts.create_user(session=session, username=args.name, password=password, role=args.role,
                                        display_name=args.display_name, actor="cli")
    except (InputError, Duplicate) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"user {user.username} added with role {user.role}")
    return 0


def cmd_user_password(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .errors import InputError
    from .services import accounts
    from .services.errors import NotFound

    settings = _settings()
    password = _read_password(args)
    try:
        with Session(make_engine(settings.database_url)) as session:
            user = accounts.set_password(session=session, username=args.name, password=password, actor="cli")
    except (InputError, NotFound) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"password of {user.username} changed; every session of the account has ended")
    return 0


def cmd_token_create(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .errors import InputError
    from .services import accounts

    settings = _settings()
    kinds = [k.strip() for k in args.kinds.split(",") if k.strip()] if args.kinds else None
    with Session(make_engine(settings.database_url)) as session:
        try:
            token, secret = accounts.create_token(session=session, name=args.name, scope=args.scope, kinds=kinds,
                                                  expires_in=accounts.parse_lifetime(args.expires), actor="cli",
                                                  sees_embargoed=args.embargo_grant, profile=args.profile)
        except InputError as exc:
            print(f"error: {exc}", file=sys.stderr)
            return 2
    print(f"token {token.id} '{token.name}' scope {token.scope}" + (f" kinds {','.join(kinds)}" if kinds else "")
          + (" sees embargoed compounds" if token.sees_embargoed else "")
          + (f" reads files through profile {token.profile}" if token.profile else "")
          + (f" expires {token.expires_at:%Y-%m-%d %H:%M} UTC" if token.expires_at else " never expires"))
    print("shown once; store it on the instrument PC now:")
    print(secret)
    return 0


def cmd_token_revoke(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services import accounts
    from .services.errors import NotFound

    with Session(make_engine(_settings().database_url)) as session:
        try:
            token = accounts.revoke_token(session=session, token_id=args.id, actor="cli")
        except NotFound as exc:
            print(f"error: {exc}", file=sys.stderr)
            return 2
    print(f"token {token.id} '{token.name}' revoked")
    return 0


def cmd_reanalyze(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services.measurements import reanalyse

    with Session(make_engine(_settings().database_url)) as session:
        changes = reanalyse(session=session, kind=args.kind)
    for ch in changes:
        if ch.error:
            print(f"measurement {ch.measurement_id} ({ch.kind}): cannot re-analyse: {ch.error}")
            continue
        moved = ", ".join(f"{k}: {a!r} -> {b!r}" for k, (a, b) in list(ch.changed.items())[:6]) or "no value moved"
        print(f"measurement {ch.measurement_id} ({ch.kind}) {ch.old_version} -> {ch.new_version}: {moved}")
    print(f"{len(changes)} measurement(s) changed")
    return 1 if any(ch.error for ch in changes) else 0


def cmd_rematch_scaffolds(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services.registry import rematch_scaffolds

    with Session(make_engine(_settings().database_url)) as session:
        changes = rematch_scaffolds(session=session, apply=not args.dry_run, actor="cli")
    for ch in changes:
        print(f"{ch.code}: scaffold {ch.before or 'none'} -> {ch.after} ({ch.note})")
    verb = "would be filed" if args.dry_run else "filed"
    print(f"{len(changes)} compound(s) {verb} under a scaffold")
    return 0


def cmd_recompute_verdicts(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services.verdicts import recompute_all

    with Session(make_engine(_settings().database_url)) as session:
        done = recompute_all(session=session, apply=not args.dry_run, actor="cli:recompute-verdicts")
    for r in done:
        if r.changed or r.restated:
            what = f"{r.old_code} -> {r.new_code}" if r.old_code != r.new_code else (
                f"{r.new_code} (conflicts changed)" if r.changed else
                f"{r.new_code} (reasons restated)" if r.old_version else f"{r.new_code} (first stored)")
            print(f"{r.code}: {what} [{r.old_version or 'no version'} -> {r.new_version}]")
    changed, restated = sum(r.changed for r in done), sum(r.restated for r in done)
    verb = "would change" if args.dry_run else "changed"
    print(f"{len(done)} verdict(s) examined: {changed} {verb}, {restated} restated with the same code and "
          f"conflicts, {len(done) - changed - restated} unchanged"
          + (" (dry run: nothing written)" if args.dry_run else ""))
    return 0


def cmd_prune_notifications(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services.notifications import prune

    settings = _settings()
    with Session(make_engine(settings.database_url)) as session:
        done = prune(session, keep_read_days=settings.notification_keep_read_days,
                     keep_unread_days=settings.notification_keep_unread_days, dry_run=args.dry_run, actor="cli")
    verb = "would be removed" if args.dry_run else "removed"
    unread_rule = (f"unread older than {settings.notification_keep_unread_days:g} days"
                   if settings.notification_keep_unread_days > 0 else "unread kept until read")
    print(f"{done['read']} read and {done['unread']} unread notification(s) {verb} "
          f"(read older than {settings.notification_keep_read_days:g} days; {unread_rule})")
    return 0


def cmd_worker(args: argparse.Namespace) -> int:
    from .db import upgrade
    from .jobs.worker import run_worker

    settings = _settings()
    upgrade(settings.database_url)
    n = run_worker(settings, name=args.name, once=args.once)
    print(f"worker stopped after {n} job(s)")
    return 0


def cmd_verify(args: argparse.Namespace) -> int:
    from .db import make_engine
    from .services.backup import verify

    checked, bad = verify(make_engine(_settings().database_url))
    for m in bad:
        print(f"raw file {m.raw_file_id}: stored sha256 {m.stored_sha256} but the bytes hash to {m.actual_sha256}")
    print(f"{checked} raw file(s) checked, {len(bad)} mismatch(es)")
    return 1 if bad else 0


def cmd_backup(args: argparse.Namespace) -> int:
    from pathlib import Path

    from .db import make_engine
    from .services.backup import BackupError, backup

    settings = _settings()
    try:
        manifest = backup(make_engine(settings.database_url), settings.database_url, Path(args.path))
    except BackupError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    total = sum(manifest["counts"].values())
    print(f"backup written to {args.path}: {manifest['snapshot']}, {total} rows, "
          f"{len(manifest['raw_files_sha256'])} raw files, manifest.json")
    return 0


def cmd_restore(args: argparse.Namespace) -> int:
    from pathlib import Path

    from .db import make_engine, upgrade
    from .services.backup import BackupError, restore

    settings = _settings()
    try:
        manifest = restore(make_engine(settings.database_url), settings.database_url, Path(args.path))
        upgrade(settings.database_url)  # a backup from an older version is brought up to date
    except BackupError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"restored {args.path} ({manifest['made_at']}) into {_display_url(settings.database_url)}; "
          "row counts and raw-file checksums match the manifest")
    return 0


def cmd_settings(args: argparse.Namespace) -> int:
    settings = _settings()
    for s in SETTINGS:
        value = getattr(settings, s.name)
        if s.name == "secret_key":
            value = "(set)" if value else "(unset)"
        elif s.name == "database_url":
            value = _display_url(value)
        print(f"{s.env}={value}\n    {s.help}")
    return 0


def cmd_setup_postgres(args: argparse.Namespace) -> int:
    """Check the installed rdkit extension scripts; with --apply, fix them and enable the cartridge."""
    from pathlib import Path

    from . import pg_cartridge
    from .db import make_engine

    dirs = [Path(d) for d in args.sharedir] if args.sharedir else pg_cartridge.extension_dirs()
    scripts = pg_cartridge.check_scripts(dirs)
    if not scripts:
        where = ", ".join(str(d) for d in dirs) or "no PostgreSQL extension folder found"
        print(f"no rdkit extension script in {where}: install the cartridge (Debian: apt-get install "
              "postgresql-15-rdkit) on the PostgreSQL server, or give --sharedir")
    left = 0 if scripts else 1
    for s in scripts:
        if not s.defective:
            print(f"OK   {s.path}: no defect")
            continue
        lines = ", ".join(str(n) for n in s.defect_lines)
        if not args.apply:
            left += 1
            print(f"FIX  {s.path}: operator @= names '=' as commutator (lines {lines}); "
                  "run `remanence setup postgres --apply` as root to fix it")
            continue
        try:
            pg_cartridge.apply_fix(s.path)
        except PermissionError:
            left += 1
            print(f"FIX  {s.path}: cannot write it as this user: run the command as root", file=sys.stderr)
            continue
        print(f"fixed {s.path} (lines {lines}; original kept as {s.path.name}{pg_cartridge.BACKUP_SUFFIX})")
    settings = _settings()
    if args.apply and not left and settings.database_url.startswith("postgresql"):
        engine = make_engine(settings.database_url)
        try:
            if not _report_cartridge(engine):
                left += 1
        finally:
            engine.dispose()
    return 1 if left else 0


def cmd_doctor(args: argparse.Namespace) -> int:
    from pathlib import Path

    from .doctor import run_checks

    checks = run_checks(_settings(), backups=Path(args.backups) if args.backups else None)
    for c in checks:
        print(c.line())
    return 0 if all(c.ok for c in checks) else 1


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="remanence", description="Registry and dashboard for molecular-ferroelectric campaigns.")
    sub = parser.add_subparsers(dest="command", required=True)

    sub.add_parser("init", help="create or upgrade the database").set_defaults(func=cmd_init)

    def serve_args(p: argparse.ArgumentParser) -> None:
        p.add_argument("--host", default="127.0.0.1")
        p.add_argument("--port", type=int, default=8000)
        p.add_argument("--log-level", default="info")

    p = sub.add_parser("serve", help="serve the web app and API")
    serve_args(p)
    p.set_defaults(func=cmd_serve)

    p = sub.add_parser("demo", help="fresh demo database, then serve it")
    serve_args(p)
    p.add_argument("--load-only", action="store_true", help="load the demo scenario and exit")
    p.set_defaults(func=cmd_demo)

    user = sub.add_parser("user", help="accounts").add_subparsers(dest="user_command", required=True)
    p = user.add_parser("add", help="add an account")
    p.add_argument("name")
    p.add_argument("--role", choices=["admin", "member", "viewer"], default="member")
    p.add_argument("--display-name", default=None, help='how the person signs records, e.g. "Dr. A. Example"')
    p.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    p.set_defaults(func=cmd_user_add)
    p = user.add_parser("password", help="change an account's password (ends its sessions)")
    p.add_argument("name")
    p.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    p.set_defaults(func=cmd_user_password)

    token = sub.add_parser("token", help="API tokens").add_subparsers(dest="token_command", required=True)
    p = token.add_parser("create", help="create a token (shown once)")
    p.add_argument("--name", required=True)
    p.add_argument("--scope", choices=["upload", "write", "read"], required=True)
    p.add_argument("--kinds", help="upload tokens: comma-separated measurement kinds allowed")
    p.add_argument("--expires", help="lifetime, e.g. 90d, 12h or 8w (default: never expires)")
    p.add_argument("--embargoed", dest="embargo_grant", action="store_true",
                   help="read tokens: may see embargoed compounds (default: they may not)")
    p.add_argument("--profile", help="upload tokens: read every file through this import profile")
    p.set_defaults(func=cmd_token_create)
    p = token.add_parser("revoke", help="revoke a token")
    p.add_argument("id", type=int)
    p.set_defaults(func=cmd_token_revoke)

    p = sub.add_parser("reanalyze", help="recompute every stored measurement from its raw file")
    p.add_argument("--kind", help="only measurements of this kind")
    p.set_defaults(func=cmd_reanalyze)

    p = sub.add_parser("rematch-scaffolds", help="file compounds without a scaffold under the largest registered "
                       "scaffold they are built on")
    p.add_argument("--dry-run", action="store_true", help="list the changes, write nothing")
    p.set_defaults(func=cmd_rematch_scaffolds)

    p = sub.add_parser("recompute-verdicts", help="re-derive every stored compound verdict under the current "
                       "rules; changes are audited and notified as verdict changes")
    p.add_argument("--dry-run", action="store_true", help="compare and count, write nothing")
    p.set_defaults(func=cmd_recompute_verdicts)
    p = sub.add_parser("prune-notifications", help="remove read notifications past their keeping time (and unread "
                       "ones past the larger cap)")
    p.add_argument("--dry-run", action="store_true", help="count them, remove nothing")
    p.set_defaults(func=cmd_prune_notifications)

    sub.add_parser("rebuild-stats", help="recompute every compound's stored figures (largest Pr, counts, "
                   "barriers) from its live evidence").set_defaults(func=cmd_rebuild_stats)
    p = sub.add_parser("worker", help="run background jobs (computed estimates) until stopped")
    p.add_argument("--name", help="worker name shown on the queue page (default host:pid)")
    p.add_argument("--once", action="store_true", help="run at most one job, then exit")
    p.set_defaults(func=cmd_worker)

    sub.add_parser("verify", help="re-hash every stored raw file and report mismatches").set_defaults(func=cmd_verify)
    p = sub.add_parser("backup", help="write a consistent snapshot and a manifest into a new folder")
    p.add_argument("path")
    p.set_defaults(func=cmd_backup)
    p = sub.add_parser("restore", help="restore a backup folder into an empty database")
    p.add_argument("path")
    p.set_defaults(func=cmd_restore)

    sub.add_parser("settings", help="list settings").set_defaults(func=cmd_settings)

    setup = sub.add_parser("setup", help="one-time server set-up steps").add_subparsers(dest="setup_command",
                                                                                          required=True)
    p = setup.add_parser("postgres", help="check the packaged RDKit cartridge; --apply fixes its known defect "
                                          "(as root, on the database server) and enables it")
    p.add_argument("--apply", action="store_true", help="edit the extension script (original kept beside it), "
                                                        "then create the extension and the structure table")
    p.add_argument("--sharedir", action="append", metavar="DIR",
                   help="extension folder to check (default: pg_config --sharedir and /usr/share/postgresql/*)")
    p.set_defaults(func=cmd_setup_postgres)

    p = sub.add_parser("doctor", help="check database, cartridge, workers, data folder and backups")
    p.add_argument("--backups", metavar="DIR", help="folder that holds the `remanence backup` folders")
    p.set_defaults(func=cmd_doctor)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    os.umask(0o077)  # whatever the command writes (database, backups, logs) is private to this account
    args = build_parser().parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    raise SystemExit(main())
