"""2D structure drawings as inline SVG.

Coordinates come from RDKit's CoordGen (better ring-system layouts for fused polycycles
such as the bowl cores than the default depictor) and the drawing from
``rdMolDraw2D.MolDraw2DSVG``. The SVG has no XML declaration, so it can be placed straight
into an HTML page, and no external references (text is drawn as paths). Attachment points
``[*:n]`` of scaffolds are drawn as R1 ... Rn. The same input always gives the same SVG.

References
----------
RDKit, rdkit.Chem.Draw.rdMolDraw2D and rdkit.Chem.rdCoordGen (https://www.rdkit.org).
"""

from __future__ import annotations

import html
import re

from rdkit import Chem
from rdkit.Chem import rdCoordGen
from rdkit.Chem.Draw import rdMolDraw2D

from server.chem.identity import captured_rdkit_log, parse_smiles

__all__ = ["depict_svg", "thumbnail_svg"]

_XML_DECLARATION = re.compile(r"^<\?xml[^>]*\?>\s*")
_BACKGROUNDS = {"white": (1.0, 1.0, 1.0, 1.0), "transparent": None}


def _prepare(mol_or_smiles: Chem.Mol | str) -> Chem.Mol:
    """A drawing copy with 2D coordinates and R labels on attachment points."""
    if isinstance(mol_or_smiles, str):
        mol = parse_smiles(mol_or_smiles, allow_dummies=True)
    else:
        mol = Chem.Mol(mol_or_smiles)
    mol = Chem.RemoveHs(mol) if mol.GetNumAtoms() > 1 else mol
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() == 0:
            number = atom.GetAtomMapNum()
            atom.SetProp("atomLabel", f"R<sub>{number}</sub>" if number else "R")
            atom.SetAtomMapNum(0)
    with captured_rdkit_log():
        # Conformers of the caller's molecule are left alone: we work on a copy.
        mol.RemoveAllConformers()
        rdCoordGen.AddCoords(mol)
    return mol


def _render(
    mol_or_smiles: Chem.Mol | str,
    *,
    width: int,
    height: int,
    legend: str | None,
    background: str,
    bond_width: float,
    padding: float,
) -> str:
    if background not in _BACKGROUNDS:
        raise ValueError(f"background must be one of {sorted(_BACKGROUNDS)}, not {background!r}")
    mol = _prepare(mol_or_smiles)
    drawer = rdMolDraw2D.MolDraw2DSVG(int(width), int(height))
    options = drawer.drawOptions()
    colour = _BACKGROUNDS[background]
    if colour is None:
        options.clearBackground = False
    else:
        options.setBackgroundColour(colour)
    options.bondLineWidth = bond_width
    options.padding = padding
    options.includeMetadata = False
    with captured_rdkit_log():
        drawer.DrawMolecule(mol, legend=legend or "")
    drawer.FinishDrawing()
    svg = _XML_DECLARATION.sub("", drawer.GetDrawingText())
    title = f"<title>{html.escape(legend)}</title>" if legend else ""
    # role/aria and a <title> make the drawing readable by screen readers; the title is
    # the only place the legend appears as text, hence the escaping.
    return re.sub(r"<svg\b", "<svg role='img'", svg, count=1).replace(
        "<!-- END OF HEADER -->", f"<!-- END OF HEADER -->{title}", 1
    )


def depict_svg(
    mol_or_smiles: Chem.Mol | str,
    *,
    width: int = 300,
    height: int = 220,
    legend: str | None = None,
    background: str = "white",
) -> str:
    """SVG drawing of a compound or scaffold, ready to inline in HTML.

    Parameters
    ----------
    mol_or_smiles : rdkit.Chem.Mol or str
        A molecule, or a SMILES (attachment points ``[*:n]`` allowed; drawn as Rn).
    width, height : int
        Size in pixels.
    legend : str, optional
        Caption under the drawing (e.g. the compound code); also the SVG ``<title>``,
        HTML-escaped.
    background : {"white", "transparent"}

    Returns
    -------
    str
        ``<svg ...>...</svg>`` without XML declaration.

    Raises
    ------
    ChemistryError
        For a SMILES that cannot be read (see ``identity.parse_structure``).
    """
    return _render(
        mol_or_smiles, width=width, height=height, legend=legend, background=background,
        bond_width=2.0, padding=0.05,
    )


def thumbnail_svg(
    mol_or_smiles: Chem.Mol | str,
    *,
    width: int = 120,
    height: int = 90,
    legend: str | None = None,
    background: str = "white",
) -> str:
    """Small SVG (120 x 90 px by default) with thin bonds, for tables and lists.

    Same parameters and output as :func:`depict_svg`.
    """
    return _render(
        mol_or_smiles, width=width, height=height, legend=legend, background=background,
        bond_width=1.0, padding=0.03,
    )


def depict_png(mol_or_smiles: Chem.Mol | str, *, width: int = 600, height: int = 440) -> bytes:
    """PNG drawing of a compound (white background), for pages that cannot embed SVG (the PDF summary).

    Same preparation as :func:`depict_svg` (2D coordinates from RDKit's CoordGen, R labels).
    """
    mol = _prepare(mol_or_smiles)
    drawer = rdMolDraw2D.MolDraw2DCairo(int(width), int(height))
    options = drawer.drawOptions()
    options.setBackgroundColour(_BACKGROUNDS["white"])
    options.bondLineWidth = 2.0
    options.padding = 0.05
    with captured_rdkit_log():
        drawer.DrawMolecule(mol)
    drawer.FinishDrawing()
    return drawer.GetDrawingText()
