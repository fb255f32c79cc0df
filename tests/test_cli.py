"""The remanence command, run in-process against a fresh database (SQLite and PostgreSQL)."""

from __future__ import annotations

import io

import pytest
from sqlmodel import Session, select

from server.analysis import hysteresis
from server.cli import main
from server.db import make_engine
from server.models import ApiToken, User
from server.security import hash_token, verify_password
from tests.web.test_apparent_loops import pellet  # noqa: F401 - the fixture: one pellet, a leaky loop PUND contradicts


@pytest.fixture
def env(monkeypatch, settings):
    monkeypatch.setenv("REMANENCE_DATABASE_URL", settings.database_url)
    monkeypatch.setenv("REMANENCE_DATA_DIR", str(settings.data_dir))
    return settings


def test_init_user_and_token(env, monkeypatch, capsys):
    assert main(["init"]) == 0
    monkeypatch.setattr("sys.stdin", io.StringIO("a-long-password\n"))
    assert main(["user", "add", "lena", "--role", "admin", "--password-stdin"]) == 0
    assert main(["token", "create", "--name", "dsc-pc", "--scope", "upload", "--kinds", "dsc"]) == 0
    out = capsys.readouterr().out.strip().splitlines()
    secret = out[-1]
    assert secret.startswith("rmn_") and " " not in secret
    engine = make_engine(env.database_url)
    with Session(engine) as s:
        user = s.exec(select(User).where(User.username == "lena")).one()
        assert user.role == "admin" and verify_password(user.password_hash, "a-long-password")
        assert "a-long-password" not in user.password_hash
        assert user.display_name is None  # none given: the login name stands in
        token = s.exec(select(ApiToken)).one()
        assert token.token_hash == hash_token(secret) and secret not in token.token_hash
        assert (token.scope, token.kinds) == ("upload", ["dsc"])
    assert main(["token", "revoke", str(token.id)]) == 0
    with Session(engine) as s:
        assert s.get(ApiToken, token.id).revoked_at is not None
    engine.dispose()


def test_user_add_with_a_display_name(env, monkeypatch, capsys):
    assert main(["init"]) == 0
    monkeypatch.setattr("sys.stdin", io.StringIO("a-long-password\n"))
    assert main(["user", "add", "aex", "--display-name", "Dr. A. Example", "--password-stdin"]) == 0
    monkeypatch.setattr("sys.stdin", io.StringIO("a-long-password\n"))
    assert main(["user", "add", "too-long", "--display-name", "x" * 121, "--password-stdin"]) == 2
    assert "display names are at most 120" in capsys.readouterr().err
    engine = make_engine(env.database_url)
    with Session(engine) as s:
        assert [(u.username, u.display_name) for u in s.exec(select(User)).all()] == [("aex", "Dr. A. Example")]
    engine.dispose()


def test_bad_cli_input_is_refused(env, monkeypatch, capsys):
    monkeypatch.setattr("sys.stdin", io.StringIO("short\n"))
    assert main(["user", "add", "kim", "--password-stdin"]) == 2
    assert "at least 8" in capsys.readouterr().err
    assert main(["token", "create", "--name", "x", "--scope", "read", "--kinds", "dsc"]) == 2
    assert main(["token", "create", "--name", "x", "--scope", "upload", "--embargoed"]) == 2


def test_read_token_embargo_grant(env, capsys):
    """``--embargoed`` lets a read token see embargoed compounds (server/access.py); default: it may not."""
    assert main(["init"]) == 0
    assert main(["token", "create", "--name", "plain", "--scope", "read"]) == 0
    assert main(["token", "create", "--name", "nmr", "--scope", "read", "--embargoed"]) == 0
    assert "sees embargoed compounds" in capsys.readouterr().out
    engine = make_engine(env.database_url)
    with Session(engine) as s:
        grants = {t.name: t.sees_embargoed for t in s.exec(select(ApiToken)).all()}
    engine.dispose()
    assert grants == {"plain": False, "nmr": True}


def test_reanalyze_command(env, client, session, capsys):
    from tests.api.test_measurements import loop_bytes
    from tests.factories import bearer, make_token

    h = bearer(make_token(session, scope="write"))
    client.post("/api/v1/compounds", json={"smiles": "CCO"}, headers=h)
    client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=h)
    mid = client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "pe_loop"},
                      files={"file": ("l.csv", loop_bytes())}, headers=h).json()["id"]
    m = session.get(__import__("server.models", fromlist=["Measurement"]).Measurement, mid)
    m.analysis_version = "hysteresis/0.1"
    session.add(m)
    session.commit()
    assert main(["reanalyze", "--kind", "pe_loop"]) == 0
    out = capsys.readouterr().out
    assert f"measurement {mid} (pe_loop) hysteresis/0.1 -> {hysteresis.VERSION}" in out and "1 measurement(s) changed" in out


def test_rematch_scaffolds_command_dry_run_then_apply(env, client, session, capsys):
    from server.chem.scaffold import PARENT_BOWLS, build_from_scaffold
    from server.models import Compound
    from tests.factories import bearer, make_token

    h = bearer(make_token(session, scope="write"))
    code = client.post("/api/v1/compounds", json={"smiles": build_from_scaffold(PARENT_BOWLS["Se"], "alkoxy", 4)},
                       headers=h).json()["code"]
    assert client.post("/api/v1/scaffolds", json={"code": "TB-SE", "name": "Se bowl", "smiles": PARENT_BOWLS["Se"]},
                       headers=h).status_code == 201
    assert main(["rematch-scaffolds", "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert f"{code}: scaffold none -> TB-SE (built on TB-SE" in out and "1 compound(s) would be filed" in out
    session.expire_all()
    assert session.exec(select(Compound)).one().scaffold_id is None
    assert main(["rematch-scaffolds"]) == 0
    assert "1 compound(s) filed under a scaffold" in capsys.readouterr().out
    assert client.get(f"/api/v1/compounds/{code}", headers=h).json()["scaffold"] == "TB-SE"
    assert main(["rematch-scaffolds"]) == 0 and "0 compound(s) filed" in capsys.readouterr().out


def test_init_rebuilds_stale_largest_pr_once(env, client, session, pellet, capsys):
    """A "largest Pr" stored before apparent loops were left out (issue 22 item 2): the leaky loop's
    Pr, which PUND on the same pellet contradicts, sits in CompoundStats from an older rule. ``init``
    rebuilds it once to the good loop's value; a second ``init`` rebuilds nothing."""
    from server.models import Compound, CompoundStats, SiteSetting
    from server.services import stats

    code, good, leaky, _pund, _lossy = pellet
    cid = session.exec(select(Compound).where(Compound.code == code)).one().id
    row = session.get(CompoundStats, cid)
    row.pr_max_uC_cm2, row.pr_max_t_K, row.pr_max_measurement_id = leaky["results"]["pr_uC_cm2"], 320.0, leaky["id"]
    session.add(row)
    old = session.get(SiteSetting, stats.RULE_KEY)
    if old is not None:
        session.delete(old)  # a database from before the rule was recorded
    session.commit()
    assert leaky["results"]["pr_uC_cm2"] > good["results"]["pr_uC_cm2"]
    assert main(["init"]) == 0
    assert f"rebuilt the figures of 1 compound(s) under {stats.RULE}" in capsys.readouterr().out
    session.expire_all()
    row = session.get(CompoundStats, cid)
    assert (row.pr_max_measurement_id, row.pr_max_t_K) == (good["id"], 300)
    assert row.pr_max_uC_cm2 == pytest.approx(good["results"]["pr_uC_cm2"])
    assert stats.stored_rule(session) == stats.RULE
    # idempotent: the rows follow the rule now, so nothing is rebuilt, even a value changed by hand
    row.pr_max_uC_cm2 = 99.0
    session.add(row)
    session.commit()
    assert main(["init"]) == 0 and "rebuilt" not in capsys.readouterr().out
    session.expire_all()
    assert session.get(CompoundStats, cid).pr_max_uC_cm2 == 99.0
    # the explicit command rebuilds whatever the record says
    assert main(["rebuild-stats"]) == 0 and "rebuilt the figures of 1 compound(s)" in capsys.readouterr().out
    session.expire_all()
    assert session.get(CompoundStats, cid).pr_max_uC_cm2 == pytest.approx(good["results"]["pr_uC_cm2"])
