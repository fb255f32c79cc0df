"""Notification e-mail follows the inbox's groups, through a local SMTP server the test starts (aiosmtpd
on 127.0.0.1, never an outside one), on SQLite and PostgreSQL: one letter per group once its window has
closed, listing each event; a group still open is not mailed; no entry is mailed twice, however many
processes look at once; and the group window is a validated setting."""

from __future__ import annotations

import dataclasses
import re
import threading
from datetime import datetime, timedelta, timezone
from types import SimpleNamespace

import pytest
from sqlmodel import Session, select

from server import mail
from server.db import make_engine
from server.jobs.worker import Worker
from server.models import CompoundCreate, Notification, NotificationPreference
from server.services import notifications, registry
from server.settings import Settings
from tests.factories import make_user
from tests.notifications.test_mail import _app, smtp  # noqa: F401 - the local SMTP server fixture

@pytest.fixture
def mailing(settings, smtp):  # noqa: F811 - the fixture imported above
    sink, port = smtp
    app = _app(settings, port)
    with Session(app.state.engine) as session:
        yield SimpleNamespace(app=app, engine=app.state.engine, sink=sink, session=session,
                              mailer=mail.mailer_for(app.state.engine))
    app.state.engine.dispose()


def _reader(m: SimpleNamespace, name: str = "alice", events=("measurement", "mention")):
    user = make_user(m.session, name=name)
    m.session.add(NotificationPreference(user_id=user.id, email=f"{name}@lab.example", email_events=list(events)))
    m.session.commit()
    return user


def _compound(m: SimpleNamespace, settings, owner: str = "alice"):
    return registry.register_compound(session=m.session, settings=settings, actor=f"user:{owner}",
                                      data=CompoundCreate(smiles="c1ccc2ccccc2c1"))


def _upload(m: SimpleNamespace, compound, measurement_id: int, kind: str = "pe_loop") -> None:
    notifications.measurements_stored(m.session, compound, [SimpleNamespace(kind=kind, id=measurement_id)],
                                      actor="user:bob")
    m.session.commit()
    assert m.mailer.wait_sent(10)


def _tick(m: SimpleNamespace) -> None:
    """One worker's look between jobs (what every worker does every MAIL_CHECK_S)."""
    worker = Worker(m.engine, name="test-worker", handlers={"noop": lambda *a: {}}, mail_check_s=3600)
    assert worker.run_once() is False  # no job queued: the tick only poked the mailer
    assert m.mailer.wait_sent(10)


def test_a_burst_is_one_letter_sent_when_its_window_closes(mailing, settings, clock):
    m = mailing
    alice = _reader(m)
    c = _compound(m, settings)
    for i in range(3):  # clock readings: each event, then each commit's look for due letters
        _upload(m, c, 300 + i, kind=("pe_loop", "pund", "permittivity")[i])
    assert m.sink.received == []  # the group is open: nothing is mailed after any of its events
    [n] = m.session.exec(select(Notification).where(Notification.user_id == alice.id)).all()
    assert n.count == 3 and n.mail_due_at == n.created_at + timedelta(minutes=30) and n.mailed_at is None
    _tick(m)
    assert m.sink.received == []  # still inside the window: a tick sends nothing either
    clock["now"] = n.created_at + timedelta(minutes=30)  # the next reading is 40 s past the window's end
    _tick(m)
    [(to, msg)] = m.sink.received
    assert to == ["alice@lab.example"] and msg["From"] == "registry@lab.example"
    assert msg["Subject"] == f"[Remanence] 3 measurements on {c.code} between 14:02 and 14:05 UTC"
    body = msg.get_payload()
    for i, kind in enumerate(("pe_loop", "pund", "permittivity")):  # each event, with its time and link
        assert f"bob added a {kind} measurement to {c.code}" in body
        assert f"https://registry.lab.example/measurements/{300 + i}" in body
    assert re.findall(r"^- 2026-12-03 14:0\d UTC ", body, flags=re.M).__len__() == 3
    # a second look sends nothing more: the group was claimed once
    _tick(m)
    assert len(m.sink.received) == 1
    # the next event starts a new group, mailed only when its own window closes
    _upload(m, c, 310)
    items = m.session.exec(select(Notification).where(Notification.user_id == alice.id)
                           .order_by(Notification.id)).all()
    assert [x.count for x in items] == [3, 1] and items[1].mailed_at is None
    assert len(m.sink.received) == 1


def test_a_mention_is_mailed_at_once_and_a_reader_who_turned_mail_off_gets_none(mailing, settings, clock):
    m = mailing
    alice, carol = _reader(m), _reader(m, "carol")
    c = _compound(m, settings)
    notifications.mentioned(m.session, names=["alice"], compound=c, where=f"compound {c.code}",
                            url=f"/compounds/{c.code}#comments", body="the pellet cracked", actor="user:bob")
    m.session.commit()
    assert m.mailer.wait_sent(10)
    [(to, msg)] = m.sink.received  # a mention never groups: its letter goes with the commit
    assert to == ["alice@lab.example"] and "bob mentioned you" in msg["Subject"]
    # carol follows the compound, then turns e-mail off while its group is open
    notifications.set_following(session=m.session, actor=_actor(m, carol), compound=c, follow=True)
    _upload(m, c, 320)
    pref = m.session.get(NotificationPreference, carol.id)
    pref.email_events = []
    m.session.add(pref)
    m.session.commit()
    clock["now"] += timedelta(hours=1)
    _tick(m)
    assert [to for to, _ in m.sink.received] == [["alice@lab.example"], ["alice@lab.example"]]
    n = m.session.exec(select(Notification).where(Notification.user_id == carol.id)).one()
    assert n.mailed_at is not None  # claimed, and left unsent: the choice made before sending counts


def _actor(m: SimpleNamespace, user):
    from server import access

    return access.account_actor(user)


def test_a_claimed_group_is_never_joined_again(mailing, settings, clock):
    """Hosts whose clocks differ, or a window changed between processes: once one process has claimed a
    group's letter, a later like event starts a new entry rather than joining one already mailed."""
    m = mailing
    alice = _reader(m)
    c = _compound(m, settings)
    _upload(m, c, 330)
    [n] = m.session.exec(select(Notification).where(Notification.user_id == alice.id)).all()
    letters = notifications.due_letters(m.engine, m.mailer, now=n.mail_due_at)
    assert len(letters) == 1
    _upload(m, c, 331)  # 40 s after the first event: inside the window, but the group was claimed
    m.session.expire_all()
    items = m.session.exec(select(Notification).where(Notification.user_id == alice.id)
                           .order_by(Notification.id)).all()
    assert [(x.count, x.mailed_at is None) for x in items] == [(1, False), (1, True)]


def test_several_processes_claim_each_due_entry_once(mailing, settings):
    """Four engines (four processes' pools) look for due letters at once: each entry goes exactly once."""
    m = mailing
    readers = [_reader(m, f"reader{i}") for i in range(3)]
    c = _compound(m, settings, owner="reader0")
    due = datetime.now(timezone.utc) - timedelta(minutes=1)
    for k in range(30):
        u = readers[k % 3]
        m.session.add(Notification(user_id=u.id, event="measurement", compound_id=c.id, text=f"entry {k:02d}",
                                   url=f"/measurements/{k}", created_at=due, last_at=due, mail_due_at=due))
    m.session.commit()
    engines = [make_engine(settings.database_url) for _ in range(4)]
    got: list[list] = [[] for _ in engines]
    start = threading.Barrier(len(engines))

    def look(i: int) -> None:
        start.wait()
        while True:
            letters = notifications.due_letters(engines[i], m.mailer, limit=4)
            if not letters:
                return
            got[i].extend(letters)

    threads = [threading.Thread(target=look, args=(i,)) for i in range(len(engines))]
    for t in threads:
        t.start()
    for t in threads:
        t.join(60)
    for e in engines:
        e.dispose()
    subjects = sorted(msg["Subject"] for share in got for msg in share)
    assert subjects == [f"[Remanence] entry {k:02d}" for k in range(30)]  # every one, none twice
    m.session.expire_all()
    assert all(n.mailed_at is not None for n in m.session.exec(select(Notification)).all())


def test_the_group_window_is_a_setting(mailing, settings, clock):
    m = mailing
    short = dataclasses.replace(settings, notification_group_minutes=2.0)
    notifications.configure(m.engine, short)
    try:
        alice = _reader(m)
        c = _compound(m, settings)
        _upload(m, c, 340)
        _upload(m, c, 341)  # 40 s later: inside two minutes, joins
        clock["step"] = timedelta(minutes=3)
        _upload(m, c, 342)  # three minutes later: outside two minutes, a new entry
        items = m.session.exec(select(Notification).where(Notification.user_id == alice.id)
                               .order_by(Notification.id)).all()
        assert [x.count for x in items] == [2, 1]
        assert [x.mail_due_at - x.created_at for x in items] == [timedelta(minutes=2)] * 2
    finally:
        notifications.configure(m.engine, settings)
    assert notifications.group_window(m.engine) == timedelta(minutes=30)


@pytest.mark.parametrize("text", ["0", "-5", "1441", "nan", "inf", "half an hour"])
def test_the_group_window_setting_refuses_what_is_not_a_bounded_positive_time(text, tmp_path):
    with pytest.raises(ValueError, match="REMANENCE_NOTIFICATION_GROUP_MINUTES"):
        Settings.from_env({"REMANENCE_NOTIFICATION_GROUP_MINUTES": text, "REMANENCE_DATA_DIR": str(tmp_path),
                           "REMANENCE_SECRET_KEY": "k"})


def test_the_group_window_setting_reads_minutes_and_guards_replace(tmp_path):
    env = {"REMANENCE_DATA_DIR": str(tmp_path), "REMANENCE_SECRET_KEY": "k"}
    assert Settings.from_env(env).notification_group_minutes == 30.0
    s = Settings.from_env({**env, "REMANENCE_NOTIFICATION_GROUP_MINUTES": "1440"})
    assert s.notification_group_minutes == 1440.0
    with pytest.raises(ValueError, match="at most 1440 minutes"):
        dataclasses.replace(s, notification_group_minutes=0.0)
