"""Tests of the job queue, the workers and the computed-estimate service."""

from __future__ import annotations

from sqlmodel import Session

from server.chem import identity
from server.models import Compound
from server.services import codes


def make_compound(session: Session, smiles: str, *, archived: bool = False) -> Compound:
    """A compound row built straight from RDKit identifiers (invented codes RMX-0001, ...)."""
    ident = identity.identify(identity.parse_structure(smiles))
    number = codes.allocate(session, codes.COMPOUND_SERIES)
    compound = Compound(number=number, code=f"RMX-{number:04d}", smiles=ident.smiles, inchi=ident.inchi,
                        inchikey=ident.inchikey, formula=ident.formula, mw=ident.mw, exact_mass=ident.exact_mass,
                        heavy_atoms=ident.heavy_atoms, archived=archived, created_by="test")
    session.add(compound)
    session.commit()
    session.refresh(compound)
    return compound
