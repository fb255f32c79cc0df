"""Notification e-mail through a local SMTP server that the test starts (aiosmtpd on 127.0.0.1), never an
outside one: what reaches whom, and that a dead SMTP server neither blocks nor fails the request."""

from __future__ import annotations

import dataclasses
import logging
import socket
from email import message_from_bytes

import pytest
from aiosmtpd.controller import Controller
from fastapi.testclient import TestClient

from server import mail
from server.app import create_app
from tests.factories import make_user
from tests.notifications.test_notifications import SMILES, Person


class Sink:
    """Keeps every message the local server receives."""

    def __init__(self) -> None:
        self.received: list = []

    async def handle_DATA(self, server, session, envelope):  # noqa: ANN001, N802 - aiosmtpd's hook name
        self.received.append((envelope.rcpt_tos, message_from_bytes(envelope.content)))
        return "250 OK"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def smtp():
    sink, port = Sink(), _free_port()
    controller = Controller(sink, hostname="127.0.0.1", port=port)
    controller.start()
    yield sink, port
    controller.stop()


def _app(settings, port: int):
    return create_app(dataclasses.replace(settings, smtp_host="127.0.0.1", smtp_port=port,
                                          smtp_from="registry@lab.example", public_url="https://registry.lab.example"))


def test_mail_goes_to_those_who_chose_it_through_the_local_server(settings, smtp, session):
    sink, port = smtp
    app = _app(settings, port)
    with TestClient(app) as ca, TestClient(app) as cb:
        alice, bob = Person(ca, session, "alice"), Person(cb, session, "bob")
        make_user(session, name="carol")  # mentioned too, but chose no e-mail
        r = bob.client.put("/api/v1/notifications/preferences", headers=bob.h, json={
            "email": "bob@lab.example", "events": [{"event": "mention", "inbox": True, "email": True},
                                                   {"event": "verdict", "inbox": True, "email": False}]})
        assert r.status_code == 200, r.text
        code = alice.post("/api/v1/compounds", json={"smiles": SMILES}).json()["code"]
        assert alice.post(f"/api/v1/compounds/{code}/comments", json={"body": "@bob @carol pellet cracked"}
                          ).status_code == 201
        assert mail.mailer_for(app.state.engine).wait_sent(10)
        assert len(sink.received) == 1
        to, msg = sink.received[0]
        assert to == ["bob@lab.example"] and msg["From"] == "registry@lab.example"
        assert "alice mentioned you" in msg["Subject"]
        assert f"https://registry.lab.example/compounds/{code}#comments" in msg.get_payload()
        # the inbox has it too, e-mail or not
        assert [i["event"] for i in bob.inbox()["items"]] == ["mention"]
    app.state.engine.dispose()


def test_a_dead_smtp_server_neither_blocks_nor_fails_the_request(settings, session, caplog):
    app = _app(settings, _free_port())  # nothing listens there
    with TestClient(app) as ca, TestClient(app) as cb:
        alice, bob = Person(ca, session, "alice"), Person(cb, session, "bob")
        bob.client.put("/api/v1/notifications/preferences", headers=bob.h, json={
            "email": "bob@lab.example", "events": [{"event": "mention", "inbox": True, "email": True}]})
        code = alice.post("/api/v1/compounds", json={"smiles": SMILES}).json()["code"]
        with caplog.at_level(logging.WARNING, logger="remanence.mail"):
            r = alice.post(f"/api/v1/compounds/{code}/comments", json={"body": "@bob look"})
            assert r.status_code == 201, r.text
            assert mail.mailer_for(app.state.engine).wait_sent(15)
        assert any("bob@lab.example" in rec.getMessage() and "not sent" in rec.getMessage() for rec in caplog.records)
        assert [i["event"] for i in bob.inbox()["items"]] == ["mention"]
    app.state.engine.dispose()


def test_mail_is_off_without_an_smtp_host(app):
    assert mail.mailer_for(app.state.engine) is None
