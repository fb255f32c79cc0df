"""A batch's identity evidence (HRMS, elemental analysis) and the characterisation text for a paper's SI.

The summary reads the batch's live ``hrms`` and ``elemental`` measurements; the paragraph prints, as
journals do, the formula, HRMS calculated against found m/z with the ion (four decimals) and the
elemental analysis calculated against found percentages (two decimals), in plain text and in Markdown
(sub- and superscripts as HTML tags, which Markdown passes through).
"""

from __future__ import annotations

import re
from typing import Any, Optional

from sqlmodel import Session, select

from .. import access
from ..chem.identity import formula_runs
from ..models import Batch, Compound, Measurement
from .registry import get_batch

IDENTITY_KINDS = ("hrms", "elemental")


def _latest(ms: list[Measurement], kind: str) -> Optional[Measurement]:
    """The newest live measurement of ``kind`` (by id: ids grow with time)."""
    rows = [m for m in ms if m.kind == kind]
    return max(rows, key=lambda m: m.id) if rows else None


def _formula_md(formula: str) -> str:
    """``C27H24O6.5`` -> ``C<sub>27</sub>H<sub>24</sub>O<sub>6.5</sub>``; a trailing charge as superscript."""
    body, charge = re.match(r"(.*?)([+-]\d*)?$", formula).groups()
    out = "".join(f"<sub>{t}</sub>" if sub else t for t, sub in formula_runs(body))
    return out + (f"<sup>{charge}</sup>" if charge else "")


def _ion_words(ion: str, md: bool) -> str:
    """``[M+Na]+`` -> ``[M + Na]+`` (``M+.`` -> ``M+•``), as printed; Markdown puts the charge up."""
    if ion == "M+.":
        return "M<sup>+•</sup>" if md else "M+•"
    core, charge = ion[:-1], ion[-1]
    core = core.replace("+", " + ").replace("-", " − ")
    return f"{core}<sup>{charge}</sup>" if md else f"{core}{charge}"


def _ea_formula(res: dict[str, Any]) -> str:
    """The formula the percentages were calculated for: ``C27H24O6·0.5H2O`` when a solvate is included."""
    solvate = res.get("solvate") or ""
    if not solvate:
        return res["formula"]
    parts = [p.split(" ", 1) for p in solvate.split(" + ")]
    return res["formula"] + "".join(f"·{n}{f}" for n, f in parts)


def si_paragraph(formula: str, hrms: Optional[dict[str, Any]], elemental: Optional[dict[str, Any]], *,
                 markdown: bool = False) -> str:
    """The characterisation lines of a supporting-information entry.

    ``hrms`` and ``elemental`` are stored results of those kinds (or None). A found value that does not
    exist (no peak at the ion) is not printed: the line then says "not found".
    """
    f = _formula_md if markdown else (lambda s: s)
    parts = [f"Formula: {f(formula)}."]
    if hrms:
        ion_formula = re.sub(r"[+-]$", "", hrms["ion_formula"])
        found = f"{hrms['found_mz']:.4f}" if hrms.get("found_mz") is not None else "not found"
        parts.append(f"HRMS m/z: {_ion_words(hrms['ion'], markdown)} calcd for {f(ion_formula)}"
                     f"{'<sup>' + hrms['ion'][-1] + '</sup>' if markdown else hrms['ion'][-1]} "
                     f"{hrms['calc_mz']:.4f}; found {found}.")
    if elemental:
        els = list(elemental["calc_pct"])
        calc = "; ".join(f"{el}, {elemental['calc_pct'][el]:.2f}" for el in els)
        found = "; ".join(f"{el}, {elemental['found_pct'][el]:.2f}" for el in els)
        parts.append(f"Anal. Calcd for {f(_ea_formula(elemental))}: {calc}. Found: {found}.")
    return " ".join(parts)


def identity_summary(session: Session, batch: Batch, *, formula: Optional[str]) -> dict[str, Any]:
    """Which identity evidence the batch has and what it says, with the SI paragraph.

    ``formula`` is the registered formula, or None when the caller may not see the structure (an
    embargoed compound): then the calculated values, ion formulae and the paragraph are left out and
    only the passes are given.
    """
    ms = session.exec(select(Measurement).where(Measurement.batch_id == batch.id,
                                                Measurement.kind.in_(IDENTITY_KINDS),
                                                Measurement.archived == False)  # noqa: E712
                      .order_by(Measurement.id)).all()
    hrms, ea = _latest(ms, "hrms"), _latest(ms, "elemental")
    evidence: dict[str, Any] = {}
    for kind, m in (("hrms", hrms), ("elemental", ea)):
        if m is None:
            evidence[kind] = None
            continue
        shown = {"measurement": m.id, "pass": m.results.get("pass")}
        if formula is not None:
            keep = (("ion", "ion_formula", "calc_mz", "found_mz", "error_ppm", "tolerance_ppm", "isotope_score")
                    if kind == "hrms" else ("calc_formula", "solvate", "calc_pct", "found_pct", "delta_pct"))
            shown.update({k: m.results.get(k) for k in keep})
        evidence[kind] = shown
    passes = [e["pass"] for e in evidence.values() if e is not None]
    status = ("no identity evidence" if not passes else
              "evidence contradicts the structure" if not all(passes) else
              "HRMS and elemental analysis agree" if len(passes) == 2 else "partial evidence agrees")
    out: dict[str, Any] = {"batch": batch.code, "status": status, "evidence": evidence,
                           "si_text": None, "si_markdown": None}
    if formula is not None and passes:
        h, e = (hrms.results if hrms else None), (ea.results if ea else None)
        out["si_text"] = si_paragraph(formula, h, e)
        out["si_markdown"] = si_paragraph(formula, h, e, markdown=True)
    return out


def batch_identity(*, session: Session, code: str, actor: Optional[access.Actor]) -> dict[str, Any]:
    """:func:`identity_summary` of batch ``code``; the formula only for a caller who may see the structure
    (:func:`server.access.may_see_structure`)."""
    batch = get_batch(session, code)
    compound = session.get(Compound, batch.compound_id)
    visible = access.may_see_structure(actor, compound)
    return identity_summary(session, batch, formula=compound.formula if visible else None)
