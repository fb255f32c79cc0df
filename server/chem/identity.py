"""Structure input and identity: SMILES or MOL block in, canonical identifiers out.

A compound is registered from whatever a chemist pastes (a SMILES string or a MOL block
exported by a drawing program). :func:`parse_structure` turns it into a sanitised RDKit
molecule or raises :class:`~server.errors.ChemistryError` with a message that says what is
wrong and where; :func:`identify` computes the identifiers the registry stores. Duplicate
detection is done by the caller on the standard InChIKey.

References
----------
* SMILES: D. Weininger, J. Chem. Inf. Comput. Sci. 28, 31 (1988), DOI 10.1021/ci00057a005;
  canonical SMILES as written by RDKit (https://www.rdkit.org; N. Schneider, R. A. Sayle,
  G. A. Landrum, J. Chem. Inf. Model. 55, 2111 (2015), DOI 10.1021/acs.jcim.5b00543).
* MOL block (CTfile V2000/V3000): BIOVIA, "CTfile Formats" (the public format description).
* Standard InChI and InChIKey: S. R. Heller et al., J. Cheminform. 7, 23 (2015),
  DOI 10.1186/s13321-015-0068-4.
* Hill order of formulae: E. A. Hill, J. Am. Chem. Soc. 22, 478 (1900),
  DOI 10.1021/ja02046a005 (carbon first, hydrogen second, then the other elements
  alphabetically; with no carbon, every element, hydrogen included, alphabetically).
* Molar masses from the standard atomic weights in RDKit's periodic table (IUPAC/CIAAW
  standard atomic weights); monoisotopic mass from the most abundant isotope of each element.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Iterator
import logging
import threading
from contextlib import contextmanager
from dataclasses import asdict, dataclass

from rdkit import Chem, rdBase
from rdkit.Chem import Descriptors

from server.errors import ChemistryError

__all__ = ["Identity", "parse_structure", "parse_smiles", "identify", "hill_formula", "captured_rdkit_log"]

# RDKit's SMILES parser prefixes every log line with a "[hh:mm:ss] " time stamp.
_STAMP = re.compile(r"^\[\d\d:\d\d:\d\d\]\s*")
_POSITION = re.compile(r"check for mistakes around position (\d+)")
_VALENCE = re.compile(r"Explicit valence for atom # ?(\d+) (\w+), (\d+), is greater than permitted")

# Atoms SMILES may write without brackets (Weininger 1988, "organic subset"), longest first.
_ORGANIC = ("Cl", "Br", "B", "C", "N", "O", "P", "S", "F", "I", "b", "c", "n", "o", "p", "s", "*")


@dataclass(frozen=True)
class Identity:
    """Identifiers of one registered structure.

    Attributes
    ----------
    smiles : str
        RDKit canonical isomeric SMILES.
    inchi, inchikey : str
        Standard InChI and standard InChIKey (the duplicate key).
    formula : str
        Molecular formula in Hill order, with the net charge appended ("+", "-2").
    mw : float
        Average molar mass in g/mol (standard atomic weights).
    exact_mass : float
        Monoisotopic mass in g/mol (Da).
    heavy_atoms : int
        Number of non-hydrogen atoms.
    fragments : int
        Number of disconnected pieces (2 or more for salts and solvates written with '.').
    """

    smiles: str
    inchi: str
    inchikey: str
    formula: str
    mw: float
    exact_mass: float
    heavy_atoms: int
    fragments: int

    def to_dict(self) -> dict:
        return asdict(self)


# --------------------------------------------------------------------------- parsing


# RDKit's own log redirection (BlockLogs, CaptureErrorLog) is process-global C++ state: two threads
# entering and leaving it out of order leave the logger pointing at a freed stream, and the next RDKit
# message crashes the process (seen as a segmentation fault with requests served from a thread pool).
# So RDKit logs once, for the whole process, into Python's logging module, and each thread collects
# only its own messages there. Nothing is printed to stderr.
_LOG_SETUP_LOCK = threading.Lock()
_LOG_READY = False
_LOCAL = threading.local()
_log = logging.getLogger("remanence.rdkit")


class _ThreadCapture(logging.Handler):
    def emit(self, record: logging.LogRecord) -> None:
        stack = getattr(_LOCAL, "stack", None)
        message = record.getMessage()
        if stack:
            stack[-1].append(message)
        else:
            _log.debug("rdkit: %s", message)


def _route_rdkit_logs() -> None:
    global _LOG_READY
    if _LOG_READY:
        return
    with _LOG_SETUP_LOCK:
        if not _LOG_READY:
            rdBase.LogToPythonLogger()
            logger = logging.getLogger("rdkit")
            logger.handlers[:] = [_ThreadCapture()]
            logger.setLevel(logging.DEBUG)
            logger.propagate = False
            _LOG_READY = True


class RdkitMessages:
    """What RDKit logged in this thread during a ``captured_rdkit_log`` block."""

    def __init__(self) -> None:
        self.lines: list[str] = []

    @property
    def messages(self) -> str:
        return "\n".join(self.lines)


@contextmanager
def captured_rdkit_log() -> Iterator[RdkitMessages]:
    """Collect RDKit's messages from this thread (thread-safe; nothing goes to stderr).

    The errors are turned into ChemistryError messages by the callers, so nothing is lost.
    """
    _route_rdkit_logs()
    capture = RdkitMessages()
    stack = _LOCAL.__dict__.setdefault("stack", [])
    stack.append(capture.lines)
    try:
        yield capture
    finally:
        stack.pop()


@contextmanager
def quiet_rdkit() -> Iterator[None]:
    """Keep RDKit's warnings off stderr for a block (thread-safe)."""
    with captured_rdkit_log():
        yield


def _rdkit_messages(captured: str) -> list[str]:
    """Split a captured RDKit log into message lines without time stamps."""
    lines = [_STAMP.sub("", line).rstrip() for line in captured.splitlines()]
    return [line for line in lines if line.strip()]


def _smiles_tokens(smiles: str) -> tuple[list[int], dict[str, int]] | None:
    """Character positions (0-based) of the atoms of a SMILES, and ring labels left open.

    Returns ``None`` when the string holds something this small scanner does not know
    (the caller then falls back to RDKit's own words). The open-ring dict maps each
    ring-closure label that is never closed to the position where it was opened.
    """
    atoms: list[int] = []
    open_rings: dict[str, int] = {}
    i = 0
    n = len(smiles)
    while i < n:
        ch = smiles[i]
        if ch == "[":
            end = smiles.find("]", i)
            if end < 0:
                return None
            atoms.append(i)
            i = end + 1
            continue
        matched = next((sym for sym in _ORGANIC if smiles.startswith(sym, i)), None)
        if matched is not None:
            atoms.append(i)
            i += len(matched)
            continue
        if ch.isdigit() or ch == "%":
            if ch == "%":
                if smiles.startswith("%(", i):
                    end = smiles.find(")", i)
                    if end < 0:
                        return None
                    label, width = smiles[i + 2 : end], end + 1 - i
                else:
                    label, width = smiles[i + 1 : i + 3], 3
                    if len(label) != 2 or not label.isdigit():
                        return None
            else:
                label, width = ch, 1
            if label in open_rings:
                del open_rings[label]
            else:
                open_rings[label] = i
            i += width
            continue
        if ch in "-=#$:/\\().~":
            i += 1
            continue
        return None
    return atoms, open_rings


def _describe_smiles_failure(smiles: str, captured: str) -> str:
    """Turn RDKit's SMILES parse log into one sentence a chemist can act on."""
    messages = _rdkit_messages(captured)
    rdkit_words = [
        m.replace("SMILES Parse Error: ", "")
        for m in messages
        if m.startswith("SMILES Parse Error") and "Failed parsing SMILES" not in m
        and "check for mistakes" not in m
    ]
    position = next((int(m.group(1)) for m in map(_POSITION.search, messages) if m), None)
    detail = "; ".join(w.split(" for input:")[0].split(" while parsing:")[0] for w in rdkit_words)
    detail = detail or "RDKit could not read it"
    if "unclosed ring" in detail:
        scan = _smiles_tokens(smiles)
        if scan is not None and scan[1]:
            by_place = sorted(scan[1].items(), key=lambda kv: kv[1])
            opened = ", ".join(f"'{label}' opened at character {pos + 1}" for label, pos in by_place)
            noun = "label" if len(by_place) == 1 else "labels"
            verb = "is" if len(by_place) == 1 else "are"
            return f"SMILES has an unclosed ring: ring-closure {noun} {opened} {verb} never closed."
        return "SMILES has an unclosed ring: a ring-closure digit is opened but never closed."
    if position is not None:
        pointer = smiles[max(0, position - 6) : position + 5]
        hint = ""
        char = smiles[position - 1] if 0 < position <= len(smiles) else ""
        opening = smiles.rfind("[", 0, position)
        closing = smiles.find("]", opening) if opening >= 0 else -1
        if opening >= 0 and (closing < 0 or closing >= position - 1) and "]" not in smiles[opening:position - 1]:
            if closing < 0:
                hint = f" The bracket atom opened at character {opening + 1} is never closed with ']'."
            else:
                hint = (
                    f" The bracket atom '{smiles[opening : closing + 1]}' is not valid: check the "
                    "element symbol, charge and H count."
                )
        elif char.isalpha():
            hint = (
                f" '{char}' is not an atom SMILES can write bare: only B, C, N, O, P, S, F, Cl, Br, I "
                "(lower case when aromatic) go without brackets; write others as [Se], [Si], [nH]."
            )
        return f"SMILES {detail} at character {position} (near '{pointer}').{hint}"
    return f"SMILES could not be read: {detail}."


def _atom_place(mol: Chem.Mol, idx: int, smiles: str | None) -> str:
    """'atom 4 (N, character 5 of the SMILES)': 1-based atom number, element, where written."""
    symbol = mol.GetAtomWithIdx(idx).GetSymbol()
    where = ""
    if smiles is not None:
        scan = _smiles_tokens(smiles)
        # Atoms are numbered in the order they are written; only trust the map when the
        # scanner found exactly RDKit's atoms.
        if scan is not None and len(scan[0]) == mol.GetNumAtoms():
            where = f", character {scan[0][idx] + 1} of the SMILES"
    return f"atom {idx + 1} ({symbol}{where})"


def _describe_problems(mol: Chem.Mol, smiles: str | None) -> list[str]:
    """Messages for RDKit's sanitisation problems (valence, aromaticity) of an unsanitised molecule."""
    out = []
    with captured_rdkit_log():
        found = Chem.DetectChemistryProblems(mol)
    for problem in found:
        kind = problem.GetType()
        text = problem.Message()
        if kind == "AtomValenceException":
            idx = problem.GetAtomIdx()
            match = _VALENCE.search(text)
            valence = f" has {match.group(3)} bonds" if match else " has too many bonds"
            out.append(
                f"Valence error: {_atom_place(mol, idx, smiles)}{valence}, more than "
                f"{mol.GetAtomWithIdx(idx).GetSymbol()} allows; check bond orders, charges and "
                f"hydrogen counts (RDKit: {text}; RDKit counts atoms from 0)."
            )
        elif kind == "KekulizeException":
            atoms = ", ".join(str(i + 1) for i in problem.GetAtomIndices())
            out.append(
                f"Aromaticity error: atoms {atoms} are written aromatic but cannot be given "
                "alternating single and double bonds; check the ring size, lower-case atoms and "
                f"[nH] on pyrrole-type nitrogens (RDKit: {text})."
            )
        elif kind == "AtomKekulizeException":
            out.append(
                f"Aromaticity error: {_atom_place(mol, problem.GetAtomIdx(), smiles)} is written "
                f"aromatic outside a ring (RDKit: {text})."
            )
        else:
            out.append(f"RDKit cannot accept this structure: {text}")
    return out


def _reject_dummies(mol: Chem.Mol, field: str) -> None:
    dummies = [a.GetIdx() + 1 for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if dummies:
        where = ", ".join(str(i) for i in dummies)
        raise ChemistryError(
            f"The structure has {len(dummies)} attachment point(s) or query atom(s) ('*', R) at "
            f"atom(s) {where}: that is a scaffold, not a compound. Register the compound with its "
            "side chains in place (the scaffold builder can attach them).",
            field=field,
        )


def parse_smiles(text: str, *, allow_dummies: bool, field: str = "smiles") -> Chem.Mol:
    """Parse and sanitise one SMILES, raising ChemistryError(field=field) with a readable message.

    Shared by compounds (``allow_dummies=False``: ``*`` is rejected) and scaffolds or
    side-chain fragments (``allow_dummies=True``). See :func:`parse_structure`.
    """
    smiles = text.strip()
    if not smiles:
        raise ChemistryError("No structure given: paste a SMILES or a MOL block.", field=field)
    space = re.search(r"\s", smiles)
    if space:
        raise ChemistryError(
            f"SMILES must be one string without spaces; found a space at character {space.start() + 1}. "
            "Remove names or comments after the SMILES.",
            field=field,
        )
    with captured_rdkit_log() as capture:
        raw = Chem.MolFromSmiles(smiles, sanitize=False)
    if raw is None:
        raise ChemistryError(_describe_smiles_failure(smiles, capture.messages), field=field)
    problems = _describe_problems(raw, smiles)
    if problems:
        raise ChemistryError(" ".join(problems), field=field)
    if not allow_dummies:
        _reject_dummies(raw, field)
    # Parse again with full sanitisation so stereochemistry is perceived exactly as
    # RDKit does for a normal SMILES read.
    with captured_rdkit_log() as capture:
        mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        words = " ".join(_rdkit_messages(capture.messages)) or "no reason given"
        raise ChemistryError(f"RDKit cannot accept this SMILES: {words}", field=field)
    if mol.GetNumAtoms() == 0:
        raise ChemistryError("The SMILES contains no atoms.", field=field)
    return mol


_COUNTS = re.compile(r"^.*\bV(2000|3000)\s*$")


def _is_molblock(text: str) -> bool:
    return "\n" in text.strip() or "M  END" in text or "V2000" in text or "V3000" in text


def _check_v2000(lines: list[str], counts_at: int) -> None:
    """Check the layout of a V2000 connection table; raise with the 1-based line number."""
    counts = lines[counts_at]
    line_no = counts_at + 1
    try:
        n_atoms = int(counts[0:3])
        n_bonds = int(counts[3:6])
    except ValueError:
        raise ChemistryError(
            f"MOL block counts line is malformed: '{counts.rstrip()}'. Its first two 3-character "
            "fields must be the numbers of atoms and bonds.",
            field="molblock",
            line=line_no,
        ) from None
    if n_atoms == 0:
        raise ChemistryError("MOL block declares no atoms.", field="molblock", line=line_no)
    first_atom = counts_at + 1
    for k in range(n_atoms):
        i = first_atom + k
        if i >= len(lines) or lines[i].startswith("M  "):
            raise ChemistryError(
                f"MOL block is truncated: the counts line declares {n_atoms} atoms but only {k} "
                "atom lines follow.",
                field="molblock",
                line=i + 1,
            )
        fields = lines[i].split()
        try:
            [float(v) for v in fields[:3]]
            ok = len(fields) >= 4
        except ValueError:
            ok = False
        if not ok:
            raise ChemistryError(
                f"MOL block atom line {k + 1} should hold x, y, z and an element symbol: "
                f"'{lines[i].rstrip()}'.",
                field="molblock",
                line=i + 1,
            )
    first_bond = first_atom + n_atoms
    for k in range(n_bonds):
        i = first_bond + k
        if i >= len(lines) or lines[i].startswith("M  "):
            raise ChemistryError(
                f"MOL block is truncated: the counts line declares {n_bonds} bonds but only {k} "
                "bond lines follow.",
                field="molblock",
                line=i + 1,
            )
        try:
            a, b = int(lines[i][0:3]), int(lines[i][3:6])
        except ValueError:
            raise ChemistryError(
                f"MOL block bond line {k + 1} should start with two atom numbers: '{lines[i].rstrip()}'.",
                field="molblock",
                line=i + 1,
            ) from None
        if not (1 <= a <= n_atoms and 1 <= b <= n_atoms):
            raise ChemistryError(
                f"MOL block bond line {k + 1} joins atoms {a} and {b}, but there are only {n_atoms} atoms.",
                field="molblock",
                line=i + 1,
            )
    if not any(line.startswith("M  END") for line in lines[first_bond + n_bonds :]):
        raise ChemistryError(
            "MOL block is truncated: the closing 'M  END' line is missing.",
            field="molblock",
            line=len(lines),
        )


def _check_v3000(lines: list[str]) -> None:
    markers = (
        "M  V30 BEGIN CTAB", "M  V30 COUNTS", "M  V30 BEGIN ATOM", "M  V30 END ATOM", "M  V30 END CTAB", "M  END"
    )
    for marker in markers:
        if not any(line.startswith(marker) for line in lines):
            raise ChemistryError(
                f"V3000 MOL block is incomplete: the '{marker}' line is missing.", field="molblock"
            )


def _parse_molblock(text: str) -> Chem.Mol:
    lines = text.replace("\r\n", "\n").replace("\r", "\n").rstrip().split("\n")
    counts_at = next((i for i, line in enumerate(lines) if _COUNTS.match(line)), None)
    if counts_at is None:
        raise ChemistryError(
            "Multi-line input is neither a SMILES (one line) nor a MOL block: no counts line "
            "ending in V2000 or V3000 was found (it is the fourth line of a MOL block).",
            field="molblock",
        )
    # The three header lines may be blank; a paste that lost them is realigned.
    if counts_at < 3:
        lines = [""] * (3 - counts_at) + lines
        counts_at = 3
    elif counts_at > 3:
        lines = lines[counts_at - 3 :]
        counts_at = 3
    if lines[counts_at].rstrip().endswith("V2000"):
        _check_v2000(lines, counts_at)
    else:
        _check_v3000(lines)
    block = "\n".join(lines) + "\n"
    with captured_rdkit_log():
        raw = Chem.MolFromMolBlock(block, sanitize=False, removeHs=False)
    if raw is None:
        raise ChemistryError(
            "RDKit could not read the MOL block (its layout passed the basic checks: look for an "
            "unknown element symbol, a bad bond type or a malformed property line).",
            field="molblock",
        )
    problems = _describe_problems(raw, None)
    if problems:
        raise ChemistryError(" ".join(problems), field="molblock")
    _reject_dummies(raw, "molblock")
    with captured_rdkit_log():
        mol = Chem.MolFromMolBlock(block)
    if mol is None:
        raise ChemistryError("RDKit could not sanitise the MOL block.", field="molblock")
    return mol


def parse_structure(text: str) -> Chem.Mol:
    """Read a SMILES or a MOL block into a sanitised RDKit molecule.

    Parameters
    ----------
    text : str
        A SMILES string (one line) or a V2000/V3000 MOL block (several lines, a counts
        line ending in V2000/V3000, closed by ``M  END``).

    Returns
    -------
    rdkit.Chem.Mol
        Sanitised molecule, implicit hydrogens.

    Raises
    ------
    ChemistryError
        ``field="smiles"`` or ``field="molblock"``: empty input, a SMILES syntax error
        (with the character position RDKit reports), an unclosed ring (with the label),
        a valence or aromaticity error (naming the atom by element and 1-based number),
        a malformed or truncated MOL block (with the line), or attachment points ``*``.

    Notes
    -----
    Several fragments (salts, solvates: ``'.'`` in SMILES) are accepted; :func:`identify`
    reports how many. Valence checking is RDKit's sanitisation (default valence model).
    """
    if text is None or not text.strip():
        raise ChemistryError("No structure given: paste a SMILES or a MOL block.", field="smiles")
    if _is_molblock(text):
        return _parse_molblock(text)
    return parse_smiles(text, allow_dummies=False)


# --------------------------------------------------------------------------- identity


def hill_formula(mol: Chem.Mol) -> str:
    """Molecular formula in Hill order, net charge appended (e.g. ``"C2H6O"``, ``"ClH"``, ``"CH6N+"``).

    Hill (J. Am. Chem. Soc. 22, 478 (1900)): with carbon present, C first, then H, then
    the other elements alphabetically; without carbon, all elements alphabetically,
    hydrogen included. Isotope labels are counted as their element. RDKit's
    ``CalcMolFormula`` puts H right after C or first, which differs from Hill for
    carbon-free compounds of elements that sort before H (HCl is "ClH" in Hill order).
    """
    counts: Counter[str] = Counter()
    charge = 0
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            continue
        counts[atom.GetSymbol()] += 1
        counts["H"] += atom.GetTotalNumHs()
        charge += atom.GetFormalCharge()
    counts = Counter({k: v for k, v in counts.items() if v})
    if "C" in counts:
        order = ["C"] + (["H"] if "H" in counts else []) + sorted(k for k in counts if k not in ("C", "H"))
    else:
        order = sorted(counts)
    formula = "".join(f"{el}{counts[el] if counts[el] > 1 else ''}" for el in order)
    if charge:
        sign = "+" if charge > 0 else "-"
        formula += sign if abs(charge) == 1 else f"{sign}{abs(charge)}"
    return formula


def formula_runs(formula: str) -> list[tuple[str, bool]]:
    """A formula as it is printed: runs of text, each marked True where it is subscript.

    ``C33H36O6`` -> ``[("C", False), ("33", True), ("H", False), ...]``; a decimal count (a solvate's
    ``O6.5``) stays one subscript; a middle dot and what follows a space are ordinary text, and a leading
    count (``0.5H2O``) is a multiplier, not a subscript. A trailing charge (``+``, ``2-``) is left as text;
    callers that print superscripts handle it.
    """
    runs: list[tuple[str, bool]] = []
    for piece in re.finditer(r"(\d+(?:\.\d+)?)|([^\d]+)", formula):
        digits, text = piece.groups()
        if digits is not None:
            before = formula[:piece.start()]
            sub = bool(before) and (before[-1].isalpha() or before[-1] == ")")
            runs.append((digits, sub))
        else:
            runs.append((text, False))
    merged: list[tuple[str, bool]] = []
    for text, sub in runs:
        if merged and merged[-1][1] == sub:
            merged[-1] = (merged[-1][0] + text, sub)
        else:
            merged.append((text, sub))
    return merged


_SUBSCRIPT_DIGITS = str.maketrans("0123456789.", "₀₁₂₃₄₅₆₇₈₉.")


def formula_html(formula: str) -> str:
    """``C27H24O6`` -> ``C<sub>27</sub>H<sub>24</sub>O<sub>6</sub>`` (text escaped), as pages and reports print
    it; a trailing charge as a superscript. The one presentation of a formula in HTML and Markdown."""
    from html import escape

    body, charge = re.match(r"(.*?)([+-]\d*)?$", formula).groups()
    out = "".join(f"<sub>{escape(t)}</sub>" if sub else escape(t) for t, sub in formula_runs(body))
    return out + (f"<sup>{escape(charge)}</sup>" if charge else "")


def formula_unicode(formula: str) -> str:
    """``C27H24O6`` -> ``C₂₇H₂₄O₆``: the subscripts as Unicode characters, for text that cannot carry markup
    (a PDF page drawn as text)."""
    return "".join(t.translate(_SUBSCRIPT_DIGITS) if sub else t for t, sub in formula_runs(formula))


def identify(mol: Chem.Mol) -> Identity:
    """Canonical identifiers and masses of a sanitised molecule.

    Parameters
    ----------
    mol : rdkit.Chem.Mol
        Output of :func:`parse_structure` (or any sanitised molecule without dummy atoms).

    Returns
    -------
    Identity
        Canonical isomeric SMILES, standard InChI/InChIKey, Hill formula, average molar
        mass ``mw`` (g/mol), monoisotopic ``exact_mass`` (g/mol), heavy-atom and fragment
        counts.

    Raises
    ------
    ChemistryError
        For attachment points ``*`` (a scaffold, not a compound) or when the InChI
        library cannot make an InChI for the structure.

    Notes
    -----
    Two spellings of one structure (aromatic or Kekulé, any atom order) give the same
    canonical SMILES and InChIKey; the InChIKey is the duplicate key.
    """
    _reject_dummies(mol, "smiles")
    plain = Chem.RemoveHs(mol)
    with captured_rdkit_log() as capture:
        inchi = Chem.MolToInchi(plain)
    if not inchi:
        words = " ".join(_rdkit_messages(capture.messages)) or "no reason given"
        raise ChemistryError(f"No InChI could be made for this structure: {words}", field="smiles")
    return Identity(
        smiles=Chem.MolToSmiles(plain, isomericSmiles=True),
        inchi=inchi,
        inchikey=Chem.InchiToInchiKey(inchi),
        formula=hill_formula(plain),
        mw=float(Descriptors.MolWt(plain)),
        exact_mass=float(Descriptors.ExactMolWt(plain)),
        heavy_atoms=plain.GetNumHeavyAtoms(),
        fragments=len(Chem.GetMolFrags(plain)),
    )
