"""Structure search in process: substructure (SMARTS or SMILES) and Morgan/Tanimoto similarity.

Pure RDKit and numpy: no database. :class:`StructureIndex` holds every registered
structure of one database in memory so that a search over 10^4-10^5 molecules takes
well under a second; the service (``server.services.search``) keeps one index per
engine on SQLite and uses the RDKit PostgreSQL cartridge instead on PostgreSQL. Both
back ends must give identical answers, so every choice here mirrors what the cartridge
does with its default settings:

* substructure: ``m @> qmol_from_smarts(q)`` / ``m @> mol_from_smiles(q)`` is RDKit's
  ``SubstructMatch`` without chirality (cartridge GUC ``rdkit.do_chiral_sss`` is off by
  default; ``HasSubstructMatch(useChirality=False)`` here);
* similarity: ``morganbv_fp(m, 2)`` is a Morgan bit vector of radius 2 and
  ``rdkit.morgan_fp_size`` bits (default 512; checked with ``SHOW rdkit.morgan_fp_size``
  on the cartridge installed by .ci/run). :data:`MORGAN_FP_SIZE` is that number, and the
  service also pins the GUC to it in every transaction that computes a fingerprint, so a
  database whose default was changed still agrees with this module. Tanimoto is the
  ratio of common on-bits to bits on in either vector, computed the same way (one double
  division of two integers) by ``tanimoto_sml`` and ``DataStructs.BulkTanimotoSimilarity``.

References
----------
* Morgan algorithm: H. L. Morgan, J. Chem. Doc. 5, 107 (1965), DOI 10.1021/c160017a018;
  circular (ECFP-type) fingerprints: D. Rogers, M. Hahn, J. Chem. Inf. Model. 50, 742
  (2010), DOI 10.1021/ci100050t.
* Tanimoto coefficient for fingerprint similarity: P. Willett, J. M. Barnard,
  G. M. Downs, J. Chem. Inf. Comput. Sci. 38, 983 (1998), DOI 10.1021/ci9800211;
  D. Bajusz, A. Racz, K. Heberger, J. Cheminform. 7, 20 (2015), DOI 10.1186/s13321-015-0069-3.
* Screening before atom-by-atom matching: J. M. Barnard, J. Chem. Inf. Comput. Sci. 33,
  532 (1993), DOI 10.1021/ci00014a001; RDKit pattern fingerprints (rdkit.Chem.PatternFingerprint,
  the screen of RDKit's SubstructLibrary and of the cartridge's GiST index).
* SMARTS: Daylight Theory Manual, ch. 4 (SMARTS - a language for describing molecular patterns).
* RDKit database cartridge: RDKit documentation, "The RDKit database cartridge" (https://www.rdkit.org).
"""

from __future__ import annotations

import threading
from collections.abc import Collection, Iterable
from dataclasses import dataclass

import numpy as np
from rdkit import Chem, DataStructs
from rdkit.Chem import rdFingerprintGenerator

from server.chem.identity import _rdkit_messages, captured_rdkit_log, parse_smiles, parse_structure
from server.errors import ChemistryError

__all__ = [
    "MORGAN_RADIUS",
    "MORGAN_FP_SIZE",
    "PATTERN_FP_SIZE",
    "Query",
    "read_query",
    "parse_query",
    "fingerprint",
    "StructureIndex",
]

# Morgan radius 2 (ECFP4-like, Rogers & Hahn 2010) as in the cartridge call morganbv_fp(m, 2).
MORGAN_RADIUS = 2
# The cartridge's default rdkit.morgan_fp_size (SHOW rdkit.morgan_fp_size -> 512 on the
# Debian postgresql-15-rdkit 202209.3 cartridge; also the documented default).
MORGAN_FP_SIZE = 512
# Size of the substructure screen (RDKit's default pattern fingerprint length).
PATTERN_FP_SIZE = 2048

_FIELDS = {"substructure": "substructure", "similarity": "similar"}
_MORGAN = rdFingerprintGenerator.GetMorganGenerator(radius=MORGAN_RADIUS, fpSize=MORGAN_FP_SIZE)
_MORGAN_LOCK = threading.Lock()  # generators are not documented as thread-safe


@dataclass(frozen=True)
class Query:
    """A parsed search query.

    Attributes
    ----------
    mol : rdkit.Chem.Mol
        Query molecule (a SMARTS query molecule, or a sanitised molecule from SMILES).
    language : {"smarts", "smiles"}
        How the text was read; the cartridge is sent the same text through
        ``qmol_from_smarts`` or ``mol_from_smiles`` accordingly.
    text : str
        What the cartridge is sent: the stripped query text; for similarity the RDKit
        canonical SMILES of the query (so a MOL block can be used too).
    """

    mol: Chem.Mol
    language: str
    text: str


def _smarts(text: str) -> tuple[Chem.Mol | None, str]:
    with captured_rdkit_log() as capture:
        mol = Chem.MolFromSmarts(text)
    return mol, " ".join(_rdkit_messages(capture.messages))


def _smiles(text: str) -> Chem.Mol | None:
    with captured_rdkit_log():
        mol = Chem.MolFromSmiles(text)
    return mol


def _written_kekule(text: str, sanitised: Chem.Mol) -> bool:
    """True when sanitisation found aromatic atoms that the text wrote as aliphatic (Kekule form)."""
    with captured_rdkit_log():
        raw = Chem.MolFromSmiles(text, sanitize=False)
    if raw is None:
        return False
    written = sum(a.GetIsAromatic() for a in raw.GetAtoms())
    return sum(a.GetIsAromatic() for a in sanitised.GetAtoms()) > written


def read_query(text: str, *, kind: str = "substructure") -> Query:
    """Read a substructure or similarity query.

    Parameters
    ----------
    text : str
        Substructure: a SMARTS pattern, or a SMILES. Similarity: a SMILES (or MOL block).
    kind : {"substructure", "similarity"}

    Returns
    -------
    Query

    Raises
    ------
    ChemistryError
        ``field="substructure"`` (empty, or neither valid SMARTS nor SMILES, with RDKit's
        words) or ``field="similar"`` (the SMILES/MOL block messages of
        ``identity.parse_structure``).
    ValueError
        For an unknown ``kind`` (a programming error, not user input).

    Notes
    -----
    A substructure query is read as SMARTS, with one exception: text that is a valid
    SMILES written in Kekule form (``C1=CC=CC=C1``) is read as SMILES, so its rings are
    perceived as aromatic and it finds the aromatic compounds a chemist means (as SMARTS,
    uppercase ``C`` is an aliphatic carbon and such a ring would match nothing aromatic).
    Any other SMILES is valid SMARTS with the same atoms and bonds, and is read as SMARTS:
    SMARTS semantics then apply to hydrogen counts and charges in brackets (``[OH]`` is a
    hydroxyl oxygen, ``[nH]`` an N-H nitrogen). Chirality is ignored in both back ends.
    """
    if kind not in _FIELDS:
        raise ValueError(f"kind must be 'substructure' or 'similarity', not {kind!r}")
    field = _FIELDS[kind]
    stripped = (text or "").strip()
    if kind == "similarity":
        try:
            mol = parse_structure(stripped) if "\n" in stripped else parse_smiles(
                stripped, allow_dummies=False, field=field
            )
        except ChemistryError as exc:
            raise ChemistryError(exc.message, field=field) from exc
        return Query(mol=mol, language="smiles", text=Chem.MolToSmiles(mol))
    if not stripped:
        raise ChemistryError("No substructure given: write a SMARTS pattern or a SMILES.", field=field)
    if any(ch.isspace() for ch in stripped):
        raise ChemistryError(
            "A substructure query is one SMARTS or SMILES string without spaces.", field=field
        )
    smiles_mol = _smiles(stripped)
    if smiles_mol is not None and _written_kekule(stripped, smiles_mol):
        return Query(mol=smiles_mol, language="smiles", text=stripped)
    smarts_mol, smarts_words = _smarts(stripped)
    if smarts_mol is not None:
        return Query(mol=smarts_mol, language="smarts", text=stripped)
    detail = f" RDKit says: {smarts_words}" if smarts_words else ""
    raise ChemistryError(
        f"'{stripped}' is neither a valid SMARTS pattern nor a valid SMILES; check brackets, "
        f"ring-closure digits and element symbols.{detail}",
        field=field,
    )


def parse_query(text: str, *, kind: str = "substructure") -> Chem.Mol:
    """The query molecule of :func:`read_query` (same arguments, same errors)."""
    return read_query(text, kind=kind).mol


def fingerprint(mol: Chem.Mol) -> DataStructs.ExplicitBitVect:
    """Morgan bit vector, radius 2, :data:`MORGAN_FP_SIZE` (512) bits.

    Bit for bit what the cartridge's ``morganbv_fp(m, 2)`` computes with its default
    ``rdkit.morgan_fp_size`` (Rogers & Hahn 2010, DOI 10.1021/ci100050t): atom invariants
    with ring membership, bond types used, no chirality, no counts.
    """
    with _MORGAN_LOCK:
        return _MORGAN.GetFingerprint(mol)


def _pattern_words(mol: Chem.Mol) -> np.ndarray:
    """Pattern fingerprint as 64-bit words (for a vectorised subset screen)."""
    fp = Chem.PatternFingerprint(mol, fpSize=PATTERN_FP_SIZE)
    return np.frombuffer(DataStructs.BitVectToBinaryText(fp), dtype=np.uint64).copy()


def _query_pattern_words(query: Chem.Mol) -> np.ndarray:
    q = Chem.Mol(query)
    q.UpdatePropertyCache(strict=False)  # SMARTS query molecules come without implicit valences
    return _pattern_words(q)


class StructureIndex:
    """In-memory structures of one registry, for substructure and similarity search.

    Each entry keeps the parsed RDKit molecule (so a confirmed hit costs one
    ``HasSubstructMatch`` and no re-parsing; see bench/bench_search.py for what this buys and
    costs in memory), a 2048-bit pattern fingerprint (as a row of a numpy array for the
    screen) and the Morgan bit vector. Thread-safe: one lock around every read and write.
    """

    _WORDS = PATTERN_FP_SIZE // 64

    def __init__(self) -> None:
        self._lock = threading.RLock()
        self._ids: list[int] = []
        self._pos: dict[int, int] = {}
        self._mols: list[Chem.Mol] = []
        self._morgan: list[DataStructs.ExplicitBitVect] = []
        self._pattern = np.zeros((0, self._WORDS), dtype=np.uint64)

    def __len__(self) -> int:
        with self._lock:
            return len(self._ids)

    def __contains__(self, compound_id: object) -> bool:
        with self._lock:
            return compound_id in self._pos

    def ids(self) -> set[int]:
        with self._lock:
            return set(self._ids)

    def max_id(self) -> int | None:
        with self._lock:
            return max(self._ids) if self._ids else None

    def add(self, compound_id: int, smiles: str) -> None:
        """Add (or replace) one structure.

        Raises
        ------
        ChemistryError
            ``field="smiles"`` when RDKit cannot read the stored SMILES.
        """
        mol = _smiles(smiles)
        if mol is None:
            raise ChemistryError(f"compound {compound_id}: stored SMILES '{smiles}' cannot be read", field="smiles")
        morgan = fingerprint(mol)
        words = _pattern_words(mol)
        with self._lock:
            at = self._pos.get(compound_id)
            if at is None:
                at = len(self._ids)
                if at == self._pattern.shape[0]:
                    grown = np.zeros((max(64, 2 * at), self._WORDS), dtype=np.uint64)
                    grown[:at] = self._pattern[:at]
                    self._pattern = grown
                self._pos[compound_id] = at
                self._ids.append(compound_id)
                self._mols.append(mol)
                self._morgan.append(morgan)
            else:
                self._mols[at] = mol
                self._morgan[at] = morgan
            self._pattern[at] = words

    def add_many(self, rows: Iterable[tuple[int, str]]) -> None:
        for compound_id, smiles in rows:
            self.add(compound_id, smiles)

    def remove(self, compound_id: int) -> None:
        """Forget one structure (no error when it is not there)."""
        with self._lock:
            at = self._pos.pop(compound_id, None)
            if at is None:
                return
            last = len(self._ids) - 1
            if at != last:
                moved = self._ids[last]
                self._ids[at] = moved
                self._mols[at] = self._mols[last]
                self._morgan[at] = self._morgan[last]
                self._pattern[at] = self._pattern[last]
                self._pos[moved] = at
            self._ids.pop()
            self._mols.pop()
            self._morgan.pop()
            self._pattern[last] = 0

    def _positions(self, candidates: Collection[int] | None) -> np.ndarray:
        if candidates is None:
            return np.arange(len(self._ids))
        return np.array(sorted(self._pos[c] for c in set(candidates) if c in self._pos), dtype=np.int64)

    def substructure(self, query: Chem.Mol, candidates: Collection[int] | None = None) -> list[int]:
        """Ids of the molecules that contain ``query``, ascending.

        A molecule is screened out when the query's pattern-fingerprint bits are not all
        set in its own (Barnard 1993); the rest are confirmed by ``HasSubstructMatch``
        (no chirality, as the cartridge by default).
        """
        q_words = _query_pattern_words(query)
        with self._lock:
            positions = self._positions(candidates)
            if positions.size == 0:
                return []
            block = self._pattern[positions]
            passed = positions[np.all((block & q_words) == q_words, axis=1)]
            hits = [
                self._ids[at]
                for at in passed
                if self._mols[at].HasSubstructMatch(query, useChirality=False)
            ]
        return sorted(hits)

    def similar(
        self, query: Chem.Mol, threshold: float, candidates: Collection[int] | None = None
    ) -> list[tuple[int, float]]:
        """``(id, Tanimoto)`` of the molecules with similarity >= ``threshold``.

        Sorted by similarity (highest first), then id. Tanimoto on the Morgan bit vectors
        of :func:`fingerprint` (Willett et al. 1998).
        """
        q_fp = fingerprint(query)
        with self._lock:
            positions = self._positions(candidates)
            if positions.size == 0:
                return []
            fps = [self._morgan[at] for at in positions]
            ids = [self._ids[at] for at in positions]
        sims = DataStructs.BulkTanimotoSimilarity(q_fp, fps)
        hits = [(i, s) for i, s in zip(ids, sims) if s >= threshold]
        hits.sort(key=lambda h: (-h[1], h[0]))
        return hits
