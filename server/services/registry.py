"""Registering compounds, scaffolds and batches."""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Optional

from rdkit import Chem
from sqlalchemy import func
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from ..chem import draw, identity, scaffold as scaffolds, sidechains
from ..errors import ChemistryError, InputError
from ..models import (
    BATCH_STATES,
    Batch,
    BatchCreate,
    BatchRead,
    Compound,
    CompoundCreate,
    CompoundRead,
    CompoundUpdate,
    Measurement,
    Scaffold,
    ScaffoldCreate,
    ScaffoldRead,
    utcnow,
)
from ..access import Actor, may_see_structure, structure_visible
from ..settings import Settings
from . import audit, codes, measurements, notifications, planning, search, stats, verdicts
from .errors import Duplicate, NotFound


@dataclass(frozen=True)
class Preview:
    """What the registration form shows while a chemist types."""

    identity: identity.Identity
    side_chains: list[sidechains.SideChain]
    summary: str
    svg: str
    existing: Optional[str]  # code of a registered compound with the same InChIKey
    scaffolds: list[scaffolds.ScaffoldMatch]  # registered scaffolds it is built on, the chosen one first
    scaffold_note: str  # which scaffold, and why (scaffolds.describe_match)


def resolve_structure(*, session: Session, data: CompoundCreate) -> str:
    """The structure text to register: the given SMILES/MOL block, or one built from a scaffold."""
    if data.smiles and data.smiles.strip():
        return data.smiles
    if data.scaffold and data.side_chain:
        sc = get_scaffold(session, data.scaffold)
        return scaffolds.build_from_scaffold(
            sc.smiles, data.side_chain.kind, data.side_chain.carbons, data.side_chain.branched_form
        )
    raise ChemistryError("give a SMILES or MOL block, or a scaffold with a side chain", field="smiles")


def scaffold_table(session: Session) -> dict[str, str]:
    """Every registered scaffold, code -> SMILES. Scaffolds are the group's cores, not compounds: no
    embargo applies to them, and matching against them reads nothing of any registered compound."""
    return dict(session.exec(select(Scaffold.code, Scaffold.smiles).order_by(Scaffold.code)).all())


def scaffold_matches(session: Session, mol: Chem.Mol) -> list[scaffolds.ScaffoldMatch]:
    """The registered scaffolds ``mol`` is built on, the one it is filed under first (largest core)."""
    return scaffolds.match_scaffolds(mol, scaffold_table(session))


def _chosen_scaffold(session: Session, mol: Chem.Mol, data: CompoundCreate) -> tuple[Optional[str], str]:
    """The scaffold a new compound is filed under and the words saying why: the one named, which
    the structure must be built on, else the largest registered scaffold it is built on."""
    if data.scaffold:
        sc = get_scaffold(session, data.scaffold)
        if data.smiles and data.smiles.strip() and scaffolds.match_scaffold(mol, sc.code, sc.smiles) is None:
            raise ChemistryError(
                f"the structure is not built on scaffold {sc.code}: its core is missing, or something is "
                "attached where the scaffold has no attachment point; leave the scaffold empty to have it "
                "matched", field="scaffold")
        return sc.code, f"scaffold {sc.code} as given"
    matches = scaffold_matches(session, mol)
    return (matches[0].code if matches else None), scaffolds.describe_match(matches)


def preview(*, session: Session, text: str, scaffold: Optional[str] = None) -> Preview:
    mol = identity.parse_structure(text)
    ident = identity.identify(mol)
    chains = sidechains.perceive_side_chains(mol)
    # Members and write tokens alone reach the preview, and they see every structure (server/access.py).
    existing = session.exec(select(Compound.code).where(Compound.inchikey == ident.inchikey)).first()
    matches = scaffold_matches(session, mol)
    note = scaffolds.describe_match(matches)
    if scaffold:
        chosen = [m for m in matches if m.code == scaffold]
        note = (f"scaffold {scaffold} as given" if chosen
                else f"not built on the chosen scaffold {scaffold}; {note}")
        matches = chosen + [m for m in matches if m.code != scaffold]
    return Preview(
        identity=ident,
        side_chains=chains,
        summary=sidechains.describe_side_chains(chains),
        svg=draw.depict_svg(mol),
        existing=existing,
        scaffolds=matches,
        scaffold_note=note,
    )


def format_code(settings: Settings, number: int) -> str:
    return f"{settings.code_prefix}-{number:0{settings.code_digits}d}"


def register_compound(*, session: Session, settings: Settings, data: CompoundCreate, actor: str) -> Compound:
    """Parse, identify and store a new compound; refuse a molecule that is registered already."""
    text = resolve_structure(session=session, data=data)
    mol = identity.parse_structure(text)
    ident = identity.identify(mol)
    existing = session.exec(select(Compound).where(Compound.inchikey == ident.inchikey)).first()
    if existing is not None:
        raise Duplicate(f"this molecule is registered already as {existing.code}", existing=existing.code)
    scaffold_code, scaffold_note = _chosen_scaffold(session, mol, data)
    scaffold_id = get_scaffold(session, scaffold_code).id if scaffold_code else None
    chains = sidechains.perceive_side_chains(mol)
    number = codes.allocate(session, codes.COMPOUND_SERIES)
    compound = Compound(
        number=number,
        code=format_code(settings, number),
        label=data.label.strip(),
        smiles=ident.smiles,
        inchi=ident.inchi,
        inchikey=ident.inchikey,
        formula=ident.formula,
        mw=ident.mw,
        exact_mass=ident.exact_mass,
        heavy_atoms=ident.heavy_atoms,
        side_chains=[c.to_dict() for c in chains],
        side_chain_summary=sidechains.describe_side_chains(chains),
        scaffold_id=scaffold_id,
        notes=data.notes,
        embargoed=data.embargoed,
        created_by=actor,
    )
    if data.state is not None:  # a target: its plan is checked before anything is stored
        planning.check_new_state(data.state)
    session.add(compound)
    try:
        session.flush()
    except IntegrityError:
        # Another request registered the same molecule meanwhile; the rollback returns the number too.
        session.rollback()
        dup = session.exec(select(Compound).where(Compound.inchikey == ident.inchikey)).first()
        if dup is not None:
            raise Duplicate(f"this molecule is registered already as {dup.code}", existing=dup.code) from None
        raise
    search.index_compound(session, compound)
    plan = None
    if data.state is not None:
        plan = planning.new_plan(compound, state=data.state, rationale=data.rationale, priority=data.priority,
                                 assignee=data.assignee, actor=actor)
        session.add(plan)
        notifications.assigned(session, compound, before="", after=plan.assignee, actor=actor)
        planning.queue_estimate_of_target(session, compound, actor=actor)
    audit.record(
        session, actor=actor, action="compound.create", entity="compound", code=compound.code,
        compound_id=compound.id, after={**audit.snapshot(compound), "scaffold_match": scaffold_note,
                                        **({"plan": audit.snapshot(plan)} if plan else {})},
    )
    stats.refresh(session, compound)
    session.commit()
    session.refresh(compound)
    return compound


@dataclass(frozen=True)
class ScaffoldChange:
    """What re-matching does to one compound: its scaffold before and after, and why."""

    code: str
    before: Optional[str]
    after: Optional[str]
    note: str


def rematch_scaffolds(*, session: Session, apply: bool, actor: str) -> list[ScaffoldChange]:
    """File every compound without a scaffold under the largest registered scaffold it is built on
    (``scaffolds.match_scaffolds``); compounds already filed are left alone. With ``apply`` False
    (a dry run) nothing is written; else each change is audited and everything commits once."""
    table = scaffold_table(session)
    ids = {code: sid for sid, code in session.exec(select(Scaffold.id, Scaffold.code)).all()}
    changes = []
    for compound in session.exec(select(Compound).where(Compound.scaffold_id.is_(None))
                                 .order_by(Compound.number)).all():
        matches = scaffolds.match_scaffolds(Chem.MolFromSmiles(compound.smiles), table)
        if not matches:
            continue
        note = scaffolds.describe_match(matches)
        changes.append(ScaffoldChange(compound.code, None, matches[0].code, note))
        if apply:
            before = audit.snapshot(compound)
            compound.scaffold_id = ids[matches[0].code]
            compound.updated_at = utcnow()
            session.add(compound)
            audit.record(session, actor=actor, action="compound.update", entity="compound", code=compound.code,
                         compound_id=compound.id, before=before,
                         after={**audit.snapshot(compound), "scaffold_match": note})
            stats.refresh(session, compound)
    if apply and changes:
        session.commit()
    return changes


def get_compound(session: Session, code: str) -> Compound:
    compound = session.exec(select(Compound).where(Compound.code == code)).first()
    if compound is None:
        raise NotFound(f"no compound {code}")
    return compound


def get_scaffold(session: Session, code: str) -> Scaffold:
    sc = session.exec(select(Scaffold).where(Scaffold.code == code)).first()
    if sc is None:
        raise InputError(f"no scaffold {code!r}", field="scaffold")
    return sc


def update_compound(*, session: Session, compound: Compound, data: CompoundUpdate, actor: str) -> Compound:
    before = audit.snapshot(compound)
    old_plan = planning.plan_of(session, compound)
    if old_plan is not None:
        before["plan"] = audit.snapshot(old_plan)
    changes = data.model_dump(exclude_unset=True)
    plan = planning.apply_changes(session, compound, changes, actor=actor)
    if "scaffold" in changes:
        code = changes.pop("scaffold")
        compound.scaffold_id = get_scaffold(session, code).id if code else None
    for key, value in changes.items():
        if value is not None:
            setattr(compound, key, value.strip() if isinstance(value, str) else value)
    compound.updated_at = utcnow()
    session.add(compound)
    after = audit.snapshot(compound)
    if plan is not None:
        after["plan"] = audit.snapshot(plan)
    audit.record(session, actor=actor, action="compound.update", entity="compound", code=compound.code,
                 compound_id=compound.id, before=before, after=after)
    stats.refresh(session, compound)
    session.commit()
    session.refresh(compound)
    return compound


def set_compound_archived(*, session: Session, compound: Compound, archived: bool, actor: str) -> Compound:
    before = audit.snapshot(compound)
    compound.archived = archived
    compound.updated_at = utcnow()
    session.add(compound)
    audit.record(session, actor=actor, action="compound.archive" if archived else "compound.restore",
                 entity="compound", code=compound.code, compound_id=compound.id, before=before,
                 after=audit.snapshot(compound))
    # its measurements stop (or start again) counting: derived rows, verdict and stats follow
    measurements.refresh_batches(session, compound, [b.id for b in batches_of(session, compound)], actor=actor)
    session.commit()
    session.refresh(compound)
    return compound


def add_batch(*, session: Session, compound: Compound, data: BatchCreate, actor: str) -> Batch:
    if data.state not in BATCH_STATES:
        raise InputError(f"state must be one of {', '.join(BATCH_STATES)}", field="state")
    seq = codes.allocate(session, codes.batch_series(compound.code))
    batch = Batch(
        code=f"{compound.code}-B{seq:02d}",
        compound_id=compound.id,
        seq=seq,
        made_on=data.made_on,
        chemist=data.chemist.strip(),
        scale_mg=data.scale_mg,
        yield_pct=data.yield_pct,
        purity_pct=data.purity_pct,
        state=data.state,
        notes=data.notes,
        created_by=actor,
    )
    session.add(batch)
    session.flush()
    audit.record(session, actor=actor, action="batch.create", entity="batch", code=batch.code,
                 compound_id=compound.id, after=audit.snapshot(batch))
    stats.refresh(session, compound)
    session.commit()
    session.refresh(batch)
    return batch


def compound_of(session: Session, batch: Batch) -> Compound:
    """The compound a batch was made of."""
    return session.get(Compound, batch.compound_id)


def list_scaffolds(session: Session) -> list[Scaffold]:
    """Every scaffold, by code (the choices of the registration and edit forms)."""
    return list(session.exec(select(Scaffold).order_by(Scaffold.code)).all())


def get_batch(session: Session, code: str) -> Batch:
    batch = session.exec(select(Batch).where(Batch.code == code)).first()
    if batch is None:
        raise NotFound(f"no batch {code}")
    return batch


def create_scaffold(*, session: Session, data: ScaffoldCreate, actor: str) -> Scaffold:
    info = scaffolds.validate_scaffold(data.smiles)
    code = data.code.strip()
    if session.exec(select(Scaffold).where(Scaffold.code == code)).first():
        raise Duplicate(f"scaffold {code} exists already", existing=code)
    sc = Scaffold(
        code=code,
        name=data.name.strip(),
        smiles=info.smiles,
        bridge=info.bridge or "",
        attachment_points=info.attachment_points,
        core_formula=info.core_formula,
        notes=data.notes,
    )
    session.add(sc)
    session.flush()
    audit.record(session, actor=actor, action="scaffold.create", entity="scaffold", code=sc.code, after=audit.snapshot(sc))
    session.commit()
    session.refresh(sc)
    return sc


# --- reading -----------------------------------------------------------------------------------


def compound_read(session: Session, compound: Compound, *, actor: Optional[Actor]) -> CompoundRead:
    """The API shape of a compound, as ``actor`` may see it (``server/access.py``): for an embargoed
    compound and a caller who may not see it, structure, label and notes are withheld."""
    hide = not may_see_structure(actor, compound)
    scaffold_code = session.get(Scaffold, compound.scaffold_id).code if compound.scaffold_id else None
    n_batches = session.exec(select(func.count()).select_from(Batch).where(Batch.compound_id == compound.id)).one()
    plan = planning.plan_of(session, compound)
    return CompoundRead(
        code=compound.code,
        label="" if hide else compound.label,
        smiles=None if hide else compound.smiles,
        inchi=None if hide else compound.inchi,
        inchikey=None if hide else compound.inchikey,
        formula=None if hide else compound.formula,
        mw=None if hide else compound.mw,
        exact_mass=None if hide else compound.exact_mass,
        side_chains=[] if hide else compound.side_chains,
        side_chain_summary="" if hide else compound.side_chain_summary,
        scaffold=None if hide else scaffold_code,
        notes="" if hide else compound.notes,
        embargoed=compound.embargoed,
        archived=compound.archived,
        batches=n_batches,
        created_at=compound.created_at,
        created_by=compound.created_by,
        verdict=verdicts.effective_code(compound),
        verdict_evidence=verdicts.verdict_read(compound, withheld=hide),
        state=planning.state_of(session, compound),
        rationale="" if hide or plan is None else plan.rationale,
        priority=plan.priority if plan else None,
        assignee=plan.assignee if plan else "",
        state_reason="" if hide or plan is None else plan.reason,
    )


def batch_read(session: Session, batch: Batch) -> BatchRead:
    compound = session.get(Compound, batch.compound_id)
    n = session.exec(select(func.count()).select_from(Measurement).where(Measurement.batch_id == batch.id)).one()
    return BatchRead(**batch.model_dump(exclude={"id", "compound_id", "created_by"}), compound=compound.code, measurements=n)


def scaffold_read(session: Session, sc: Scaffold, *, actor: Optional[Actor] = None) -> ScaffoldRead:
    """A scaffold; its compound count leaves out the embargoed compounds ``actor`` may not see (which
    scaffold an embargoed compound is built on is part of its structure)."""
    n = session.exec(select(func.count()).select_from(Compound).where(
        Compound.scaffold_id == sc.id, structure_visible(actor))).one()
    return ScaffoldRead(**sc.model_dump(exclude={"id", "created_at"}), compounds=n)


def list_compounds(
    session: Session, *, limit: int = 50, offset: int = 0, include_archived: bool = False
) -> tuple[list[Compound], int]:
    query = select(Compound)
    count = select(func.count()).select_from(Compound)
    if not include_archived:
        query = query.where(Compound.archived == False)  # noqa: E712 - SQL expression
        count = count.where(Compound.archived == False)  # noqa: E712
    rows = session.exec(query.order_by(Compound.number.desc()).offset(offset).limit(limit)).all()
    return list(rows), session.exec(count).one()


@lru_cache(maxsize=4096)
def _svg_for(smiles: str, thumbnail: bool) -> str:
    mol = Chem.MolFromSmiles(smiles)
    return draw.thumbnail_svg(mol) if thumbnail else draw.depict_svg(mol)


def structure_svg(compound: Compound, *, thumbnail: bool = False) -> str:
    """The 2D drawing; made once per structure and size, then served from the cache."""
    return _svg_for(compound.smiles, thumbnail)


def batches_of(session: Session, compound: Compound) -> list[Batch]:
    return list(session.exec(select(Batch).where(Batch.compound_id == compound.id).order_by(Batch.seq)).all())


def set_batch_archived(*, session: Session, batch: Batch, archived: bool, actor: str) -> Batch:
    before = audit.snapshot(batch)
    batch.archived = archived
    session.add(batch)
    compound = session.get(Compound, batch.compound_id)
    audit.record(session, actor=actor, action="batch.archive" if archived else "batch.restore", entity="batch",
                 code=batch.code, compound_id=compound.id, before=before, after=audit.snapshot(batch))
    # the batch's measurements stop (or start again) counting: derived rows, verdict and stats follow
    measurements.refresh_batches(session, compound, [batch.id], actor=actor)
    session.commit()
    session.refresh(batch)
    return batch
