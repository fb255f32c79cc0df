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


def test_recompute_verdicts_rederives_stale_verdicts_and_a_dry_run_writes_nothing(env, client, session, capsys):
    """A verdict stored under an older rule version stays as it was decided until its evidence changes;
    ``recompute-verdicts`` re-derives it under the current rules, audited and notified as a verdict change
    (old -> new, with both rule versions); ``--dry-run`` counts the same change and writes nothing."""
    import numpy as np

    from server.analysis import verdict as rules
    from server.ingest.table import to_csv_bytes
    from server.models import AuditEvent, Compound, CompoundFollow, Notification
    from server.synth.ferro import miller_loop
    from tests.factories import bearer, make_token, make_user

    h = bearer(make_token(session, scope="write"))
    for smiles in ("COc1ccc(OCCCC)cc1OC", "COc1ccc(OCCCCCC)cc1OC"):  # invented test ethers
        assert client.post("/api/v1/compounds", json={"smiles": smiles}, headers=h).status_code == 201
    assert client.post("/api/v1/compounds/RVZ-00001/batches", json={}, headers=h).status_code == 201
    # Two saturated switching loops (Miller et al., J. Appl. Phys. 68, 6463 (1990)), 2 % noise of Ps, no PUND
    for t_K, seed in ((300, 1), (320, 2)):
        raw = to_csv_bytes(miller_loop(10, 8, 50, 300, noise_uC_cm2=0.2, rng=np.random.default_rng(seed)),
                           {"temperature": f"{t_K} K", "frequency": "100 Hz"})
        assert client.post("/api/v1/batches/RVZ-00001-B01/measurements", data={"kind": "pe_loop"},
                           files={"file": (f"l{t_K}.csv", raw)}, headers=h).status_code == 201
    fresh = client.get("/api/v1/compounds/RVZ-00001", headers=h).json()["verdict"]
    assert fresh == "loop_switching_only"  # loops switch, no PUND: the verdict table's loop-only class
    # The same compound as it would stand had its verdict been stored under an earlier rule version
    stale = {"code": "untested", "label": "No conclusive evidence yet", "reason": "decided by an older rule",
             "conflicts": [], "version": "verdict/1.0"}
    follower = make_user(session, "fol")
    compound = session.exec(select(Compound).where(Compound.code == "RVZ-00001")).one()
    session.add(CompoundFollow(user_id=follower.id, compound_id=compound.id))
    compound.verdict_code, compound.verdict = "untested", stale
    session.add(compound)
    session.commit()
    n_events = len(session.exec(select(AuditEvent)).all())

    assert main(["recompute-verdicts", "--dry-run"]) == 0
    out = capsys.readouterr().out
    assert f"RVZ-00001: untested -> loop_switching_only [verdict/1.0 -> {rules.VERSION}]" in out
    # the second compound has no evidence and was never decided: its untested verdict is stored for the first time
    assert "RVZ-00002: untested (first stored)" in out
    assert "2 verdict(s) examined: 1 would change, 1 restated with the same code and conflicts, 0 unchanged" in out
    session.expire_all()
    compound = session.exec(select(Compound).where(Compound.code == "RVZ-00001")).one()
    assert (compound.verdict_code, compound.verdict) == ("untested", stale)
    assert len(session.exec(select(AuditEvent)).all()) == n_events
    assert not session.exec(select(Notification).where(Notification.user_id == follower.id)).all()

    assert main(["recompute-verdicts"]) == 0
    assert "2 verdict(s) examined: 1 changed, 1 restated with the same code and conflicts, 0 unchanged" in \
        capsys.readouterr().out
    session.expire_all()
    compound = session.exec(select(Compound).where(Compound.code == "RVZ-00001")).one()
    assert compound.verdict_code == "loop_switching_only" and compound.verdict["version"] == rules.VERSION
    change, = session.exec(select(AuditEvent).where(AuditEvent.action == "verdict.change",
                                                    AuditEvent.id > n_events)).all()
    assert change.before["code"] == "untested" and change.before["version"] == "verdict/1.0"
    assert change.after["code"] == "loop_switching_only" and change.after["version"] == rules.VERSION
    run, = session.exec(select(AuditEvent).where(AuditEvent.action == "verdict.recompute_all")).all()
    assert run.after == {"version": rules.VERSION, "examined": 2, "changed": 1, "restated": 1}
    note, = session.exec(select(Notification).where(Notification.user_id == follower.id)).all()
    assert note.event == "verdict" and "→" in note.text
    # nothing is stale any more: a second run changes nothing
    assert main(["recompute-verdicts"]) == 0
    assert "0 changed, 0 restated with the same code and conflicts, 2 unchanged" in capsys.readouterr().out
