"""Notifications: each account's inbox, follows, event preferences, and optional e-mail.

Each event is written where it happens, in that transaction (the caller commits):

| event         | written by                                      | goes to                                   |
|---------------|-------------------------------------------------|-------------------------------------------|
| measurement   | ``measurements.record_created`` (every upload)  | the compound's registrant and followers   |
| verdict       | ``verdicts.recompute`` (computed code changed)  | the compound's registrant and followers   |
| conflict      | ``verdicts.recompute`` (a conflict not there before) | the compound's registrant and followers |
| estimate      | ``jobs.queue`` when a job ends done or failed   | the account that queued it                |
| mention       | ``comments.post_comment`` / ``edit_comment``    | exactly the accounts newly mentioned      |
| assigned      | ``planning.assigned`` (registering, PATCH)      | the new assignee                          |

Never to the actor of the event itself. A burst of like events is one entry (grouped when written,
see :func:`notify`): the events of :data:`GROUPED` about one compound that reach one account within
:func:`group_window` (REMANENCE_NOTIFICATION_GROUP_MINUTES) of the entry's first, while it is unread, fold into it ("12 measurements on
RVZ-00042 between 14:02 and 14:09 UTC"), its events kept in ``parts`` for the inbox to expand. Read
entries whose latest event is older than REMANENCE_NOTIFICATION_KEEP_READ_DAYS are removed by
:func:`prune` (the worker, hourly, and ``remanence prune-notifications``); unread ones are kept up to
the larger cap REMANENCE_NOTIFICATION_KEEP_UNREAD_DAYS (0: kept until read). The embargo (``server/access.py``, the one authority): a
notification about a compound is created only for an account that may see it, and the inbox, the
API and the unread count show one only while the reader may still see its compound. Tokens have no
inbox (they are not accounts).

E-mail follows the groups: one message per entry, listing each of its events, sent once the entry's
window has closed (``mail_due_at``, set when a reader who chose e-mail for the event gets the entry; at
once for events that never group) and never twice. :func:`due_letters` claims the due entries
atomically in the database (``FOR UPDATE SKIP LOCKED`` on PostgreSQL, one ``UPDATE ... RETURNING`` on
SQLite's single writer, as jobs are claimed in ``server/jobs/queue.py``) by setting ``mailed_at``, so
several app and worker processes each send a disjoint share; a claimed entry is never joined again, so
no event goes unmailed. It runs in the mailer's thread (``server/mail.py``), poked after a commit that
wrote mail-wanted entries and by every worker's tick (:func:`mail_due_later`), never in the way of the
request. The preferences and the embargo are checked again when the letter is written. Without
REMANENCE_SMTP_HOST none is sent (and no entry is marked due).
"""

from __future__ import annotations

import weakref
from collections.abc import Iterable, Sequence
from datetime import datetime, timedelta
from email.message import EmailMessage
from typing import Any, Optional

import sqlalchemy as sa
from sqlalchemy.exc import OperationalError
from sqlmodel import Session, func, select

from .. import access, mail
from ..access import Actor
from ..errors import InputError
from ..settings import Settings, check_group_minutes
from ..models import (Compound, CompoundFollow, Notification, NotificationGroup, NotificationPart,
                      NotificationPreference, NotificationRead, User, utcnow)
from . import audit
from ..verdict_codes import LABELS
from .errors import Forbidden, NotFound

#: The events an account can choose, in the order the preferences form lists them.
EVENTS: dict[str, str] = {
    "measurement": "a new measurement on a compound I registered or follow",
    "verdict": "a verdict change (old → new) on a compound I registered or follow",
    "conflict": "a new conflict in the verdict of a compound I registered or follow",
    "estimate": "an estimate I queued finishing or failing",
    "mention": "a mention of me in a comment",
    "assigned": "a planned compound assigned to me",
}
#: Bounded work per request: the inbox shows at most this many at once.
PAGE_LIMIT = 200
TEXT_CHARS = 400
EXCERPT_CHARS = 140
_MAIL_KEY = "remanence_notification_mail"
#: Events that group, with the words of a group's line (singular, plural of what ``count`` counts).
#: Mentions and assignments are addressed to one person by another, and an estimate's end (done or
#: failed, with its error) is the answer to one request of the reader's: those stay one entry each.
GROUPED: dict[str, tuple[str, str]] = {
    "measurement": ("measurement", "measurements"),
    "verdict": ("verdict change", "verdict changes"),
    "conflict": ("new conflict", "new conflicts"),
}
#: Entries whose e-mail one call of :func:`due_letters` claims at most (bounded work per tick).
MAIL_BATCH = 100
_WINDOWS: "weakref.WeakKeyDictionary[Any, timedelta]" = weakref.WeakKeyDictionary()
#: Events one entry keeps for its expanded view; the next like event starts a new entry.
GROUP_PARTS = 50


# --- writing --------------------------------------------------------------------------------------


def configure(engine: Any, settings: Any) -> None:
    """Give ``engine`` the group window of ``settings`` (create_app and the worker call this)."""
    _WINDOWS[engine] = timedelta(minutes=check_group_minutes(settings.notification_group_minutes))


def group_window(bind: Any) -> timedelta:
    """How long after an entry's first event a like event still joins it (and its e-mail waits):
    REMANENCE_NOTIFICATION_GROUP_MINUTES as configured for ``bind``, else the setting's default."""
    try:
        window = _WINDOWS.get(bind)
    except TypeError:  # not weak-referenceable (a Connection as bind)
        window = None
    return window if window is not None else timedelta(minutes=Settings.notification_group_minutes)


def _groups(event: str, compound: Optional[Compound]) -> bool:
    return event in GROUPED and compound is not None and compound.id is not None


def who(actor_label: str) -> str:
    """A person's name from an actor label (``user:ana`` -> ``ana``); other actors as labelled."""
    return actor_label[5:] if actor_label.startswith("user:") else actor_label


def _label(user: User) -> str:
    return f"user:{user.username}"


def notify(session: Session, *, event: str, users: Iterable[User], compound: Optional[Compound], text: str,
           url: str, actor: str, count: int = 1) -> list[Notification]:
    """Add one notification per recipient who wants ``event`` (no commit), or fold it into the
    recipient's open group of like events (:func:`_open_group`). ``count``: the things it brings
    (the measurements of one upload). Left out: the actor itself, inactive accounts, accounts that
    may not see ``compound``, and those who muted the event."""
    if event not in EVENTS:
        raise ValueError(f"unknown notification event {event!r}")
    seen: dict[int, User] = {}
    for u in users:
        if u.id is None or not u.active or _label(u) == actor:
            continue
        if compound is not None and not access.may_see_structure(access.account_actor(u), compound):
            continue
        seen[u.id] = u
    if not seen:
        return []
    prefs = {p.user_id: p for p in session.exec(select(NotificationPreference)
                                                .where(NotificationPreference.user_id.in_(sorted(seen)))).all()}
    made, mailing = [], False
    window = group_window(session.get_bind())
    mail_on = mail.mailer_for(session.get_bind()) is not None
    for uid, u in seen.items():
        pref = prefs.get(uid)
        if pref is not None and event in (pref.muted or []):
            continue
        wants_mail = mail_on and _wants_mail(pref, event)
        now = utcnow()
        n = _open_group(session, uid, event, compound, now, window)
        if n is None:
            n = Notification(user_id=uid, event=event, compound_id=compound.id if compound is not None else None,
                             text=text[:TEXT_CHARS], url=url, actor=actor, count=count, created_at=now, last_at=now)
            if wants_mail:  # a group's letter waits for its window to close; a lone event's goes now
                n.mail_due_at = now + window if _groups(event, compound) else now
        else:
            _fold(n, compound, text=text, url=url, actor=actor, count=count, now=now)
            if wants_mail and n.mail_due_at is None:  # e-mail chosen while the group was open
                n.mail_due_at = n.created_at + window
        session.add(n)
        made.append(n)
        mailing = mailing or wants_mail
    if mailing:
        _mail_after_commit(session)
    return made


def _wants_mail(pref: Optional[NotificationPreference], event: str) -> bool:
    return pref is not None and bool(pref.email) and event in (pref.email_events or [])


def _open_group(session: Session, user_id: int, event: str, compound: Optional[Compound], now: datetime,
                window: timedelta) -> Optional[Notification]:
    """The recipient's unread entry that a like event about ``compound`` joins, if any: same event
    and compound, first event within ``window``, fewer than :data:`GROUP_PARTS` events, its e-mail
    not yet claimed. Locked (PostgreSQL ``FOR UPDATE``; SQLite has one writer) so two uploads at once
    both count, and so a claim of its e-mail (:func:`due_letters`) waits for the event to join or
    makes it start a new entry."""
    if not _groups(event, compound):
        return None
    session.flush()  # an entry added earlier in this transaction is a group to join as well
    q = (select(Notification)
         .where(Notification.user_id == user_id, Notification.event == event,
                Notification.compound_id == compound.id, Notification.read_at.is_(None),
                Notification.mailed_at.is_(None), Notification.created_at >= now - window)
         .order_by(Notification.created_at.desc(), Notification.id.desc()).limit(1).with_for_update())
    n = session.exec(q).first()
    if n is None or len(n.parts or []) >= GROUP_PARTS:
        return None
    return n


def _part(text: str, url: str, at: datetime, count: int, actor: str) -> dict[str, Any]:
    return {"text": text[:TEXT_CHARS], "url": url, "created_at": at.isoformat(), "count": count, "actor": actor}


def _fold(n: Notification, compound: Compound, *, text: str, url: str, actor: str, count: int, now: datetime
          ) -> None:
    """Add one like event to the group ``n`` and write its line anew."""
    parts = list(n.parts or []) or [_part(n.text, n.url, n.created_at, n.count, n.actor)]
    parts.append(_part(text, url, now, count, actor))
    n.parts, n.count, n.last_at = parts, n.count + count, now
    n.text = group_text(n.event, compound.code, n.count, n.created_at, now)[:TEXT_CHARS]
    n.url, n.actor = _compound_url(compound) + ("#verdict" if n.event in ("verdict", "conflict") else ""), actor


def group_text(event: str, code: str, count: int, first: datetime, last: datetime) -> str:
    """A group's line: "12 measurements on RVZ-00042 between 14:02 and 14:09 UTC" (UTC, like the inbox)."""
    one, many = GROUPED[event]
    same_day = first.date() == last.date()
    start = first.strftime("%H:%M" if same_day else "%Y-%m-%d %H:%M")
    end = last.strftime("%H:%M" if same_day else "%Y-%m-%d %H:%M")
    when = f"at {start}" if start == end else f"between {start} and {end}"
    return f"{count} {one if count == 1 else many} on {code} {when} UTC"


def _mail_after_commit(session: Session) -> None:
    """Poke the mailer once the session commits (its due letters go then); a rollback pokes nothing."""
    if _MAIL_KEY not in session.info:
        sa.event.listen(session, "after_commit", _poke_after_commit)
        sa.event.listen(session, "after_rollback", _drop_poke)
    session.info[_MAIL_KEY] = True


def _poke_after_commit(session: Session) -> None:
    if session.info.get(_MAIL_KEY):
        session.info[_MAIL_KEY] = False
        mail_due_later(session.get_bind())


def _drop_poke(session: Session) -> None:
    session.info[_MAIL_KEY] = False


def mail_due_later(engine: Any) -> None:
    """Have the mailer's thread send the letters due now (:func:`due_letters`); nothing when e-mail is off.
    Every worker calls this on its tick (``server/jobs/worker.py``), so a group whose window closed is
    mailed without a new event."""
    mailer = mail.mailer_for(engine)
    if mailer is not None:
        mailer.poke(lambda: due_letters(engine, mailer))


def _claim_mail(session: Session, now: datetime, limit: int) -> list[int]:
    """Mark up to ``limit`` entries whose e-mail is due and unclaimed as claimed (``mailed_at``), atomically:
    PostgreSQL skips rows another process holds (a claim, or an event joining); SQLite has one writer."""
    due = (select(Notification.id).where(Notification.mail_due_at <= now, Notification.mailed_at.is_(None))
           .order_by(Notification.mail_due_at, Notification.id).limit(limit))
    if session.get_bind().dialect.name == "postgresql":
        ids = list(session.exec(due.with_for_update(skip_locked=True)).all())
        if ids:
            session.execute(sa.update(Notification).where(Notification.id.in_(ids)).values(mailed_at=now)
                            .execution_options(synchronize_session=False))
        return ids
    return list(session.execute(
        sa.update(Notification).where(Notification.id.in_(due.scalar_subquery()), Notification.mailed_at.is_(None))
        .values(mailed_at=now).returning(Notification.id).execution_options(synchronize_session=False)
    ).scalars().all())


def due_letters(engine: Any, mailer: Any, *, now: Optional[datetime] = None, limit: int = MAIL_BATCH
                ) -> list[EmailMessage]:
    """Claim the entries whose e-mail is due (their group's window closed) and write one letter each,
    listing every event of the entry. Claimed and committed before anything is sent, so no other
    process sends them again; a reader who meanwhile turned the e-mail off, left, or may no longer see
    the compound gets none."""
    now = now or utcnow()
    with Session(engine) as session:
        ids = _claim_mail(session, now, limit)
        if not ids:
            session.rollback()
            return []
        rows = session.exec(select(Notification).where(Notification.id.in_(ids)).order_by(Notification.id)).all()
        uids = sorted({n.user_id for n in rows})
        users = {u.id: u for u in session.exec(select(User).where(User.id.in_(uids))).all()}
        prefs = {p.user_id: p for p in session.exec(select(NotificationPreference)
                                                    .where(NotificationPreference.user_id.in_(uids))).all()}
        cids = sorted({n.compound_id for n in rows if n.compound_id is not None})
        compounds = {c.id: c for c in session.exec(select(Compound).where(Compound.id.in_(cids))).all()} if cids else {}
        letters = []
        for n in rows:
            u, pref = users.get(n.user_id), prefs.get(n.user_id)
            compound = compounds.get(n.compound_id)
            if u is None or not u.active or not _wants_mail(pref, n.event):
                continue
            if compound is not None and not access.may_see_structure(access.account_actor(u), compound):
                continue
            letters.append(letter(mailer, n, to=pref.email))
        session.commit()
    return letters


def letter(mailer: Any, n: Notification, *, to: str) -> EmailMessage:
    """One entry's e-mail: its line as the subject, then each of its events with its time and link."""
    lines = [n.text, ""]
    if n.parts:
        lines += [f"- {datetime.fromisoformat(p['created_at']):%Y-%m-%d %H:%M} UTC  {p['text']}\n"
                  f"  {mailer.link(p['url'])}" for p in n.parts]
        lines += ["", f"All of them: {mailer.link(n.url)}"]
    else:
        lines.append(mailer.link(n.url))
    lines += ["", "-- ", f"Choose which events reach you by e-mail at {mailer.link('/inbox')}", ""]
    return mailer.message(to=to, subject=f"[Remanence] {n.text[:120]}", body="\n".join(lines))


def account_of(session: Session, actor_label: str) -> Optional[User]:
    """The account behind an actor label (``user:ana``); None for tokens, workers and the system."""
    if not actor_label.startswith("user:"):
        return None
    return session.exec(select(User).where(User.username == actor_label[5:])).first()


def watchers(session: Session, compound: Compound) -> list[User]:
    """The compound's registrant and followers."""
    users = list(session.exec(select(User).join(CompoundFollow, CompoundFollow.user_id == User.id)
                              .where(CompoundFollow.compound_id == compound.id)).all())
    owner = account_of(session, compound.created_by or "")
    if owner is not None and all(u.id != owner.id for u in users):
        users.insert(0, owner)
    return users


def _compound_url(compound: Compound) -> str:
    return f"/compounds/{compound.code}"


def measurements_stored(session: Session, compound: Compound, stored: Sequence[Any], *, actor: str) -> None:
    """New measurements on ``compound`` (one notification per upload, however many blocks it had)."""
    if not stored:
        return
    kinds = sorted({m.kind for m in stored})
    if len(stored) == 1:
        text = f"{who(actor)} added a {kinds[0]} measurement to {compound.code}"
        url = f"/measurements/{stored[0].id}"
    else:
        text = f"{who(actor)} added {len(stored)} measurements ({', '.join(kinds)}) to {compound.code}"
        url = _compound_url(compound)
    notify(session, event="measurement", users=watchers(session, compound), compound=compound, text=text, url=url,
           actor=actor, count=len(stored))


def verdict_changed(session: Session, compound: Compound, *, old_code: Optional[str], new_code: str,
                    old_conflicts: Sequence[str], new_conflicts: Sequence[str], actor: str) -> None:
    """The computed verdict changed (old -> new), or a conflict appeared that was not there before."""
    users = None
    if old_code != new_code:
        users = watchers(session, compound)
        old = LABELS.get(old_code or "", old_code or "none")
        notify(session, event="verdict", users=users, compound=compound, actor=actor,
               text=f"Verdict of {compound.code}: {old} → {LABELS.get(new_code, new_code)}",
               url=_compound_url(compound) + "#verdict")
    fresh = [c for c in new_conflicts if c not in set(old_conflicts)]
    if fresh:
        users = users if users is not None else watchers(session, compound)
        more = f" (and {len(fresh) - 1} more)" if len(fresh) > 1 else ""
        notify(session, event="conflict", users=users, compound=compound, actor=actor,
               text=f"New conflict in the verdict of {compound.code}: {fresh[0]}{more}",
               url=_compound_url(compound) + "#verdict")


def job_ended(session: Session, job: Any, *, actor: str) -> None:
    """A job ended done or failed: its owner hears of it."""
    owner = account_of(session, job.created_by or "")
    if owner is None or job.state not in ("done", "failed"):
        return
    compound = session.get(Compound, job.compound_id) if job.compound_id is not None else None
    about = f" for {compound.code}" if compound is not None else ""
    if job.state == "done":
        text = f"Your {job.kind} job {job.id}{about} is done"
    else:
        first = (job.error or "").strip().splitlines()[0] if (job.error or "").strip() else "no message"
        text = f"Your {job.kind} job {job.id}{about} failed: {first}"
    notify(session, event="estimate", users=[owner], compound=compound, text=text,
           url=_compound_url(compound) if compound is not None else "/queue", actor=actor)


def mentioned(session: Session, *, names: Sequence[str], compound: Compound, where: str, url: str, body: str,
              actor: str) -> None:
    """``names`` were mentioned in a comment on ``where`` (e.g. "batch RVZ-00001-B01")."""
    if not names:
        return
    users = session.exec(select(User).where(User.username.in_(sorted(set(names))))).all()
    excerpt = " ".join(body.split())
    if len(excerpt) > EXCERPT_CHARS:
        excerpt = excerpt[: EXCERPT_CHARS - 1] + "…"
    notify(session, event="mention", users=users, compound=compound, url=url, actor=actor,
           text=f"{who(actor)} mentioned you on {where}: “{excerpt}”")


def assigned(session: Session, compound: Compound, *, before: str, after: str, actor: str) -> None:
    """A target's assignee changed to ``after`` (a user name)."""
    if not after or after == before:
        return
    user = session.exec(select(User).where(User.username == after)).first()
    if user is None:
        return
    notify(session, event="assigned", users=[user], compound=compound, actor=actor,
           text=f"{who(actor)} assigned the planned compound {compound.code} to you", url=_compound_url(compound))


# --- reading --------------------------------------------------------------------------------------


def _account(actor: Optional[Actor]) -> int:
    if not access.has_inbox(actor):
        raise Forbidden(access.NO_INBOX)
    return actor.user_id


def _visible(actor: Actor, query):  # noqa: ANN001, ANN202 - a select
    """Only the caller's own notifications, and only those whose compound the caller may see now."""
    query = query.where(Notification.user_id == _account(actor))
    if access.sees_embargoed(actor):
        return query
    return (query.outerjoin(Compound, Compound.id == Notification.compound_id)
            .where(sa.or_(Notification.compound_id.is_(None), access.structure_visible(actor))))


def unread_count(session: Session, actor: Optional[Actor]) -> int:
    """The badge: a count only (index on user_id, read_at). 0 for callers without an inbox."""
    if not access.has_inbox(actor):
        return 0
    return session.exec(_visible(actor, select(func.count()).select_from(Notification))
                        .where(Notification.read_at.is_(None))).one()


def badge_count(engine: Any, actor: Optional[Actor]) -> int:
    """The menu's count for every page, in a session of its own; 0 when the database cannot answer
    (an error page about that very failure still renders)."""
    if not access.has_inbox(actor):
        return 0
    try:
        with Session(engine) as session:
            return unread_count(session, actor)
    except OperationalError:
        return 0


def inbox(session: Session, actor: Actor, *, unread_only: bool = False, limit: int = 50, offset: int = 0
          ) -> list[NotificationRead]:
    """The caller's notifications, newest first."""
    limit = max(1, min(limit, PAGE_LIMIT))
    q = _visible(actor, select(Notification))
    if unread_only:
        q = q.where(Notification.read_at.is_(None))
    rows = session.exec(q.order_by(Notification.last_at.desc(), Notification.id.desc())
                        .offset(offset).limit(limit)).all()
    ids = sorted({n.compound_id for n in rows if n.compound_id is not None})
    codes = dict(session.exec(select(Compound.id, Compound.code).where(Compound.id.in_(ids))).all()) if ids else {}
    return [NotificationRead(id=n.id, event=n.event, compound=codes.get(n.compound_id), text=n.text, url=n.url,
                             created_at=n.created_at, read=n.read_at is not None, count=n.count, group=_group(n))
            for n in rows]


def _group(n: Notification) -> Optional[NotificationGroup]:
    if not n.parts:
        return None
    items = [NotificationPart(text=p["text"], url=p["url"], created_at=datetime.fromisoformat(p["created_at"]),
                              count=p["count"]) for p in n.parts]
    return NotificationGroup(first_at=n.created_at, last_at=n.last_at, events=len(items), items=items)


def mark_read(session: Session, actor: Actor, notification_id: int, *, read: bool = True) -> Notification:
    """Mark one of the caller's notifications read (or unread again); NotFound for anyone else's."""
    n = session.exec(_visible(actor, select(Notification)).where(Notification.id == notification_id)).first()
    if n is None:
        raise NotFound(f"no notification {notification_id}")
    n.read_at = (n.read_at or utcnow()) if read else None
    session.add(n)
    session.commit()
    session.refresh(n)
    return n


def mark_all_read(session: Session, actor: Actor) -> int:
    """Mark every unread notification of the caller read (those it may see); returns how many."""
    mine = _visible(actor, select(Notification.id)).where(Notification.read_at.is_(None))
    done = session.execute(sa.update(Notification).where(Notification.id.in_(mine.scalar_subquery()))
                           .values(read_at=utcnow()).execution_options(synchronize_session=False)).rowcount
    session.commit()
    return done


# --- expiry ---------------------------------------------------------------------------------------


def prune(session: Session, *, keep_read_days: float, keep_unread_days: float, now: Optional[datetime] = None,
          dry_run: bool = False, actor: str = "system:prune") -> dict[str, int]:
    """Remove read entries whose latest event is older than ``keep_read_days``, and unread ones older
    than ``keep_unread_days`` (0: unread entries are kept until read). Returns how many of each; one
    audit row when any were removed. ``dry_run`` counts and removes nothing."""
    if keep_read_days <= 0:
        raise ValueError("keep_read_days must be positive")
    now = now or utcnow()
    rules = {"read": sa.and_(Notification.read_at.is_not(None),
                             Notification.last_at < now - timedelta(days=keep_read_days))}
    if keep_unread_days > 0:
        rules["unread"] = sa.and_(Notification.read_at.is_(None),
                                  Notification.last_at < now - timedelta(days=keep_unread_days))
    done = {"read": 0, "unread": 0}
    for what, cond in rules.items():
        if dry_run:
            done[what] = session.exec(select(func.count()).select_from(Notification).where(cond)).one()
        else:
            done[what] = session.execute(sa.delete(Notification).where(cond)
                                         .execution_options(synchronize_session=False)).rowcount
    if not dry_run:
        if done["read"] or done["unread"]:
            audit.record(session, actor=actor, action="notification.prune", entity="notification",
                         after={**done, "keep_read_days": keep_read_days, "keep_unread_days": keep_unread_days})
        session.commit()
    return done


def prune_with(engine: Any, settings: Any) -> dict[str, int]:
    """:func:`prune` with the server's settings, in a session of its own (the worker's hourly call)."""
    with Session(engine) as session:
        return prune(session, keep_read_days=settings.notification_keep_read_days,
                     keep_unread_days=settings.notification_keep_unread_days)


# --- follows and preferences ------------------------------------------------------------------------


def is_following(session: Session, actor: Optional[Actor], compound: Compound) -> bool:
    if actor is None or actor.user_id is None:
        return False
    return session.get(CompoundFollow, (actor.user_id, compound.id)) is not None


def set_following(*, session: Session, actor: Actor, compound: Compound, follow: bool) -> bool:
    """Follow or unfollow ``compound``; only a compound the caller may see can be followed."""
    uid = _account(actor)
    if not access.may_see_structure(actor, compound):
        raise NotFound(f"no compound {compound.code}")
    row = session.get(CompoundFollow, (uid, compound.id))
    if follow and row is None:
        session.add(CompoundFollow(user_id=uid, compound_id=compound.id))
    elif not follow and row is not None:
        session.delete(row)
    session.commit()
    return follow


def preferences(session: Session, actor: Actor) -> dict[str, Any]:
    """The caller's choices: per event whether it reaches the inbox and e-mail, and the address."""
    pref = session.get(NotificationPreference, _account(actor))
    muted = set(pref.muted or []) if pref else set()
    mailed = set(pref.email_events or []) if pref else set()
    return {"email": pref.email if pref else "",
            "events": [{"event": e, "label": label, "inbox": e not in muted, "email": e in mailed}
                       for e, label in EVENTS.items()]}


def set_preferences(*, session: Session, actor: Actor, inbox_events: Iterable[str], email_events: Iterable[str],
                    email: str) -> dict[str, Any]:
    """Store the caller's choices: the events wanted in the inbox and by e-mail, and the address."""
    uid = _account(actor)
    wanted, mailed = set(inbox_events), set(email_events)
    unknown = sorted((wanted | mailed) - set(EVENTS))
    if unknown:
        raise InputError(f"unknown event {unknown[0]!r}; use one of {', '.join(EVENTS)}", field="events")
    address = (email or "").strip()
    if address and (len(address) > 254 or "@" not in address or any(c.isspace() for c in address)):
        raise InputError("give an e-mail address such as name@example.org, or leave it empty", field="email")
    if mailed and not address:
        raise InputError("give an e-mail address for the events chosen for e-mail", field="email")
    pref = session.get(NotificationPreference, uid) or NotificationPreference(user_id=uid)
    # e-mail of an event implies it is wanted at all: it still lands in the inbox
    pref.muted = [e for e in EVENTS if e not in wanted and e not in mailed]
    pref.email_events = [e for e in EVENTS if e in mailed]
    pref.email, pref.updated_at = address, utcnow()
    session.add(pref)
    session.commit()
    return preferences(session, actor)
