"""Migration 0006 renames the top verdict code in stored rows, and its downgrade puts it back.

Checked on a populated database on both back ends (the ``db_url`` fixture): compounds whose
computed verdict, override or stored verdict document carry the old code, audit snapshots that
recorded it, and rows that must not change (other codes, free text that merely mentions it).
"""

from __future__ import annotations

from datetime import datetime, timezone

import sqlalchemy as sa
from alembic import command
from alembic.script import ScriptDirectory

from server.db import alembic_config
from server.verdict_codes import LABELS

OLD, NEW = "proven_ferroelectric", "polar_switching_supported"
OLD_LABEL = "Ferroelectric: a polar phase that switches"
NOW = datetime(2026, 3, 1, 12, 0, tzinfo=timezone.utc)

compound = sa.table(
    "compound", *(sa.column(n) for n in (
        "id", "number", "code", "label", "smiles", "inchi", "inchikey", "formula", "mw", "exact_mass",
        "heavy_atoms", "side_chain_summary", "notes", "embargoed", "archived", "created_at",
        "updated_at", "created_by", "verdict_code", "override_code", "override_reason", "override_by")),
    sa.column("side_chains", sa.JSON), sa.column("verdict", sa.JSON))
auditevent = sa.table("auditevent", *(sa.column(n) for n in ("id", "at", "actor", "action", "entity", "entity_code",
                                                              "compound_id")),
                      sa.column("before", sa.JSON), sa.column("after", sa.JSON))


def _compound(i: int, verdict_code: str, override: str | None, document: dict | None, notes: str = "") -> dict:
    return {"id": i, "number": i, "code": f"TST-{i:04d}", "label": f"test {i}", "smiles": "C" * i, "inchi": f"x{i}",
            "inchikey": f"K{i:026d}", "formula": f"C{i}", "mw": 12.0 * i, "exact_mass": 12.0 * i, "heavy_atoms": i,
            "side_chain_summary": "", "notes": notes, "embargoed": False, "archived": False, "created_at": NOW,
            "updated_at": NOW, "created_by": "test", "verdict_code": verdict_code, "override_code": override,
            "override_reason": "reviewed" if override else "", "override_by": "admin" if override else "",
            "side_chains": [], "verdict": document}


def _document(code: str, label: str) -> dict:
    return {"code": code, "label": label, "reason": "Polar structure and switching in the same phase.",
            "used": [{"measurement_id": 1, "kind": "pund", "role": "switching", "temperature_K": 300.0}],
            "version": "verdict/1.0"}


def _state(engine) -> tuple[list, list]:
    with engine.connect() as conn:
        c = conn.execute(sa.select(compound.c.id, compound.c.verdict_code, compound.c.override_code,
                                   compound.c.verdict, compound.c.notes).order_by(compound.c.id)).all()
        a = conn.execute(sa.select(auditevent.c.id, auditevent.c.before, auditevent.c.after)
                         .order_by(auditevent.c.id)).all()
    return [tuple(r) for r in c], [tuple(r) for r in a]


def test_0006_rewrites_stored_codes_and_downgrade_restores_them(db_url):
    cfg = alembic_config(db_url)
    parent = ScriptDirectory.from_config(cfg).get_revision("0006").down_revision
    engine = sa.create_engine(db_url)
    try:
        command.downgrade(cfg, parent)
        free_text = f"old notes mention {OLD} in prose"
        with engine.begin() as conn:
            conn.execute(compound.insert(), [
                _compound(1, OLD, None, _document(OLD, OLD_LABEL)),
                _compound(2, "switching_phase_unknown", OLD, _document("switching_phase_unknown", "x")),
                _compound(3, "nonpolar", None, None, notes=free_text),
            ])
            conn.execute(auditevent.insert(), [
                {"id": 1, "at": NOW, "actor": "user:admin", "action": "verdict.override", "entity": "compound",
                 "entity_code": "TST-0002", "compound_id": 2, "before": {"override_code": None, "override_reason": ""},
                 "after": {"override_code": OLD, "override_reason": f"seen {OLD} by SHG"}},
                {"id": 2, "at": NOW, "actor": "user:admin", "action": "compound.update", "entity": "compound",
                 "entity_code": "TST-0003", "compound_id": 3, "before": {"notes": ""}, "after": {"notes": "x"}},
            ])
        before = _state(engine)

        command.upgrade(cfg, "0006")
        rows, audits = _state(engine)
        assert rows[0][1] == NEW and rows[0][3]["code"] == NEW and rows[0][3]["label"] == LABELS[NEW]
        assert rows[0][3]["reason"] == before[0][0][3]["reason"]  # free text is left as written
        assert rows[1][1] == "switching_phase_unknown" and rows[1][2] == NEW
        assert rows[2] == before[0][2]  # nothing to rewrite, nothing changed
        assert audits[0][2] == {"override_code": NEW, "override_reason": f"seen {OLD} by SHG"}
        assert audits[1] == before[1][1]
        with engine.connect() as conn:
            assert conn.execute(sa.select(sa.func.count()).select_from(compound).where(
                (compound.c.verdict_code == OLD) | (compound.c.override_code == OLD))).scalar() == 0

        command.downgrade(cfg, parent)
        assert _state(engine) == before
    finally:
        with engine.begin() as conn:
            conn.execute(auditevent.delete())
            conn.execute(compound.delete())
        engine.dispose()
        command.upgrade(cfg, "head")
