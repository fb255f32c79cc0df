"""A batch's identity evidence (HRMS, elemental analysis, NMR spectra) and the characterisation text for a
paper's SI.

The summary reads the batch's live ``hrms``, ``elemental`` and ``nmr_spectrum`` measurements; the paragraph
prints, as journals do, the formula, the NMR signals (shift to two decimals, integral in whole atoms, with
nucleus, frequency and solvent), HRMS calculated against found m/z with the ion (four decimals) and the
elemental analysis calculated against found percentages (two decimals), in plain text and in Markdown
(sub- and superscripts as HTML tags, which Markdown passes through). An NMR spectrum passes or fails
nothing: it is present, and its signal count stands beside the structure's expected count as a check.
"""

from __future__ import annotations

import re
from typing import Any, Optional

from sqlmodel import Session, select

from .. import access
from ..chem.identity import formula_html
from ..errors import InputError
from ..models import Batch, Compound, Measurement, utcnow
from ..precision import decimals_within
from . import audit, corrections, stats, verdicts
from .accounts import shown_name, shown_text
from .errors import Archived
from .measurements import refresh_derived
from .registry import get_batch

IDENTITY_KINDS = ("hrms", "elemental", "nmr_spectrum")
#: Evidence statuses under which a member may confirm a batch's identity without saying why.
AGREEING = ("HRMS and elemental analysis agree", "partial evidence agrees")
MAX_NOTE = 2000


def _latest(ms: list[Measurement], kind: str) -> Optional[Measurement]:
    """The newest live measurement of ``kind`` (by id: ids grow with time)."""
    rows = [m for m in ms if m.kind == kind]
    return max(rows, key=lambda m: m.id) if rows else None


def _formula_md(formula: str) -> str:
    """``C27H24O6.5`` -> ``C<sub>27</sub>H<sub>24</sub>O<sub>6.5</sub>``; a trailing charge as superscript."""
    return formula_html(formula)


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


def _nucleus_words(nucleus: Optional[str], md: bool) -> str:
    """``1H`` -> ``1H`` (Markdown ``<sup>1</sup>H``), as printed before "NMR"."""
    m = re.fullmatch(r"\^?(\d+)([A-Z][a-z]?)", (nucleus or "1H").strip())
    if not m:
        return nucleus or ""
    return f"<sup>{m.group(1)}</sup>{m.group(2)}" if md else f"{m.group(1)}{m.group(2)}"


def _j_uncertainty(s: dict[str, Any], j_err_Hz: Optional[float]) -> Optional[float]:
    """The J uncertainty a signal's digits follow: the larger of the spectrum's (digital resolution) and the
    signal's own (line fit and resolution, the largest of its J; absent for a J a person entered or a
    result stored before it was kept)."""
    own = [float(u) for u in (s.get("j_err_Hz") or ()) if u is not None]
    known = [u for u in (j_err_Hz, max(own) if own else None) if u is not None]
    return max(known) if known else None


def _coupling_words(s: dict[str, Any], j_err_Hz: Optional[float]) -> str:
    """``d, J = 8.4 Hz``, ``dd, J = 8.4, 2.1 Hz`` or ``s``; J only with the digits its uncertainty allows
    (:func:`server.precision.decimals_within` of :func:`_j_uncertainty`, the larger of the resolution's and
    the line fit's: to 0.1 Hz when it is at most 0.1 Hz, whole hertz when at most 1 Hz, not printed beyond),
    every J of a signal with the same digits, as journals print them."""
    words = s["multiplicity"]
    decimals = decimals_within(_j_uncertainty(s, j_err_Hz))
    if s.get("j_Hz") and decimals is not None:
        words += f", J = {', '.join(f'{j:.{decimals}f}' for j in s['j_Hz'])} Hz"
    return words


def _shift_words(s: dict[str, Any]) -> str:
    """A signal's δ as printed: a multiplet (m) as the range of its lines, high to low with an en dash
    (``7.35–7.28``; ACS Guide to Scholarly Communication / author guidelines, common practice), every
    other multiplicity at its centre (``7.26``), two decimals. An m whose range is one value at two
    decimals, or stored before ranges were kept, prints its centre."""
    high, low = s.get("high_ppm"), s.get("low_ppm")
    if s.get("multiplicity") == "m" and high is not None and low is not None:
        a, b = f"{max(high, low):.2f}", f"{min(high, low):.2f}"
        if a != b:
            return f"{a}–{b}"
    return f"{s['shift_ppm']:.2f}"


def nmr_resolution_note(nmr: dict[str, Any]) -> str:
    """What the J digits of :func:`nmr_line` rest on, said beside the listing: the digital resolution
    (spectral width over the number of points), the standard uncertainty of a J from two line positions
    (resolution / sqrt 6, :mod:`server.analysis.nmr_spectrum`) and the digits it allows."""
    res, err = nmr.get("resolution_Hz"), nmr.get("j_err_Hz")
    if res is None or err is None:
        return "No spectrometer frequency is known: no J is given in hertz."
    decimals = decimals_within(err)
    digits = ("so J is printed to 0.1 Hz" if decimals == 1 else "so J is printed in whole hertz" if decimals == 0
              else "too coarse for J to be printed")
    fewer = [s for s in nmr.get("signals") or () if not s.get("assigned") and s.get("j_Hz")
             and decimals_within(_j_uncertainty(s, err)) != decimals]
    noisy = (f" The line fit leaves J less sure for {len(fewer)} signal{'s' if len(fewer) > 1 else ''}: "
             "printed with fewer digits." if fewer else "")
    return (f"Digital resolution {res:.2g} Hz per point ({nmr.get('points')} points); a J from two line "
            f"positions is known to {err:.2g} Hz, {digits}.{noisy}")


def nmr_line(nmr: dict[str, Any], *, markdown: bool = False) -> str:
    """``1H NMR (400 MHz, CDCl3, 298 K): δ 7.26 (d, J = 8.4 Hz, 2H), 3.95 (s, 18H).`` from a stored
    ``nmr_spectrum`` result (or one with a person's edit laid over it): the sample's signals downfield first,
    shifts to two decimals (an m as its range, :func:`_shift_words`), the multiplicity and J (:func:`_coupling_words`), integrals in whole atoms (as
    journals print them; the fraction when no structure scaled them). A result stored before multiplicities
    were analysed prints none."""
    head = [f"{nmr['spectrometer_MHz']:.0f} MHz" if nmr.get("spectrometer_MHz") else "",
            (_formula_md(nmr["solvent"]) if markdown else nmr["solvent"]) if nmr.get("solvent") else "",
            f"{nmr['t_K']:.0f} K" if nmr.get("t_K") else ""]
    signals = []
    for s in nmr.get("signals") or ():
        if s.get("assigned"):
            continue
        amount = (f"{s['n_H']:.0f}{(nmr.get('nucleus') or 'H').lstrip('^').lstrip('0123456789')}"
                  if s.get("n_H") is not None else f"{100 * s['integral_rel']:.0f} %"
                  if s.get("integral_rel") is not None else "")
        words = [_coupling_words(s, nmr.get("j_err_Hz")) if s.get("multiplicity") else "", amount]
        inner = ", ".join(w for w in words if w)
        signals.append(_shift_words(s) + (f" ({inner})" if inner else ""))
    inner = ", ".join(p for p in head if p)
    return (f"{_nucleus_words(nmr.get('nucleus'), markdown)} NMR{f' ({inner})' if inner else ''}: "
            f"δ {', '.join(signals) if signals else 'no signal of the sample'}.")


def si_paragraph(formula: str, hrms: Optional[dict[str, Any]], elemental: Optional[dict[str, Any]], *,
                 markdown: bool = False, nmr: Optional[dict[str, Any]] = None) -> str:
    """The characterisation lines of a supporting-information entry.

    ``hrms``, ``elemental`` and ``nmr`` are stored results of those kinds (or None). A found value that does
    not exist (no peak at the ion) is not printed: the line then says "not found".
    """
    f = _formula_md if markdown else (lambda s: s)
    parts = [f"Formula: {f(formula)}."]
    if nmr:
        parts.append(nmr_line(nmr, markdown=markdown))
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
    hrms, ea, nmr = _latest(ms, "hrms"), _latest(ms, "elemental"), _latest(ms, "nmr_spectrum")
    evidence: dict[str, Any] = {"nmr_spectrum": _nmr_evidence(nmr, visible=formula is not None)}
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
    passes = [evidence[k]["pass"] for k in ("hrms", "elemental") if evidence[k] is not None]
    status = (("NMR spectrum only" if nmr else "no identity evidence") if not passes else
              "evidence contradicts the structure" if not all(passes) else
              "HRMS and elemental analysis agree" if len(passes) == 2 else "partial evidence agrees")
    out: dict[str, Any] = {"batch": batch.code, "status": status, "evidence": evidence,
                           "identity_confirmed": batch.identity_confirmed, "si_text": None, "si_markdown": None,
                           "si_nmr_note": None}
    if formula is not None and (passes or nmr):
        h, e = (hrms.results if hrms else None), (ea.results if ea else None)
        n = corrections.effective_results(nmr.results, nmr.correction) if nmr else None  # a person's peak list wins
        out["si_text"] = si_paragraph(formula, h, e, nmr=n)
        out["si_markdown"] = si_paragraph(formula, h, e, markdown=True, nmr=n)
        out["si_nmr_note"] = nmr_resolution_note(n) if n else None
    return out


def _nmr_evidence(m: Optional[Measurement], *, visible: bool) -> Optional[dict[str, Any]]:
    """What the batch page shows of its newest NMR spectrum: the conditions and signal count from the file,
    and, only for a caller who may see the structure, the expected count derived from it."""
    if m is None:
        return None
    r = corrections.effective_results(m.results, m.correction)
    shown = {"measurement": m.id, "edited": bool((m.correction or {}).get("results")), "nucleus": r.get("nucleus"), "solvent": r.get("solvent"),
             "spectrometer_MHz": r.get("spectrometer_MHz"), "signals_found": r.get("signals_found")}
    if visible:
        shown.update({"environments_expected": r.get("environments_expected"),
                      "environments_check": r.get("environments_check")})
    return shown


def batch_identity(*, session: Session, code: str, actor: Optional[access.Actor]) -> dict[str, Any]:
    """:func:`identity_summary` of batch ``code``; the formula only for a caller who may see the structure
    (:func:`server.access.may_see_structure`)."""
    batch = get_batch(session, code)
    compound = session.get(Compound, batch.compound_id)
    visible = access.may_see_structure(actor, compound)
    out = identity_summary(session, batch, formula=compound.formula if visible else None)
    out["confirmation"] = confirmation(batch, actor=actor, visible=visible)
    return out


def confirmation(batch: Batch, *, actor: Optional[access.Actor], visible: bool) -> Optional[dict[str, Any]]:
    """Who confirmed the batch's identity, when, and why (None while unconfirmed). The note is free text
    about the compound, so like its notes it is left out for a caller who may not see an embargoed
    structure; names follow :func:`server.services.accounts.shown_name`."""
    if not batch.identity_confirmed:
        return None
    return {"by": shown_name(batch.identity_confirmed_by, actor),
            "at": batch.identity_confirmed_at.isoformat() if batch.identity_confirmed_at else None,
            "note": shown_text(batch.identity_note, actor) if visible else None}


def set_identity(*, session: Session, code: str, confirmed: bool, note: str,
                 actor: access.Actor) -> dict[str, Any]:
    """Confirm (``confirmed=True``) or withdraw the identity of batch ``code``; one commit, one AuditEvent
    (``batch.identity_confirm`` / ``batch.identity_withdraw``) with the state before and after.

    A member confirms on the evidence: when the stored evidence does not agree (none, or an HRMS or EA
    that fails) the note must say what the confirmation rests on; a withdrawal always gives its reason.
    Setting the state the batch already has changes nothing and writes no event. An archived batch -> 409.
    The compound verdict and its stats are derived again (``measurements.refresh_derived``, as for any change of
    evidence): its criterion "identity of every measured batch confirmed" follows.
    """
    batch = get_batch(session, code)
    if batch.archived:
        raise Archived(f"batch {code} is archived: restore it first")
    note = (note or "").strip()
    if len(note) > MAX_NOTE:
        raise InputError(f"the note is longer than {MAX_NOTE} characters", field="note")
    if batch.identity_confirmed == confirmed:
        return batch_identity(session=session, code=code, actor=actor)
    compound = session.get(Compound, batch.compound_id)
    if confirmed and not note and identity_summary(session, batch, formula=None)["status"] not in AGREEING:
        raise InputError("the stored evidence does not show the identity: say in a note what the "
                         "confirmation rests on", field="note")
    if not confirmed and not note:
        raise InputError("say why the confirmation is withdrawn", field="note")
    before = {"identity_confirmed": batch.identity_confirmed, "note": batch.identity_note}
    batch.identity_confirmed = confirmed
    batch.identity_confirmed_at = utcnow() if confirmed else None
    batch.identity_confirmed_by = actor.label if confirmed else ""
    batch.identity_note = note if confirmed else ""
    session.add(batch)
    audit.record(session, actor=actor.label, action="batch.identity_confirm" if confirmed else "batch.identity_withdraw",
                 entity="batch", code=batch.code, compound_id=compound.id, before=before,
                 after={"identity_confirmed": confirmed, "note": note})
    # The identity criterion is part of the verdict: the compound's verdict and figures are derived again
    # through the one path every change of evidence takes (measurements.refresh_derived).
    refresh_derived(session, [], actor=actor.label, compounds_too=[compound])
    session.commit()
    session.refresh(batch)
    return batch_identity(session=session, code=code, actor=actor)


def batch_page(*, session: Session, code: str, actor: Optional[access.Actor]) -> dict[str, Any]:
    """Everything the batch page shows: the batch, its compound's code, the identity summary with its
    confirmation, and the history of confirmations and withdrawals (newest first). For a caller who may
    not see an embargoed structure the batch notes and the confirmation notes are left out, as the
    compound's notes are."""
    from ..models import AuditEvent

    batch = get_batch(session, code)
    compound = session.get(Compound, batch.compound_id)
    visible = access.may_see_structure(actor, compound)
    events = session.exec(select(AuditEvent).where(
        AuditEvent.entity == "batch", AuditEvent.entity_code == batch.code,
        AuditEvent.action.in_(("batch.identity_confirm", "batch.identity_withdraw")))
        .order_by(AuditEvent.id.desc())).all()
    history = [{"at": e.at, "confirmed": e.action == "batch.identity_confirm", "by": shown_name(e.actor, actor),
                "note": shown_text((e.after or {}).get("note", ""), actor) if visible else None} for e in events]
    n_physical = session.exec(select(Measurement.id).where(
        Measurement.batch_id == batch.id, Measurement.kind.not_in(IDENTITY_KINDS),
        Measurement.archived == False)).all()  # noqa: E712
    return {"batch": batch, "compound_code": compound.code, "visible": visible,
            "notes": batch.notes if visible else None,
            "identity": batch_identity(session=session, code=code, actor=actor), "history": history,
            "physical_measurements": len(n_physical), "agreeing": AGREEING}
