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
* similarity: ``morgan_fp(m, 2)`` is the unfolded Morgan *count* fingerprint of radius 2
  (an ``sfp``: how often each circular environment occurs, no folding, so no bit collisions and no
  size setting to agree on), what ``GetMorganGenerator(radius=2).GetSparseCountFingerprint``
  computes here. Tanimoto on count vectors is sum(min(a_i, b_i)) / (sum a_i + sum b_i - sum min),
  computed the same way by ``tanimoto_sml`` and ``DataStructs.BulkTanimotoSimilarity``.
  Counts matter in this registry: bit vectors give Tanimoto 1.0 between the C6, C8, C10 and C12
  members of one homologous series (a longer chain adds only more of the same CH2 environments),
  so similarity search could not tell homologues apart; with counts, neighbours in chain length
  rank nearest.

References
----------
* Morgan algorithm: H. L. Morgan, J. Chem. Doc. 5, 107 (1965), DOI 10.1021/c160017a018;
  circular (ECFP-type) fingerprints: D. Rogers, M. Hahn, J. Chem. Inf. Model. 50, 742
  (2010), DOI 10.1021/ci100050t.
* Tanimoto coefficient for fingerprint similarity, on bit and on count vectors: P. Willett, J. M. Barnard,
  G. M. Downs, J. Chem. Inf. Comput. Sci. 38, 983 (1998), DOI 10.1021/ci9800211;
  D. Bajusz, A. Racz, K. Heberger, J. Cheminform. 7, 20 (2015), DOI 10.1186/s13321-015-0069-3.
* Screening before atom-by-atom matching: J. M. Barnard, J. Chem. Inf. Comput. Sci. 33,
  532 (1993), DOI 10.1021/ci00014a001; RDKit pattern fingerprints (rdkit.Chem.PatternFingerprint,
  the screen of RDKit's SubstructLibrary and of the cartridge's GiST index).
* SMARTS: Daylight Theory Manual, ch. 4 (SMARTS - a language for describing molecular patterns).
* RDKit database cartridge: RDKit documentation, "The RDKit database cartridge" (https://www.rdkit.org).
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import struct
import threading
import time
from collections.abc import Collection, Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from rdkit import Chem, DataStructs, rdBase
from rdkit.Chem import rdFingerprintGenerator, rdSubstructLibrary

from server.chem.identity import _rdkit_messages, captured_rdkit_log, parse_smiles, parse_structure
from server.errors import ChemistryError

__all__ = [
    "MORGAN_RADIUS",
    "PATTERN_FP_SIZE",
    "Query",
    "read_query",
    "parse_query",
    "fingerprint",
    "QUERY_LIMITS",
    "QueryTooGeneral",
    "check_query_size",
    "StructureIndex",
    "element_kinds",
    "query_kinds",
    "save_entries",
    "load_entries",
]

log = logging.getLogger(__name__)

# Morgan radius 2 (ECFP4-like counts, Rogers & Hahn 2010) as in the cartridge call morgan_fp(m, 2).
MORGAN_RADIUS = 2
# Size of the substructure screen (RDKit's default pattern fingerprint length).
PATTERN_FP_SIZE = 2048

_FIELDS = {"substructure": "substructure", "similarity": "similar"}
_MORGAN = rdFingerprintGenerator.GetMorganGenerator(radius=MORGAN_RADIUS)
_MORGAN_LOCK = threading.Lock()  # generators are not documented as thread-safe
_PATTERNS = rdSubstructLibrary.PatternHolder(PATTERN_FP_SIZE)  # only its MakeFingerprint is used
# Molecules per immutable segment of the index (a registration copies at most one segment).
SEGMENT_SIZE = 1024
# Molecules per multi-threaded GetMatches call; the time budget is checked between calls.
MATCH_CHUNK = 256


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
    QueryTooGeneral
        ``field="substructure"``: a substructure query over :data:`QUERY_LIMITS`.
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
            raise ChemistryError(exc.message, field=field, detail=exc.detail) from exc
        return Query(mol=mol, language="smiles", text=Chem.MolToSmiles(mol))
    if not stripped:
        raise ChemistryError("No substructure given: write a SMARTS pattern or a SMILES.", field=field)
    if any(ch.isspace() for ch in stripped):
        raise ChemistryError(
            "A substructure query is one SMARTS or SMILES string without spaces.", field=field
        )
    smiles_mol = _smiles(stripped)
    if smiles_mol is not None and _written_kekule(stripped, smiles_mol):
        query = Query(mol=smiles_mol, language="smiles", text=stripped)
        check_query_size(query, field=field)
        return query
    smarts_mol, smarts_words = _smarts(stripped)
    if smarts_mol is not None:
        query = Query(mol=smarts_mol, language="smarts", text=stripped)
        check_query_size(query, field=field)
        return query
    raise ChemistryError(
        f"'{stripped}' is neither a valid SMARTS pattern nor a valid SMILES; check brackets, "
        f"ring-closure digits and element symbols.",
        field=field, detail=f"RDKit says: {smarts_words}" if smarts_words else None,
    )


def parse_query(text: str, *, kind: str = "substructure") -> Chem.Mol:
    """The query molecule of :func:`read_query` (same arguments, same errors)."""
    return read_query(text, kind=kind).mol


def fingerprint(mol: Chem.Mol) -> DataStructs.ULongSparseIntVect:
    """Unfolded Morgan count fingerprint, radius 2 (environment identifier -> occurrences).

    Element for element what the cartridge's ``morgan_fp(m, 2)`` and RDKit's legacy
    ``GetMorganFingerprint(m, 2)`` compute (Rogers & Hahn 2010, DOI 10.1021/ci100050t): atom
    invariants with ring membership, bond types used, no chirality, counts kept.
    """
    with _MORGAN_LOCK:
        return _MORGAN.GetSparseCountFingerprint(mol)


def _pattern_fp(mol: Chem.Mol) -> DataStructs.ExplicitBitVect:
    """Pattern fingerprint of a registered molecule, as ``PatternHolder(PATTERN_FP_SIZE)`` makes it."""
    return _PATTERNS.MakeFingerprint(mol)


# --- the element screen --------------------------------------------------------------------------
#
# The pattern fingerprint sets no bit that a one-atom query needs ([se], S, [#34] set only the bits every
# molecule has), so such a query would parse and match every molecule. Beside it each molecule keeps which
# (element, aromatic) kinds of atom it has: bit 2 Z + aromatic of 256 bits (32 bytes a molecule). A query
# atom can only be matched by an atom of a kind its query allows, so a molecule without any allowed kind for
# some query atom cannot contain the query: the same screening-before-matching as Barnard (1993), on atom
# kinds. A one-atom query that asks only for the kind of atom is answered by the screen alone.

ELEMENT_WORDS = 4  # 64-bit words per molecule: bits 2 Z + aromatic for Z < 128
_ALL_KINDS = (1 << (64 * ELEMENT_WORDS)) - 1


def _kind_bit(atomic_num: int, aromatic: bool) -> int:
    return 1 << (2 * atomic_num + int(bool(aromatic))) if 0 <= atomic_num < 128 else 0


def element_kinds(mol: Chem.Mol) -> int:
    """The (element, aromatic) kinds of ``mol``'s atoms as a 256-bit integer (bit 2 Z + aromatic)."""
    bits = 0
    for atom in mol.GetAtoms():
        bits |= _kind_bit(atom.GetAtomicNum(), atom.GetIsAromatic())
    return bits


def _kinds_words(bits: Iterable[int]) -> np.ndarray:
    """Kind integers as an (n, :data:`ELEMENT_WORDS`) array of little-endian uint64 words."""
    raw = b"".join(int(b).to_bytes(8 * ELEMENT_WORDS, "little") for b in bits)
    return np.frombuffer(raw, dtype="<u8").reshape(-1, ELEMENT_WORDS).copy()


def _words_kinds(words: np.ndarray) -> int:
    return int.from_bytes(np.ascontiguousarray(words, dtype="<u8").tobytes(), "little")


def _query_tree_kinds(lines: list[str]) -> tuple[int, bool]:
    """Kinds an atom query allows (from RDKit's ``DescribeQuery`` tree) and whether the kind decides it.

    Only AtomType (atomic number + 1000 if aromatic), AtomAtomicNum, AtomAnd and AtomOr nodes are read;
    any other node (hydrogen count, charge, ring, recursion, a negation) allows every kind and makes the
    answer undecided, so the screen never drops a molecule the matcher would keep.
    """
    pos = 0

    def node(depth: int) -> tuple[int, bool]:
        nonlocal pos
        line = lines[pos]
        pos += 1
        words = line.strip().split()
        children = []
        while pos < len(lines) and (len(lines[pos]) - len(lines[pos].lstrip(" "))) // 2 > depth:
            children.append(node(depth + 1))
        if words in (["AtomAnd"], ["AtomOr"]) and children:
            if words == ["AtomAnd"]:
                allowed = _ALL_KINDS
                for kinds, _ in children:
                    allowed &= kinds
            else:
                allowed = 0
                for kinds, _ in children:
                    allowed |= kinds
            return allowed, all(exact for _, exact in children)
        if len(words) == 4 and words[2:] == ["=", "val"] and words[1].isdigit() and not children:
            value = int(words[1])
            if words[0] == "AtomType":
                return _kind_bit(value % 1000, value >= 1000), True
            if words[0] == "AtomAtomicNum":
                return _kind_bit(value, False) | _kind_bit(value, True), True
        return _ALL_KINDS, False

    allowed, exact = node(0)
    return (allowed, exact) if pos == len(lines) else (_ALL_KINDS, False)


def query_kinds(query: Chem.Mol) -> tuple[list[int], bool]:
    """Per query atom, the kinds of molecule atom that can match it; and whether the screen alone decides.

    The screen decides a query of one atom, no bonds, whose query names only elements and aromaticity
    (``[se]``, ``S``, ``[#34]``, ``[S,Se]``): a molecule contains it exactly when it has an atom of an
    allowed kind. A plain (SMILES) atom matches by atomic number whatever its aromaticity; a dummy atom or
    hydrogen allows every kind.
    """
    allowed: list[int] = []
    exact = query.GetNumAtoms() == 1 and query.GetNumBonds() == 0
    for atom in query.GetAtoms():
        if atom.HasQuery():
            kinds, decided = _query_tree_kinds([ln for ln in atom.DescribeQuery().splitlines() if ln.strip()])
        else:
            z = atom.GetAtomicNum()
            kinds, decided = (_ALL_KINDS if z <= 1 else _kind_bit(z, False) | _kind_bit(z, True)), False
        allowed.append(kinds)
        exact = exact and decided
    return allowed, exact


def _screen_kinds(words: np.ndarray, allowed: list[int]) -> np.ndarray:
    """Boolean per molecule row of ``words``: it has an atom of an allowed kind for every query atom."""
    ok = np.ones(len(words), dtype=bool)
    for kinds in set(allowed):
        if kinds == _ALL_KINDS:
            continue
        ok &= (words & _kinds_words([kinds])[0]).any(axis=1)
    return ok


class QueryTooGeneral(ChemistryError):
    """A substructure query over a limit of :data:`QUERY_LIMITS` or over its matching time budget (422)."""


# Limits on a substructure query (common practice for a public search box, not from a paper: atom-by-atom
# matching is subgraph isomorphism, NP-complete in general, and its cost explodes with query atoms that fix no
# element, such as `*`, `[R]` or `[!#1]`, on fused, symmetric ring systems like the bowl cores).
QUERY_LIMITS = {
    "atoms": 150,  # a whole registered compound written as SMILES stays below this
    "bonds": 180,
    "generic_atoms": 12,  # query atoms that pin no element (measured: 12 wildcards in a chain match in ms)
    "recursive": 4,  # $( ... ) environments
    "recursion_depth": 2,  # $( $( ... ) ) nesting
}


def _recursion(text: str) -> tuple[int, int]:
    """Number of ``$(`` environments in a SMARTS and their deepest nesting."""
    count = depth = deepest = 0
    stack: list[bool] = []  # per open parenthesis: does it open a recursive environment?
    for i, ch in enumerate(text):
        if ch == "(":
            recursive = i > 0 and text[i - 1] == "$"
            stack.append(recursive)
            if recursive:
                count += 1
                depth += 1
                deepest = max(deepest, depth)
        elif ch == ")" and stack:
            if stack.pop():
                depth -= 1
    return count, deepest


def _pins_element(atom: Chem.Atom) -> bool:
    if not atom.HasQuery():
        return True  # a plain atom of a SMILES query
    words = atom.DescribeQuery()
    return "AtomAtomicNum" in words or "AtomType" in words


def check_query_size(query: "Query", *, field: str = "substructure") -> None:
    """Refuse a substructure query over :data:`QUERY_LIMITS`, naming the limit.

    Raises
    ------
    QueryTooGeneral
        ``field="substructure"``, the message names the limit and its value.
    """
    mol = query.mol
    measured = {"atoms": mol.GetNumAtoms(), "bonds": mol.GetNumBonds()}
    if query.language == "smarts":
        measured["generic_atoms"] = sum(not _pins_element(a) for a in mol.GetAtoms())
        measured["recursive"], measured["recursion_depth"] = _recursion(query.text)
    words = {
        "atoms": "query atoms",
        "bonds": "query bonds",
        "generic_atoms": "query atoms that fix no element (such as *, [R], [a], [!#1])",
        "recursive": "recursive $(...) environments",
        "recursion_depth": "levels of nested $(...) environments",
    }
    for name, value in measured.items():
        if value > QUERY_LIMITS[name]:
            raise QueryTooGeneral(
                f"query too general: {value} {words[name]}, the limit is {QUERY_LIMITS[name]} "
                f"(limit '{name}'). Name the elements of more atoms, or split the query.",
                field=field,
            )


@dataclass(frozen=True)
class _Segment:
    """Up to :data:`SEGMENT_SIZE` structures, never changed once published (copy-on-write).

    ``lib`` is an RDKit ``SubstructLibrary`` over a ``CachedTrustedSmilesMolHolder`` (RDKit
    canonical SMILES, parsed on demand without re-sanitising) and ``screen``, a ``PatternHolder``
    (the 2048-bit pattern-fingerprint screen; it is also where a copy reads the fingerprints back,
    so they are held once). ``kinds``: per molecule the (element, aromatic) kinds of its atoms
    (:func:`element_kinds`, one row of :data:`ELEMENT_WORDS` uint64 words), the screen read before
    the library. ``smiles``/``morgan`` are kept beside it so that a copy can be made
    without reading molecules back. ``low``/``high``: the least and greatest id, ``ordered``: ids
    ascending, which lets a search for the first hits stop early.
    """

    ids: tuple[int, ...]
    smiles: tuple[str, ...]
    morgan: tuple[DataStructs.ULongSparseIntVect, ...]  # count fingerprints (:func:`fingerprint`)
    screen: rdSubstructLibrary.PatternHolder
    holder: rdSubstructLibrary.CachedTrustedSmilesMolHolder
    lib: rdSubstructLibrary.SubstructLibrary
    kinds: np.ndarray  # (len(ids), ELEMENT_WORDS) uint64
    low: int
    high: int
    ordered: bool

    @classmethod
    def build(cls, ids, smiles, patterns, morgan, kinds) -> "_Segment":
        holder = rdSubstructLibrary.CachedTrustedSmilesMolHolder()
        screen = rdSubstructLibrary.PatternHolder(PATTERN_FP_SIZE)
        for smi, fp in zip(smiles, patterns):
            holder.AddSmiles(smi)
            screen.AddFingerprint(fp)
        ids = tuple(ids)
        words = kinds if isinstance(kinds, np.ndarray) else _kinds_words(kinds)
        return cls(ids, tuple(smiles), tuple(morgan), screen, holder,
                   rdSubstructLibrary.SubstructLibrary(holder, screen), words.reshape(-1, ELEMENT_WORDS),
                   min(ids, default=0), max(ids, default=0), all(a < b for a, b in zip(ids, ids[1:])))

    def pattern(self, k: int) -> DataStructs.ExplicitBitVect:
        return self.screen.GetFingerprint(k)

    def kind_bits(self, k: int) -> int:
        return _words_kinds(self.kinds[k])

    def searching(self, order: list[int]) -> rdSubstructLibrary.SubstructLibrary:
        """A library over this segment's molecules that searches only positions ``order`` (ascending), for one
        search: the segment's own library is shared by concurrent searches and never changed."""
        lib = rdSubstructLibrary.SubstructLibrary(self.holder, self.screen)
        lib.SetSearchOrder(order)
        return lib

    def without(self, drop: set[int]) -> "_Segment":
        keep = [k for k, i in enumerate(self.ids) if i not in drop]
        return _Segment.build([self.ids[k] for k in keep], [self.smiles[k] for k in keep],
                              [self.pattern(k) for k in keep], [self.morgan[k] for k in keep], self.kinds[keep])

    def plus(self, ids, smiles, patterns, morgan, kinds) -> "_Segment":
        return _Segment.build(self.ids + tuple(ids), self.smiles + tuple(smiles),
                              [self.pattern(k) for k in range(len(self.ids))] + list(patterns),
                              self.morgan + tuple(morgan), np.concatenate([self.kinds, _kinds_words(kinds)]))


_EMPTY = ()  # a snapshot is a tuple of segments
# One entry: canonical SMILES, pattern fingerprint, Morgan count fingerprint, atom kinds (:func:`element_kinds`):
# what a segment holds of a molecule.
Entry = tuple[str, DataStructs.ExplicitBitVect, DataStructs.ULongSparseIntVect, int]


def _entry(compound_id: int, smiles: str) -> Entry:
    mol = _smiles(smiles)
    if mol is None:
        raise ChemistryError(f"compound {compound_id}: stored SMILES '{smiles}' cannot be read", field="smiles")
    return Chem.MolToSmiles(mol), _pattern_fp(mol), fingerprint(mol), element_kinds(mol)


class StructureIndex:
    """In-memory structures of one registry, for substructure and similarity search.

    The structures live in immutable segments of at most :data:`SEGMENT_SIZE` molecules,
    each an RDKit ``SubstructLibrary`` holding trusted canonical SMILES (parsed on demand:
    about 3.7 KB per molecule in all with the fingerprints, as the bench measures it, against
    about 70 KB for a parsed molecule) with its pattern-fingerprint screen, plus the Morgan
    count vectors for similarity. :meth:`entries` and ``known=`` of :meth:`add_many` let the
    entries be kept on disk (:func:`save_entries`, :func:`load_entries`) instead of computed. A search reads
    the current tuple of segments once and matches without any lock; a writer (registration,
    catching up with the table) builds the changed segment anew and swaps the tuple in under
    a lock that searches never take (copy-on-write). Matching runs on ``threads`` threads
    (RDKit's own multi-threaded ``SubstructLibrary.GetMatches``) in chunks, and stops with
    :class:`QueryTooGeneral` once the time budget is spent.
    """

    def __init__(self, *, threads: int | None = None) -> None:
        self._write = threading.Lock()
        # One reference, rebound (never mutated) by writers: (segments, id -> segment number, highest id).
        self._snap: tuple[tuple[_Segment, ...], dict[int, int], int | None] = (_EMPTY, {}, None)
        self.threads = threads or os.cpu_count() or 1
        self.chunk = MATCH_CHUNK  # molecules per GetMatches call (the budget is checked between calls)

    # --- reading (no lock: one read of the snapshot) ------------------------------------------

    def __len__(self) -> int:
        return len(self._snap[1])

    def __contains__(self, compound_id: object) -> bool:
        return compound_id in self._snap[1]

    def ids(self) -> set[int]:
        return set(self._snap[1])

    def max_id(self) -> int | None:
        return self._snap[2]

    # --- writing (copy-on-write) --------------------------------------------------------------

    def add(self, compound_id: int, smiles: str) -> None:
        """Add (or replace) one structure.

        Raises
        ------
        ChemistryError
            ``field="smiles"`` when RDKit cannot read the stored SMILES.
        """
        self.add_many([(compound_id, smiles)])

    def add_many(self, rows: Iterable[tuple[int, str]], *, known: Mapping[str, Entry] | None = None) -> int:
        """Add (or replace) many structures; readers see all of them at once or none.

        ``known`` maps a stored SMILES text to its entry as :meth:`entries` gives it (read back by
        :func:`load_entries`); a row whose text is there is not parsed again. Returns how many
        rows had to be computed (parsed and fingerprinted).
        """
        latest: dict[int, tuple] = {}
        computed = 0
        for compound_id, smiles in rows:
            entry = None if known is None else known.get(smiles)
            if entry is None:
                entry = _entry(int(compound_id), smiles)
                computed += 1
            latest[int(compound_id)] = (int(compound_id), *entry)
        if not latest:
            return 0
        with self._write:
            segments, pos, _ = self._snap
            segments = list(segments)
            self._drop(segments, pos, set(latest) & set(pos))
            fresh = list(latest.values())
            if segments and len(segments[-1].ids) < SEGMENT_SIZE:
                room = SEGMENT_SIZE - len(segments[-1].ids)
                head, fresh = fresh[:room], fresh[room:]
                segments[-1] = segments[-1].plus(*zip(*head))
            for start in range(0, len(fresh), SEGMENT_SIZE):
                segments.append(_Segment.build(*zip(*fresh[start:start + SEGMENT_SIZE])))
            self._publish([seg for seg in segments if seg.ids])
        return computed

    def entries(self, compound_ids: Iterable[int] | None = None) -> dict[int, Entry]:
        """The held entries (canonical SMILES, pattern and Morgan fingerprints, atom kinds) of those ids that are held (all
        when ``compound_ids`` is None)."""
        wanted = None if compound_ids is None else set(compound_ids)
        out: dict[int, Entry] = {}
        for seg in self._snap[0]:
            for j, compound_id in enumerate(seg.ids):
                if wanted is None or compound_id in wanted:
                    out[compound_id] = (seg.smiles[j], seg.pattern(j), seg.morgan[j], seg.kind_bits(j))
        return out

    def remove(self, compound_id: int) -> None:
        """Forget one structure (no error when it is not there)."""
        self.remove_many([compound_id])

    def remove_many(self, compound_ids: Iterable[int]) -> None:
        with self._write:
            segments, pos, _ = self._snap
            gone = set(compound_ids) & set(pos)
            if not gone:
                return
            segments = list(segments)
            self._drop(segments, pos, gone)
            self._publish([s for s in segments if s.ids])

    @staticmethod
    def _drop(segments: list[_Segment], pos: dict[int, int], gone: set[int]) -> None:
        for k in sorted({pos[i] for i in gone}):
            segments[k] = segments[k].without(gone)

    def _publish(self, segments: list[_Segment]) -> None:
        pos = {i: k for k, seg in enumerate(segments) for i in seg.ids}
        # One store of a new tuple: a reader holding the old snapshot keeps a consistent view.
        self._snap = (tuple(segments), pos, max(pos) if pos else None)

    # --- searching ----------------------------------------------------------------------------

    def substructure(
        self,
        query: Chem.Mol,
        candidates: Collection[int] | None = None,
        *,
        budget_s: float | None = None,
        limit: int | None = None,
        newest_first: bool = False,
    ) -> list[int]:
        """Ids of the molecules that contain ``query``, ascending (descending with ``newest_first``).

        A molecule is screened out when it lacks an atom of a kind some query atom allows
        (:func:`query_kinds`; a one-atom query on the kind of atom alone is answered there), or
        when the query's pattern-fingerprint bits are not all set in its own (Barnard 1993);
        the rest are confirmed atom by atom (no chirality,
        as the cartridge by default), by RDKit's ``SubstructLibrary.GetMatches`` on
        :attr:`threads` threads, :attr:`chunk` molecules at a time.

        With ``limit``, only the first ``limit`` ids in that order are returned, and matching
        stops as soon as they are certain (segments are visited from the lowest ids, or the
        highest with ``newest_first``): a first page of a common group costs a few chunks, not
        the whole library.

        Raises
        ------
        QueryTooGeneral
            When ``budget_s`` (seconds) is spent before every molecule is checked; the
            clock is read between chunks, so one chunk's matching may run past it.
        """
        segments = self._snap[0]
        keep = None if candidates is None else set(candidates)
        deadline = None if budget_s is None else time.monotonic() + budget_s
        q = Chem.Mol(query)
        q.UpdatePropertyCache(strict=False)  # SMARTS query molecules come without implicit valences
        params = Chem.SubstructMatchParameters()
        params.useChirality = False
        sign = -1 if newest_first else 1
        hits: list[int] = []

        def settled(edge: int) -> bool:
            # With ``limit`` hits found: does the limit-th of them (in the asked order) precede ``edge``,
            # so that no molecule from ``edge`` on can be among the first ``limit``?
            if limit is None or len(hits) < limit:
                return False
            return sign * sorted(hits, key=lambda i: sign * i)[limit - 1] < sign * edge

        allowed, decided = query_kinds(q)
        for seg in sorted(segments, key=lambda sg: -sg.high if newest_first else sg.low):
            if settled(seg.high if newest_first else seg.low):
                break
            if keep is not None and keep.isdisjoint(seg.ids):
                continue
            passing = _screen_kinds(seg.kinds, allowed)
            if keep is not None:
                passing &= np.fromiter((i in keep for i in seg.ids), dtype=bool, count=len(seg.ids))
            order = np.flatnonzero(passing).tolist()  # positions left to match, ascending
            if decided:  # a one-atom query on the kind of atom: the screen is the answer
                hits.extend(seg.ids[k] for k in order)
                continue
            if not order:
                continue
            lib = seg.lib if len(order) == len(seg.ids) else seg.searching(order)
            starts = range(0, len(order), self.chunk)
            for start in (reversed(starts) if newest_first else starts):
                if deadline is not None and time.monotonic() > deadline:
                    raise QueryTooGeneral(
                        f"query too general: matching took longer than the search time budget of "
                        f"{budget_s:g} s (limit 'budget_s'). Name the elements of more atoms, or "
                        "narrow the search with filters.",
                        field="substructure",
                    )
                end = min(start + self.chunk, len(order))
                found = lib.GetMatches(q, start, end, params, numThreads=self.threads, maxResults=-1)
                hits.extend(seg.ids[k] for k in found)
                if seg.ordered:
                    # Chunks of an ordered segment come in id order: the next molecule not yet checked.
                    following = (start - 1) if newest_first else end
                    if 0 <= following < len(order) and settled(seg.ids[order[following]]):
                        break
        result = sorted(set(hits), key=lambda i: sign * i)
        return result if limit is None else result[:limit]

    def similar(
        self, query: Chem.Mol, threshold: float, candidates: Collection[int] | None = None
    ) -> list[tuple[int, float]]:
        """``(id, Tanimoto)`` of the molecules with similarity >= ``threshold``.

        Sorted by similarity (highest first), then id. Tanimoto on the Morgan count vectors
        of :func:`fingerprint` (Willett et al. 1998).
        """
        q_fp = fingerprint(query)
        keep = None if candidates is None else set(candidates)
        hits: list[tuple[int, float]] = []
        for seg in self._snap[0]:
            if keep is None:
                ids, fps = seg.ids, seg.morgan
            else:
                chosen = [k for k, i in enumerate(seg.ids) if i in keep]
                if not chosen:
                    continue
                ids, fps = [seg.ids[k] for k in chosen], [seg.morgan[k] for k in chosen]
            sims = DataStructs.BulkTanimotoSimilarity(q_fp, list(fps))
            hits.extend((i, s) for i, s in zip(ids, sims) if s >= threshold)
        hits.sort(key=lambda h: (-h[1], h[0]))
        return hits


# --- the index's entries on disk -----------------------------------------------------------------
#
# Parsing, canonical SMILES and above all the pattern fingerprint cost about 1.5 ms per molecule (the
# bench's figure), 150 s for 100 000 compounds at every start-up. The entries are a pure function of the
# stored SMILES text and of the RDKit version and fingerprint settings, so they are kept in a file keyed
# by that text: whatever another process registered or archived, a file entry is either right for a
# SMILES or not looked up at all, and an entry missing from the file is simply computed. The file starts
# with a guard (format, RDKit version, fingerprint settings) and ends with its SHA-256; a file that fails
# either is ignored (and later rewritten), never half used.

_FILE_MAGIC = b"REMANENCE-STRUCTURES\n"
_FILE_FORMAT = 2  # 2: the atom kinds of the element screen follow each record's Morgan fingerprint
_RECORD = struct.Struct("<IIII")  # lengths: stored SMILES, canonical SMILES, pattern fp, Morgan fp
_KINDS_BYTES = 8 * ELEMENT_WORDS  # then the atom kinds, fixed size


def _file_guard() -> bytes:
    return json.dumps({"format": _FILE_FORMAT, "rdkit": rdBase.rdkitVersion, "pattern_fp_size": PATTERN_FP_SIZE,
                       "morgan_radius": MORGAN_RADIUS}, sort_keys=True).encode()


def save_entries(path: Path, records: Iterable[tuple[str, Entry]]) -> int:
    """Write ``(stored SMILES, entry)`` records to ``path`` atomically (a reader sees the old file or the new).

    Returns the number of records written.
    """
    guard = _file_guard()
    parts = [_FILE_MAGIC, struct.pack("<I", len(guard)), guard]
    n = 0
    for source, (smiles, pattern, morgan, kinds) in records:
        fields = (source.encode(), smiles.encode(), pattern.ToBinary(), morgan.ToBinary())
        parts.append(_RECORD.pack(*map(len, fields)))
        parts.extend(fields)
        parts.append(int(kinds).to_bytes(_KINDS_BYTES, "little"))
        n += 1
    body = b"".join(parts)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    with open(tmp, "wb") as fh:
        fh.write(body)
        fh.write(hashlib.sha256(body).digest())
    os.replace(tmp, path)
    return n


def load_entries(path: Path) -> dict[str, Entry]:
    """The records of :func:`save_entries` by stored SMILES; empty when the file is missing, was written by
    another RDKit or with other fingerprint settings, or fails its checksum (logged, never raised)."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return {}
    except OSError as exc:
        log.warning("structure index file %s unreadable (%s): building from the registry", path, exc)
        return {}
    body, digest = data[:-32], data[-32:]
    head = len(_FILE_MAGIC) + 4
    if not body.startswith(_FILE_MAGIC) or len(body) < head or hashlib.sha256(body).digest() != digest:
        log.warning("structure index file %s is damaged (checksum): building from the registry", path)
        return {}
    (n_guard,) = struct.unpack_from("<I", body, len(_FILE_MAGIC))
    if body[head:head + n_guard] != _file_guard():
        log.info("structure index file %s is from another RDKit or format: building from the registry", path)
        return {}
    view = memoryview(body)
    out: dict[str, Entry] = {}
    at = head + n_guard
    size = _RECORD.size
    while at < len(body):
        a, b, c, d = _RECORD.unpack_from(body, at)
        at += size
        source = str(view[at:at + a], "utf-8")
        at += a
        smiles = str(view[at:at + b], "utf-8")
        at += b
        pattern = DataStructs.ExplicitBitVect(bytes(view[at:at + c]))
        at += c
        morgan = DataStructs.ULongSparseIntVect(bytes(view[at:at + d]))
        at += d
        kinds = int.from_bytes(view[at:at + _KINDS_BYTES], "little")
        at += _KINDS_BYTES
        out[source] = (smiles, pattern, morgan, kinds)
    return out
