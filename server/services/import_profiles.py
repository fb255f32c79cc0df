"""Import profiles: create, list, read and edit them; every edit is a new version.

A version is never changed once stored: a measurement names the profile version it was read
with (``Measurement.profile_name`` / ``profile_version``), and re-analysis and corrections read
its raw file through that same version. The reading itself is pure, in
``server/ingest/profiles.py``; this module checks a profile against its kind and keeps the rows.
"""

from __future__ import annotations

from typing import Any, Mapping, Optional

from sqlalchemy import func
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, select

from ..errors import InputError
from ..ingest.profiles import PROFILE_KEYS, Block, Profile, profile_from_json, read_profiled
from ..kinds import KINDS
from ..models import ImportProfile
from . import audit
from .errors import Duplicate, NotFound


def check_profile(data: Mapping[str, Any], *, version: int = 1) -> Profile:
    """Validate a profile's JSON, and that its kind is a table kind whose columns the mapping gives.

    Raises InputError (422) naming the field."""
    profile = profile_from_json(data, version=version)
    kind = KINDS.get(profile.kind)
    if kind is None:
        raise InputError(f"unknown kind {profile.kind!r}; use one of {', '.join(KINDS)}", field="kind")
    if not kind.table:
        raise InputError(f"{kind.name} files are not tables; profiles read tables", field="kind")
    mapped = {q.name for c in profile.columns for q in (c.alternatives or (c.quantity,))}
    if not any(set(s) <= mapped for s in kind.column_sets):
        raise InputError(f"the mapped columns do not give {kind.label}: map {kind.columns}", field="columns")
    return profile


def _latest_version(session: Session, name: str) -> Optional[int]:
    return session.exec(select(func.max(ImportProfile.version)).where(ImportProfile.name == name)).one()


def get_profile(session: Session, name: str, version: Optional[int] = None) -> ImportProfile:
    """The newest version of a profile (or the one named); NotFound (404) otherwise."""
    if version is None:
        version = _latest_version(session, name)
    row = None
    if version is not None:
        row = session.exec(select(ImportProfile).where(ImportProfile.name == name,
                                                       ImportProfile.version == version)).first()
    if row is None:
        raise NotFound(f"no import profile {name!r}" + (f" version {version}" if version is not None else ""))
    return row


def profile_of(row: ImportProfile) -> Profile:
    return profile_from_json(row.spec, version=row.version)


def list_profiles(session: Session) -> list[ImportProfile]:
    """The newest version of every profile, by name."""
    newest = (select(ImportProfile.name, func.max(ImportProfile.version).label("v"))
              .group_by(ImportProfile.name).subquery())
    query = select(ImportProfile).join(newest, (ImportProfile.name == newest.c.name)
                                       & (ImportProfile.version == newest.c.v)).order_by(ImportProfile.name)
    return list(session.exec(query).all())


def profile_versions(session: Session, name: str) -> list[ImportProfile]:
    """Every version of a profile, newest first (the history the edit page shows); NotFound (404) if none."""
    rows = list(session.exec(select(ImportProfile).where(ImportProfile.name == name)
                             .order_by(ImportProfile.version.desc())).all())
    if not rows:
        raise NotFound(f"no import profile {name!r}")
    return rows


def profile_read(row: ImportProfile) -> dict[str, Any]:
    return {**row.spec, "id": row.id, "name": row.name, "kind": row.kind, "version": row.version,
            "created_at": row.created_at.isoformat(), "created_by": row.created_by}


def _spec(data: Mapping[str, Any]) -> dict[str, Any]:
    return {k: data[k] for k in PROFILE_KEYS if k in data}


def create_profile(*, session: Session, data: Mapping[str, Any], actor: str) -> ImportProfile:
    """Store version 1 of a new profile. A name in use: Duplicate (409)."""
    profile = check_profile(data)
    if _latest_version(session, profile.name) is not None:
        raise Duplicate(f"an import profile named {profile.name!r} exists; PATCH it to make a new version",
                        existing=profile.name)
    row = ImportProfile(name=profile.name, version=1, kind=profile.kind, spec=_spec(data), created_by=actor)
    session.add(row)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise Duplicate(f"an import profile named {profile.name!r} exists; PATCH it to make a new version",
                        existing=profile.name) from None
    audit.record(session, actor=actor, action="import_profile.create", entity="import_profile", code=row.name,
                 after=audit.snapshot(row))
    session.commit()
    session.refresh(row)
    return row


def update_profile(*, session: Session, name: str, changes: Mapping[str, Any], actor: str) -> tuple[ImportProfile, bool]:
    """A new version with ``changes`` over the newest one; returns (row, created). Nothing changed: the
    newest version, not a copy. A key set to null goes back to its default."""
    current = get_profile(session, name)
    if "name" in changes and changes["name"] != name:
        raise InputError("a profile keeps its name; create a new profile instead", field="name")
    spec = {**current.spec, **changes}
    spec = {k: v for k, v in spec.items() if v is not None}
    check_profile(spec, version=current.version + 1)
    if _spec(spec) == current.spec:
        return current, False
    row = ImportProfile(name=name, version=current.version + 1, kind=spec["kind"], spec=_spec(spec), created_by=actor)
    session.add(row)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise Duplicate(f"import profile {name!r} was edited at the same moment; read it again and retry",
                        existing=name) from None
    audit.record(session, actor=actor, action="import_profile.update", entity="import_profile", code=name,
                 before={"version": current.version, "spec": current.spec},
                 after={"version": row.version, "spec": row.spec})
    session.commit()
    session.refresh(row)
    return row, True


def stored_block(session: Session, *, name: str, version: int, block: int, raw: bytes) -> Block:
    """Block ``block`` of a stored file read again through the profile version it was read with."""
    profile = profile_of(get_profile(session, name, version))
    read = read_profiled(raw, profile)
    if block >= len(read.blocks):
        raise InputError(f"profile {name!r} version {version} finds {len(read.blocks)} blocks in this file, "
                         f"not block {block + 1}", field="file")
    return read.blocks[block]


#: The most columns and header lines the profile editor maps.
EDITOR_SLOTS = 40


def spec_from_form(form: Mapping[str, str]) -> dict[str, Any]:
    """A profile's JSON from the editor's fields: ``source_i``/``to_i``/``unit_i`` per column of the header
    (``to_i`` "ignore" leaves it out, empty leaves it unmapped), ``cond_key_i``/``cond_to_i``/``cond_unit_i``
    per header line; the rest as in the JSON. Checked by :func:`check_profile` when used."""
    def text(key: str) -> str:
        return str(form.get(key) or "").strip()

    spec: dict[str, Any] = {"name": text("name"), "kind": text("kind"), "delimiter": text("delimiter") or ",",
                            "decimal": text("decimal") or ".", "encoding": text("encoding") or "auto",
                            "units_row": text("units_row") in ("on", "true", "1")}
    skip = text("skip_lines") or "0"
    if not skip.isdigit():
        raise InputError("the number of lines to skip is a whole number", field="skip_lines")
    spec["skip_lines"] = int(skip)
    if text("start_after"):
        spec["start_after"] = text("start_after")
    columns: dict[str, Any] = {}
    ignore: list[str] = []
    conditions: dict[str, Any] = {}
    for i in range(EDITOR_SLOTS):
        source, to, unit = text(f"source_{i}"), text(f"to_{i}"), text(f"unit_{i}")
        if source and to == "ignore":
            ignore.append(source)
        elif source and to:
            columns[source] = {"to": to, **({"unit": unit} if unit else {})}
        key, cto, cunit = text(f"cond_key_{i}"), text(f"cond_to_{i}"), text(f"cond_unit_{i}")
        if key and cto:
            conditions[key] = {"to": cto, **({"unit": cunit} if cunit else {})}
    spec["columns"] = columns
    if ignore:
        spec["ignore"] = ignore
    if conditions:
        spec["conditions"] = conditions
    if text("separator"):
        spec["blocks"] = {"separator": text("separator"), **({"varies": text("varies")} if text("varies") else {})}
    return spec


def form_from_spec(spec: Mapping[str, Any]) -> dict[str, str]:
    """The editor's fields for a stored profile (the inverse of :func:`spec_from_form`), so the edit page opens
    with the newest version filled in; a column is offered under the canonical name the profile resolves to."""
    profile = profile_from_json(spec)
    form: dict[str, str] = {"name": profile.name, "kind": profile.kind, "skip_lines": str(profile.skip_lines),
                            "start_after": profile.start_after or "", "encoding": profile.encoding,
                            "delimiter": "tab" if profile.delimiter == "\t" else profile.delimiter,
                            "decimal": profile.decimal, "separator": profile.separator or "",
                            "varies": profile.varies or ""}
    if profile.units_row:
        form["units_row"] = "on"
    rows = [(c.source, c.quantity.name if len(c.alternatives) <= 1 else str(spec["columns"][c.source]["to"]),
             c.unit or "") for c in profile.columns] + [(i, "ignore", "") for i in profile.ignore]
    for i, (source, to, unit) in enumerate(rows[:EDITOR_SLOTS]):
        form[f"source_{i}"], form[f"to_{i}"], form[f"unit_{i}"] = source, to, unit
    for i, c in enumerate(profile.conditions[:EDITOR_SLOTS]):
        form[f"cond_key_{i}"], form[f"cond_to_{i}"], form[f"cond_unit_{i}"] = c.source, c.to, c.unit or ""
    return form


def edit_from_form(*, session: Session, name: str, form: Mapping[str, str], actor: str) -> tuple[ImportProfile, bool]:
    """Save the edit page's fields as the next version of ``name``: a key the form leaves out (no start
    pattern, no ignored column, one table per file) goes back to its default instead of keeping the old value;
    the description, which the page does not edit, is kept. Returns (row, created) as :func:`update_profile`."""
    spec = spec_from_form({**form, "name": name})
    changes = {k: spec.get(k) for k in PROFILE_KEYS if k != "description"}
    return update_profile(session=session, name=name, changes=changes, actor=actor)
