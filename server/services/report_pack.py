"""The report pack of one compound: everything a group meeting or a paper's supporting information
needs about it, in one zip.

Contents (paths inside the zip)::

    summary.html, summary.pdf      one page: structure, identity, verdict with its reasons,
                                   barriers, transitions, figures of merit, and the images (file
                                   name, where it hangs, caption, magnification or scale bar,
                                   polarisers, temperature, pixels, SHA-256; thumbnails in the HTML)
    figures/<name>.svg|.pdf        every measurement figure and the compound-level figures
    tables/measurements.csv        figures of merit per measurement (units in the headers)
    tables/barriers.csv            barriers, values rounded to their uncertainty
    tables/transitions.csv         transition temperatures (dielectric peaks, DSC)
    raw/<id>-<filename>            every live measurement's raw file, byte for byte
    cif/<id>-<filename>            the crystal structures (CIF) among them
    attachments/<id>-<filename>    every image on the compound, its batches, samples and measurements,
                                   byte for byte as uploaded (archived ones, and those on archived
                                   batches or measurements, left out; the summary says how many)
    attachments/thumbnails/<id>.jpg
                                   the thumbnail made on upload of each of them (the HTML shows it)
    manifest.json                  every file above with its SHA-256 and size, the analysis
                                   version of each measurement, each image's SHA-256, caption and
                                   metadata, the compound and the time

Numbers are printed at display precision (:mod:`server.precision`): a value with an uncertainty
is rounded to the uncertainty's last digit (JCGM 100:2008, 7.2.6).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import re
import zipfile
from datetime import datetime, timezone
from typing import Any, Optional

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
from jinja2 import Environment, FileSystemLoader, select_autoescape  # noqa: E402
from markupsafe import Markup  # noqa: E402
from sqlmodel import Session  # noqa: E402

from .. import access  # noqa: E402
from ..access import Actor  # noqa: E402
from ..chem import draw  # noqa: E402
from ..kinds import KINDS  # noqa: E402
from ..models import Compound, RawFile  # noqa: E402
from ..package_files import templates_dir  # noqa: E402
from ..plots import summary as summary_plots  # noqa: E402
from ..plots import vector  # noqa: E402
from ..precision import error_key, significant, value_text, with_uncertainty  # noqa: E402
from ..verdict_codes import LABELS  # noqa: E402
from ..chem.identity import formula_html, formula_unicode  # noqa: E402
from . import attachments, barriers, figures_vector, measurements, registry, verdicts  # noqa: E402
from .accounts import hide_people  # noqa: E402
from .errors import Forbidden  # noqa: E402

#: Version of the pack's layout, in the manifest (bumped when paths or columns change).
PACK_VERSION = "report-pack/3"  # 2: attachments/ and the manifest's "attachments"; 3: thumbnails, images in the summary
#: At most this many measurement figures are drawn into one pack (bounded work per request).
MAX_FIGURES = 60


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]", "_", name)[:80] or "file"


def _csv(header: list[str], rows: list[list[Any]]) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue().encode("utf-8")


def _unit_header(label: str, unit: str) -> str:
    return f"{label} ({unit})" if unit else label


def measurement_table(items: list[dict[str, Any]]) -> bytes:
    """One row per measurement: id, kind, batch, T, verdict, then each kind's summary keys with the
    unit in the header and the kind's display digits."""
    columns: list[tuple[str, str, Any]] = []  # (kind, key, ResultKey)
    for kind_name in sorted({m["kind"] for m in items}):
        kind = KINDS.get(kind_name)
        if kind is None:
            continue
        for key in kind.summary_keys:
            rk = kind.result_key(key)
            if any(isinstance(m["results"].get(key), (int, float)) for m in items if m["kind"] == kind_name):
                columns.append((kind_name, key, rk))
    header = ["measurement", "kind", "batch", "T (K)", "verdict", "analysis version"]
    header += [f"{kind} {_unit_header(rk.label, rk.unit)}" for kind, _, rk in columns]
    rows = []
    for m in items:
        apparent = set(m["results"].get("apparent") or ())
        row = [m["id"], m["kind"], m["batch"], significant(m["temperature_K"], 5) if m["temperature_K"] else "",
               (m["verdict"] or "").replace("_", " "), m["analysis_version"]]
        for kind, key, rk in columns:
            value = m["results"].get(key) if m["kind"] == kind else None
            err = m["results"].get(error_key(key, m["results"]) or "") if m["kind"] == kind else None
            text = value_text(value, err, rk.digits) if isinstance(value, (int, float)) else ""
            row.append(f"{text} (apparent)" if text and key in apparent else text)
        rows.append(row)
    return _csv(header, rows)


def barrier_table(rows: list[dict[str, Any]]) -> bytes:
    header = ["method", "energy", "barrier (kcal mol-1)", "uncertainty (kcal mol-1)", "T (K)", "model",
              "measurement", "analysis version"]
    out = []
    for b in rows:
        value, err = with_uncertainty(b["dg_kcal_mol"], b["dg_err_kcal_mol"], 4)
        out.append([b["method"], "ΔE‡ (electronic)" if b["energy"] == "electronic" else "ΔG‡ (free)", value, err,
                    significant(b["t_K"], 5) if b["t_K"] else "", b["model"], b["measurement"] or "",
                    b["analysis_version"]])
    return _csv(header, out)


def transition_table(rows: list[dict[str, Any]]) -> bytes:
    """The transitions as CSV: a value with an uncertainty (a DSC enthalpy) to the uncertainty's last digit
    and the uncertainty beside it (:func:`server.precision.with_uncertainty`), else four significant digits."""
    def value(r: dict[str, Any]) -> list[str]:
        if r.get("err") and r.get("value") is not None:
            return list(with_uncertainty(r["value"], r["err"]))
        return [significant(r["value"], 4), ""]

    return _csv(["measurement", "source", "T (K)", "value", "value uncertainty", "value unit"],
                [[r["measurement"], r["source"], significant(r["t_K"], 5), *value(r), r["unit"]] for r in rows])


def _summary_line(kind_name: str, results: dict[str, Any]) -> str:
    """A measurement's one-line summary (``Kind.summary_text``, value ± error where there is one), with
    plain spaces in units: the PDF's font has no narrow no-break space."""
    kind = KINDS.get(kind_name)
    return kind.summary_text(results, space=" ") if kind is not None else ""


def _identity(c: Any) -> list[tuple[str, str]]:
    return [(k, v) for k, v in (("Formula", c.formula or ""), ("Molar mass", f"{c.mw:.2f} g mol⁻¹" if c.mw else ""),
                                ("Exact mass", f"{c.exact_mass:.4f} Da" if c.exact_mass else ""),
                                ("InChIKey", c.inchikey or ""), ("SMILES", c.smiles or ""),
                                ("Side chains", c.side_chain_summary or "")) if v]


def _verdict(compound: Compound) -> dict[str, Any]:
    read = verdicts.verdict_read(compound)
    computed = read["computed"] or {}
    effective = verdicts.effective_code(compound)
    return {"code": effective, "label": LABELS.get(effective, effective), "computed": computed,
            "override": read["override"], "reason": computed.get("reason", ""),
            "conclusion": computed.get("conclusion"),
            "conflicts": [c.get("message", "") for c in computed.get("conflicts") or []],
            "used": computed.get("used") or []}


def _summary_pdf(data: dict[str, Any], structure_png: Optional[bytes]) -> bytes:
    """The one-page summary as an A4 PDF page (matplotlib text and the RDKit drawing)."""
    with plt.rc_context(vector.STYLE):
        fig = plt.figure(figsize=(21.0 / 2.54, 29.7 / 2.54))
        fig.text(0.07, 0.96, f"{data['code']}  {data['label']}".strip(), fontsize=14, weight="bold", va="top")
        if structure_png:
            ax = fig.add_axes((0.55, 0.74, 0.38, 0.2))
            ax.imshow(mpimg.imread(io.BytesIO(structure_png), format="png"))
            ax.axis("off")
        lines: list[tuple[str, str]] = [("h", "Identity")] + [
            ("t", f"{k}: {formula_unicode(v) if k == 'Formula' else v}") for k, v in data["identity"]]
        v = data["verdict"]
        lines += [("h", "Verdict"), ("t", v["label"])]
        if v["override"]:
            lines.append(("t", f"set by hand: {v['override']['reason']}"))
        if v["conclusion"]:
            lines.append(("t", f"conclusion: {v['conclusion']['text']}"))
        if v["reason"]:
            lines.append(("t", v["reason"]))
        lines += [("t", f"conflict: {c}") for c in v["conflicts"]]
        lines.append(("h", "Figures of merit"))
        lines += [("t", f"#{m['id']} {m['kind']} {m['t']}: {m['summary']}") for m in data["rows"]] or [("t", "none")]
        lines.append(("h", "Barriers"))
        lines += [("t", f"{b['method']}: {b['value']} kcal mol⁻¹" + (f" ± {b['err']}" if b["err"] else ""))
                  for b in data["barriers"]] or [("t", "none")]
        lines.append(("h", "Transitions"))
        lines += [("t", f"{t['source']}: {significant(t['t_K'], 5)} K") for t in data["transitions"]] or [("t", "none")]
        lines.append(("h", "Images"))
        for im in data["images"]:
            lines.append(("t", f"{im['filename']} on the {im['on']}" + (f": {im['caption']}" if im["caption"] else "")))
            lines.append(("t", "; ".join(x for x in (im["meta"], im["pixels"]) if x)))
            lines.append(("s", f"SHA-256 {im['sha256']}"))
        if not data["images"]:
            lines.append(("t", "none"))
        if data["archived_images"]:
            lines.append(("t", _archived_note(data["archived_images"])))
        y = 0.92
        for style, text in lines:
            if y < 0.04:
                fig.text(0.07, y, "(continued in summary.html)", fontsize=7, style="italic")
                break
            if style == "h":
                y -= 0.012
            wrapped = text if len(text) < 95 or style == "h" else text[:92] + "…"
            fig.text(0.07 if style != "s" else 0.09, y, wrapped, fontsize={"h": 10, "t": 8, "s": 6.5}[style],
                     weight="bold" if style == "h" else "normal", va="top",
                     family="monospace" if style == "s" else None)
            y -= {"h": 0.022, "t": 0.017, "s": 0.013}[style]
        fig.text(0.07, 0.015, f"Remanence report pack, {data['generated']}", fontsize=6, color="#555555")
        buf = io.BytesIO()
        fig.savefig(buf, format="pdf", metadata={"Creator": "Remanence"})
        plt.close(fig)
    return buf.getvalue()


def _archived_note(n: int) -> str:
    return f"{n} archived image{'' if n == 1 else 's'} left out"


def _images(session: Session, compound: Compound, files: dict[str, bytes], *, sees_people: bool
            ) -> tuple[list[dict[str, Any]], list[dict[str, Any]], int]:
    """The compound's live images into ``files`` (originals byte for byte, and their thumbnails): their
    manifest records, their summary rows, and how many archived ones were left out."""
    records, rows = [], []
    live = attachments.live_of_compound(session, compound.id)
    for att, target, raw in live:
        record = attachments.record_of(att, target, raw)
        record["path"] = attachments.pack_path(record)
        record["thumbnail_path"] = f"attachments/thumbnails/{att.id}.jpg"
        files[record["path"]] = raw.data
        files[record["thumbnail_path"]] = att.thumbnail
        records.append(record)
        rows.append({"id": att.id, "filename": raw.filename or record["path"].split("/", 1)[1],
                     "on": f"{att.target} {target.ref}", "caption": att.caption or "",
                     "meta": attachments.metadata_line(att), "pixels": f"{att.width_px} × {att.height_px} px",
                     "media_type": record["media_type"], "sha256": att.sha256, "path": record["path"],
                     "thumbnail": record["thumbnail_path"], "thumb_w": att.thumb_width_px, "thumb_h": att.thumb_height_px})
    archived = attachments.count_of_compound(session, compound.id) - len(live)
    return hide_people(records, sees_people=sees_people), rows, max(archived, 0)


def _summary_html(data: dict[str, Any]) -> bytes:
    env = Environment(loader=FileSystemLoader(templates_dir()), autoescape=select_autoescape(["html"]))
    env.filters["formula"] = lambda v: Markup(formula_html(v)) if v else ""
    return env.get_template("report/summary.html").render(**data).encode("utf-8")


def report_pack(session: Session, compound: Compound, *, actor: Optional[Actor]) -> bytes:
    """The zip (bytes) of ``compound``'s report pack; Forbidden for an embargoed compound and a caller
    who may not see embargoed structures."""
    if not access.may_see_structure(actor, compound):
        raise Forbidden(f"{compound.code} is embargoed: its report pack goes only to members")
    c = registry.compound_read(session, compound, actor=actor)
    rows, _ = measurements.list_measurements(session, compound=compound.code, limit=1000)
    items = [measurements.measurement_read(session, m) for m in rows]
    files: dict[str, bytes] = {}
    figures: list[dict[str, Any]] = []
    drawn = 0
    for m in rows:
        kind = KINDS.get(m.kind)
        raw = session.get(RawFile, m.raw_file_id)
        folder = "cif" if m.kind == "crystal" else "raw"
        files[f"{folder}/{m.id}-{_safe(raw.filename or m.kind)}"] = raw.data
        if kind is not None and kind.figure is not None and drawn < MAX_FIGURES:
            fig = figures_vector.measurement_plot(session, m)
            for fmt in figures_vector.FORMATS:
                files[f"figures/measurement-{m.id}-{m.kind}.{fmt}"] = vector.render(fig, fmt)
            figures.append({"name": f"measurement-{m.id}-{m.kind}", "what": f"{kind.label}, measurement {m.id}"})
            drawn += 1
    for name, what in figures_vector.COMPOUND_FIGURES.items():
        fig = figures_vector.compound_plot(session, compound, name)
        if fig is not None:
            for fmt in figures_vector.FORMATS:
                files[f"figures/{name}.{fmt}"] = vector.render(fig, fmt)
            figures.append({"name": name, "what": what})
    images, image_rows, archived_images = _images(session, compound, files,
                                                  sees_people=actor is not None and actor.sees_people)
    barrier_rows = [barriers.barrier_read(session, b) for b in barriers.list_barriers(session, compound)]
    transitions = summary_plots.transitions_table(items)
    files["tables/measurements.csv"] = measurement_table(items)
    files["tables/barriers.csv"] = barrier_table(barrier_rows)
    files["tables/transitions.csv"] = transition_table(transitions)
    generated = datetime.now(timezone.utc).replace(microsecond=0).isoformat()
    data = {
        "code": c.code, "label": c.label, "identity": _identity(c), "verdict": _verdict(compound),
        "rows": [{"id": m["id"], "kind": m["kind"], "batch": m["batch"],
                  "t": f"{significant(m['temperature_K'], 5)} K" if m["temperature_K"] else "",
                  "summary": _summary_line(m["kind"], m["results"]), "version": m["analysis_version"]} for m in items],
        "barriers": [dict(zip(("value", "err"), with_uncertainty(b["dg_kcal_mol"], b["dg_err_kcal_mol"])),
                          method=b["method"]) for b in barrier_rows],
        "transitions": transitions, "figures": figures, "generated": generated,
        "images": image_rows, "archived_images": archived_images,
        "archived_note": _archived_note(archived_images) if archived_images else "",
        "structure_svg": registry.structure_svg(compound) if c.smiles else "",
    }
    files["summary.html"] = _summary_html(data)
    files["summary.pdf"] = _summary_pdf(data, draw.depict_png(c.smiles) if c.smiles else None)
    manifest = {
        "pack": PACK_VERSION, "compound": c.code, "generated": generated,
        "files": [{"path": p, "sha256": hashlib.sha256(b).hexdigest(), "size": len(b)} for p, b in sorted(files.items())],
        "measurements": [{"id": m["id"], "kind": m["kind"], "batch": m["batch"], "sha256": m["sha256"],
                          "filename": m["filename"], "analysis_version": m["analysis_version"],
                          "method": m["method"]} for m in items],
        "barriers": [{"id": b["id"], "method": b["method"], "analysis_version": b["analysis_version"]}
                     for b in barrier_rows],
        "attachments": images,
        "verdict": {"code": data["verdict"]["code"], "version": (data["verdict"]["computed"] or {}).get("version")},
    }
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as z:
        for path, content in sorted(files.items()):
            z.writestr(f"{c.code}/{path}", content)
        z.writestr(f"{c.code}/manifest.json", json.dumps(manifest, indent=2, ensure_ascii=False))
    return buf.getvalue()
