"""Scaffolds: group-defined cores with numbered attachment points, and compounds built on them.

A scaffold is a SMILES in which the positions that carry side chains are dummy atoms with
atom-map numbers, ``[*:1]`` ... ``[*:n]``. A compound is built by joining one side-chain
fragment (itself a SMILES with one ``[*:1]``-style attachment) to every attachment point
with RDKit's ``molzip``, which bonds dummy atoms of equal map number and removes them.

``PARENT_BOWLS`` holds the three parent bowls of the campaign family: a triphenylene-type
core (central benzene hub, three outer benzo rings) closed into a C3-symmetric bowl by one
bridge in each of the three bays, each bridge closing a five-membered ring; six rim
positions (two on each outer ring) are attachment points. Bridges CH2 (C21 skeleton), S
and Se. With hydrogen in place of the dummies the parents are C21H12, C18H6S3 and C18H6Se3.

References
----------
* SMILES with atom maps and dummy atoms: D. Weininger, J. Chem. Inf. Comput. Sci. 28, 31
  (1988), DOI 10.1021/ci00057a005; Daylight Theory Manual (reaction/atom-map notation).
* ``Chem.molzip``: RDKit documentation, rdkit.Chem.rdmolops.molzip (https://www.rdkit.org).
* Matching a structure to a scaffold: RDKit R-group decomposition
  (rdkit.Chem.rdRGroupDecomposition, ``onlyMatchAtRGroups``), https://www.rdkit.org.
* Substituent names (2-ethylhexyl, sec-butyl, ...): IUPAC, Nomenclature of Organic
  Chemistry, Recommendations 2013 (RSC 2014), P-29.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass

from rdkit import Chem

from server.chem.geometry import fused_ring_systems
from server.chem.identity import captured_rdkit_log, parse_smiles, hill_formula
from server.errors import ChemistryError

__all__ = [
    "ScaffoldInfo",
    "PARENT_BOWLS",
    "BRANCHED_FORMS",
    "MAX_CHAIN_CARBONS",
    "validate_scaffold",
    "side_chain_smiles",
    "attach_side_chains",
    "build_from_scaffold",
    "ScaffoldMatch",
    "match_scaffold",
    "match_scaffolds",
    "describe_match",
]

# Attachment points numbered around the rim, two per outer benzo ring (1,2), (3,4), (5,6).
PARENT_BOWLS: dict[str, str] = {
    "CH2": "C1c2c([*:1])c([*:2])c3c4c2c2c1c([*:3])c([*:4])c1c2c2c(c([*:5])c([*:6])c(c42)C3)C1",
    "S": "s1c2c([*:1])c([*:2])c3sc4c([*:3])c([*:4])c5sc6c([*:5])c([*:6])c1c1c2c3c4c5c61",
    "Se": "[se]1c2c([*:1])c([*:2])c3[se]c4c([*:3])c([*:4])c5[se]c6c([*:5])c([*:6])c1c1c2c3c4c5c61",
}

MAX_CHAIN_CARBONS = 30

# Named branched alkyl groups: skeleton SMILES written from the attachment carbon, and
# the carbon count the name implies (IUPAC 2013, P-29).
BRANCHED_FORMS: dict[str, tuple[str, int]] = {
    "isopropyl": ("C(C)C", 3),  # propan-2-yl
    "isobutyl": ("CC(C)C", 4),  # 2-methylpropyl
    "sec-butyl": ("C(C)CC", 4),  # butan-2-yl
    "tert-butyl": ("C(C)(C)C", 4),  # 2-methylpropan-2-yl
    "2-ethylhexyl": ("CC(CC)CCCC", 8),
    "3,7-dimethyloctyl": ("CCC(C)CCCC(C)C", 10),
    "2-butyloctyl": ("CC(CCCC)CCCCCC", 12),
}

_LINKER = {"alkoxy": "O", "alkylthio": "S", "alkyl": ""}


@dataclass(frozen=True)
class ScaffoldInfo:
    """What a scaffold SMILES describes.

    Attributes
    ----------
    smiles : str
        Canonical scaffold SMILES (attachment points kept as ``[*:n]``).
    attachment_points : int
        Number of attachment points ``n``.
    core_formula : str
        Hill formula of the core without the dummy atoms (open valences not filled),
        e.g. ``"C21H6"`` for the CH2-bridged bowl with six attachment points.
    parent_smiles, parent_formula : str
        The parent compound with hydrogen at every attachment point, e.g. ``"C21H12"``.
    bridges : tuple of str
        Label of every bridge atom of the core (sorted), e.g. ``("CH2", "CH2", "CH2")``.
    bridge : str or None
        Distinct bridge labels joined by "/" ("CH2", "S", "CH2/S"); None without
        five-membered rings in the core.
    """

    smiles: str
    attachment_points: int
    core_formula: str
    parent_smiles: str
    parent_formula: str
    bridges: tuple[str, ...]
    bridge: str | None

    def to_dict(self) -> dict:
        out = asdict(self)
        out["bridges"] = list(self.bridges)
        return out


def _bridge_label(atom: Chem.Atom) -> str:
    """'CH2', 'S', 'Se', 'NH', 'C=O', 'C' (substituted carbon), 'N' (N-substituted)."""
    label = atom.GetSymbol()
    h = atom.GetTotalNumHs()
    if h:
        label += "H" if h == 1 else f"H{h}"
    for bond in atom.GetBonds():
        other = bond.GetOtherAtom(atom)
        if bond.GetBondType() == Chem.BondType.DOUBLE and not other.IsInRing():
            label += f"={other.GetSymbol()}"
    return label


def _bridge_atoms(mol: Chem.Mol) -> list[int]:
    """Atoms of the core's five-membered rings that belong to no other ring.

    In the bowl these are the bridge atoms; the hub atoms and the bay carbons of the outer
    rings are shared with six-membered rings.
    """
    systems = fused_ring_systems(mol)
    if not systems:
        return []
    core = systems[0]
    ring_info = mol.GetRingInfo()
    out = set()
    for ring in ring_info.AtomRings():
        if len(ring) == 5 and set(ring) <= core:
            out.update(i for i in ring if ring_info.NumAtomRings(i) == 1)
    return sorted(out)


def _parent(mol: Chem.Mol) -> Chem.Mol:
    """The scaffold with hydrogen in place of every dummy atom."""
    rw = Chem.RWMol(mol)
    for atom in rw.GetAtoms():
        if atom.GetAtomicNum() == 0:
            atom.SetAtomicNum(1)
            atom.SetAtomMapNum(0)
            atom.SetIsotope(0)
    parent = rw.GetMol()
    with captured_rdkit_log():
        Chem.SanitizeMol(parent)
    return Chem.RemoveHs(parent)


def _attachment_maps(mol: Chem.Mol, field: str) -> list[int]:
    """Map numbers of the dummy atoms, checked: present, unique, 1..n, one single bond each."""
    maps = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() != 0:
            continue
        where = f"attachment point at atom {atom.GetIdx() + 1}"
        number = atom.GetAtomMapNum()
        if number == 0:
            raise ChemistryError(
                f"The {where} has no number: write attachment points as [*:1], [*:2], ...",
                field=field,
            )
        if atom.GetDegree() != 1 or atom.GetBonds()[0].GetBondType() != Chem.BondType.SINGLE:
            raise ChemistryError(
                f"Attachment point [*:{number}] must be joined to the core by exactly one single bond.",
                field=field,
            )
        maps.append(number)
    if not maps:
        raise ChemistryError(
            "The scaffold has no attachment points: mark each side-chain position as [*:1], [*:2], ...",
            field=field,
        )
    duplicates = sorted({n for n in maps if maps.count(n) > 1})
    if duplicates:
        raise ChemistryError(
            f"Attachment point number(s) {', '.join(map(str, duplicates))} used more than once; "
            "each [*:n] needs its own number.",
            field=field,
        )
    if sorted(maps) != list(range(1, len(maps) + 1)):
        raise ChemistryError(
            f"Attachment points are numbered {', '.join(map(str, sorted(maps)))}; number them "
            f"1 to {len(maps)} without gaps.",
            field=field,
        )
    return sorted(maps)


def validate_scaffold(smiles: str) -> ScaffoldInfo:
    """Check a scaffold SMILES and describe it.

    Parameters
    ----------
    smiles : str
        Core SMILES with attachment points ``[*:1]`` ... ``[*:n]``.

    Returns
    -------
    ScaffoldInfo

    Raises
    ------
    ChemistryError
        ``field="scaffold"``: unreadable SMILES (the message of
        ``identity.parse_structure``), no attachment points, an unnumbered, duplicated
        or gapped numbering, or an attachment point not joined by one single bond.
    """
    mol = parse_smiles(smiles, allow_dummies=True, field="scaffold")
    n = len(_attachment_maps(mol, "scaffold"))
    bridges = tuple(sorted(_bridge_label(mol.GetAtomWithIdx(i)) for i in _bridge_atoms(mol)))
    parent = _parent(mol)
    return ScaffoldInfo(
        smiles=Chem.MolToSmiles(mol),
        attachment_points=n,
        core_formula=hill_formula(mol),
        parent_smiles=Chem.MolToSmiles(parent),
        parent_formula=hill_formula(parent),
        bridges=bridges,
        bridge="/".join(sorted(set(bridges))) if bridges else None,
    )


def side_chain_smiles(kind: str, carbons: int | None, branched_form: str | None = None) -> str:
    """Fragment SMILES of one side chain with the attachment point ``[*:1]``.

    Parameters
    ----------
    kind : {"alkoxy", "alkylthio", "alkyl"}
    carbons : int or None
        Carbon count, 1 to ``MAX_CHAIN_CARBONS`` (30) for a linear chain. With a
        ``branched_form`` it may be omitted; if given it must match the name.
    branched_form : str, optional
        One of ``BRANCHED_FORMS`` ("2-ethylhexyl", "isopropyl", "isobutyl", "sec-butyl",
        "tert-butyl", "3,7-dimethyloctyl", "2-butyloctyl"); None or "linear" for an
        unbranched chain.

    Returns
    -------
    str
        e.g. ``"[*:1]OCCCCCC"`` (hexyloxy), ``"[*:1]SCC(CC)CCCC"`` (2-ethylhexylthio).

    Raises
    ------
    ChemistryError
        ``field="side_chain"`` for an unknown kind or branched form, a carbon count out of
        range or not matching the branched form.
    """
    if kind not in _LINKER:
        raise ChemistryError(
            f"Unknown side-chain kind '{kind}'; choose alkoxy, alkylthio or alkyl.", field="side_chain"
        )
    if carbons is not None and (isinstance(carbons, bool) or not isinstance(carbons, int)):
        raise ChemistryError(f"Carbon count must be a whole number, not {carbons!r}.", field="side_chain")
    if branched_form is None or branched_form == "linear":
        if carbons is None:
            raise ChemistryError("Give the number of carbons of the linear chain.", field="side_chain")
        if not 1 <= carbons <= MAX_CHAIN_CARBONS:
            raise ChemistryError(
                f"A linear chain needs 1 to {MAX_CHAIN_CARBONS} carbons, not {carbons}.", field="side_chain"
            )
        skeleton = "C" * carbons
    else:
        if branched_form not in BRANCHED_FORMS:
            raise ChemistryError(
                f"Unknown branched form '{branched_form}'; known: {', '.join(BRANCHED_FORMS)}.",
                field="side_chain",
            )
        skeleton, n_carbon = BRANCHED_FORMS[branched_form]
        if carbons is not None and carbons != n_carbon:
            raise ChemistryError(
                f"{branched_form} has {n_carbon} carbons, not {carbons}; leave the carbon count "
                "empty or correct it.",
                field="side_chain",
            )
    return f"[*:1]{_LINKER[kind]}{skeleton}"


def attach_side_chains(scaffold_smiles: str, chains: Mapping[int, str]) -> str:
    """Join one side-chain fragment to each attachment point; canonical SMILES of the compound.

    Parameters
    ----------
    scaffold_smiles : str
        Scaffold with ``[*:1]`` ... ``[*:n]``.
    chains : mapping of int to str
        For every attachment number 1..n, a fragment SMILES with one attachment point
        (any map number; e.g. from :func:`side_chain_smiles`). Use ``"[*:1][H]"`` to leave
        a position unsubstituted.

    Raises
    ------
    ChemistryError
        ``field="scaffold"`` for a bad scaffold, ``field="side_chain"`` for a missing
        position or a fragment without exactly one attachment point.
    """
    scaffold = parse_smiles(scaffold_smiles, allow_dummies=True, field="scaffold")
    maps = _attachment_maps(scaffold, "scaffold")
    missing = [n for n in maps if n not in chains]
    extra = sorted(set(chains) - set(maps))
    if missing or extra:
        problems = []
        if missing:
            problems.append(f"no side chain given for attachment point(s) {', '.join(map(str, missing))}")
        if extra:
            problems.append(f"the scaffold has no attachment point(s) {', '.join(map(str, extra))}")
        text = "; ".join(problems)
        raise ChemistryError(text[0].upper() + text[1:] + ".", field="side_chain")
    combined = Chem.Mol(scaffold)
    for number in maps:
        fragment = parse_smiles(chains[number], allow_dummies=True, field="side_chain")
        dummies = [a for a in fragment.GetAtoms() if a.GetAtomicNum() == 0]
        if len(dummies) != 1 or dummies[0].GetDegree() != 1:
            raise ChemistryError(
                f"Side chain '{chains[number]}' must have exactly one attachment point [*:1].",
                field="side_chain",
            )
        dummies[0].SetAtomMapNum(number)
        combined = Chem.CombineMols(combined, fragment)
    with captured_rdkit_log() as capture:
        zipped = Chem.molzip(combined)
        problems = Chem.DetectChemistryProblems(zipped)
    if problems or any(a.GetAtomicNum() == 0 for a in zipped.GetAtoms()):
        words = "; ".join(p.Message() for p in problems) or capture.messages.strip() or "attachment left over"
        raise ChemistryError(f"The side chains could not be attached: {words}", field="side_chain")
    Chem.SanitizeMol(zipped)
    return Chem.MolToSmiles(Chem.RemoveHs(zipped))


def build_from_scaffold(
    scaffold_smiles: str, kind: str, carbons: int | None, branched_form: str | None = None
) -> str:
    """Canonical SMILES of the compound with the same side chain at every attachment point.

    Parameters
    ----------
    scaffold_smiles : str
        Scaffold with ``[*:1]`` ... ``[*:n]`` (e.g. a value of ``PARENT_BOWLS``).
    kind, carbons, branched_form
        As for :func:`side_chain_smiles`.

    Returns
    -------
    str
        Canonical SMILES; ``sidechains.perceive_side_chains`` of it finds one entry with
        ``count == n``.
    """
    fragment = side_chain_smiles(kind, carbons, branched_form)
    maps = _attachment_maps(parse_smiles(scaffold_smiles, allow_dummies=True, field="scaffold"), "scaffold")
    return attach_side_chains(scaffold_smiles, {n: fragment for n in maps})


# --- matching a structure against registered scaffolds ------------------------------------------


@dataclass(frozen=True)
class ScaffoldMatch:
    """A structure found to be built on a scaffold.

    Attributes
    ----------
    code : str
        The scaffold's code.
    core_atoms : int
        Heavy atoms of the scaffold core (dummies not counted): the size by which the largest
        of several matching scaffolds is chosen.
    substituents : tuple of (int, str)
        For every attachment point ``n`` (1..n), the substituent there as a fragment SMILES with
        ``*`` where the core was (``"*OCCCCCC"``), or ``"[H]"`` for an unsubstituted position.
    """

    code: str
    core_atoms: int
    substituents: tuple[tuple[int, str], ...]

    def substituted(self) -> int:
        return sum(1 for _, s in self.substituents if s != "[H]")


def _decomposition_options():  # noqa: ANN202 - an RDKit parameters object
    from rdkit.Chem import rdRGroupDecomposition as rgd

    p = rgd.RGroupDecompositionParameters()
    p.onlyMatchAtRGroups = True  # a substituent anywhere but an attachment point: no match
    p.removeHydrogensPostMatch = True
    p.labels = rgd.RGroupLabels.AtomMapLabels
    p.alignment = rgd.RGroupCoreAlignment.NoAlignment
    return p


def _fragment(smiles: str) -> str:
    """An R group as RGD writes it (``CCO[*:2]``) -> canonical SMILES with a bare ``*``."""
    frag = Chem.MolFromSmiles(smiles)
    for atom in frag.GetAtoms():
        atom.SetAtomMapNum(0)
    return Chem.MolToSmiles(frag)


def match_scaffold(mol: Chem.Mol, code: str, scaffold_smiles: str) -> ScaffoldMatch | None:
    """Whether ``mol`` is built on the scaffold: its core is a substructure of ``mol`` and every
    atom of ``mol`` outside the core hangs from an attachment point ``[*:n]``.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        A sanitised molecule (``identity.parse_structure``).
    code, scaffold_smiles : str
        The scaffold's code and its SMILES with ``[*:1]`` ... ``[*:n]``.

    Returns
    -------
    ScaffoldMatch or None

    Notes
    -----
    RDKit's R-group decomposition with ``onlyMatchAtRGroups`` does the matching (RDKit
    documentation, rdkit.Chem.rdRGroupDecomposition); an attachment point left as hydrogen counts
    as a match, so the parent bowl (C21H12) is built on its scaffold. For a symmetric core the
    numbering of equivalent points is one of the symmetry-equivalent choices.
    """
    from rdkit.Chem import rdRGroupDecomposition as rgd

    core = Chem.MolFromSmiles(scaffold_smiles)
    if core is None:  # a stored scaffold was checked on creation; nothing to match against
        return None
    n = sum(1 for a in core.GetAtoms() if a.GetAtomicNum() == 0)
    with captured_rdkit_log():
        groups, unmatched = rgd.RGroupDecompose([core], [Chem.RemoveHs(mol)], asSmiles=True,
                                                options=_decomposition_options())
    if unmatched or not groups:
        return None
    row = groups[0]
    subs = tuple((i, _fragment(row[f"R{i}"]) if f"R{i}" in row else "[H]") for i in range(1, n + 1))
    return ScaffoldMatch(code=code, core_atoms=core.GetNumAtoms() - n, substituents=subs)


def match_scaffolds(mol: Chem.Mol, scaffolds: Mapping[str, str]) -> list[ScaffoldMatch]:
    """Every scaffold (code -> SMILES) ``mol`` is built on, the largest core first (then more
    attachment points, then code): the first is the one a compound is filed under."""
    found = [m for code, smi in scaffolds.items() if (m := match_scaffold(mol, code, smi)) is not None]
    return sorted(found, key=lambda m: (-m.core_atoms, -len(m.substituents), m.code))


def describe_match(matches: list[ScaffoldMatch]) -> str:
    """Words for the registration form and the audit trail: which scaffold, and why that one."""
    if not matches:
        return "built on no registered scaffold"
    best = matches[0]
    text = (f"built on {best.code} ({best.core_atoms} core atoms; {best.substituted()} of "
            f"{len(best.substituents)} attachment points substituted)")
    if len(matches) > 1:
        others = ", ".join(f"{m.code} ({m.core_atoms})" for m in matches[1:])
        text += f"; also matches {others}: the largest core is chosen"
    return text
