"""Image attachments through the API (issue 23, item 2): all four targets, the type decided by the
bytes (PNG claimed but JPEG bytes, random bytes, truncated files), the checksum of the bytes stored
unchanged, the thumbnail's size, metadata with units, the size limit, decompression bombs, and the
embargo on every attachment route."""

from __future__ import annotations

import hashlib
import io
import json
import re
import struct
import zlib
import zipfile

import numpy as np
import pytest
from bs4 import BeautifulSoup
from PIL import Image
from sqlmodel import select

from server import bounds
from server.models import Attachment, AuditEvent, RawFile
from tests.factories import bearer, make_token, targets


def micrograph(fmt: str = "PNG", size: tuple[int, int] = (640, 480), seed: int = 1, mode: str = "RGB") -> bytes:
    """An invented polarised-light micrograph: birefringent domains (smooth colour bands) with a few %
    camera noise, saved as ``fmt``."""
    rng = np.random.default_rng(seed)
    w, h = size
    y, x = np.mgrid[0:h, 0:w]
    bands = 0.5 + 0.5 * np.sin(x / 23.0 + 2.0 * np.sin(y / 41.0))
    if mode == "I;16":  # a 16-bit monochrome scientific camera
        counts = 4000 + 20000 * bands + rng.normal(0, 600, bands.shape)
        im = Image.fromarray(counts.clip(0, 65535).astype(np.uint16))
    else:
        rgb = np.stack([bands, bands ** 2, 1 - bands], axis=-1) * 220 + rng.normal(0, 6, (h, w, 3))
        im = Image.fromarray(rgb.clip(0, 255).astype(np.uint8), mode="RGB")
    out = io.BytesIO()
    im.save(out, format=fmt)
    return out.getvalue()


TYPES = {"PNG": ("m.png", "image/png"), "JPEG": ("m.jpg", "image/jpeg"), "TIFF": ("m.tif", "image/tiff")}


def _world(client, session, *, embargoed: bool = False, smiles: str = "c1ccc2ccccc2c1") -> dict:
    return targets(client, session, embargoed=embargoed, smiles=smiles)


def _post(client, url, raw, headers, name="m.png", ctype="image/png", **data):
    return client.post(url, files={"file": (name, raw, ctype)}, data=data, headers=headers)


def test_every_target_takes_images_stored_unchanged_with_thumbnail(client, session):
    world = _world(client, session)
    for i, (plural, ref) in enumerate(world["refs"].items()):
        fmt = ("PNG", "JPEG", "TIFF", "PNG")[i]
        raw = micrograph(fmt, seed=i)
        url = f"/api/v1/{plural}/{ref}/attachments"
        assert client.get(url, headers=world["w"]).json() == {"items": [], "withheld": False}
        r = _post(client, url, raw, world["w"], *TYPES[fmt], caption="POM, cooling", magnification="10x",
                  scale_bar="100 µm", polariser="crossed", temperature="25 °C")
        assert r.status_code == 201, r.text
        a = r.json()
        assert a["sha256"] == hashlib.sha256(raw).hexdigest() and a["size_bytes"] == len(raw)
        assert a["media_type"] == TYPES[fmt][1] and (a["width_px"], a["height_px"]) == (640, 480)
        assert a["magnification"] == 10 and a["scale_bar_um"] == pytest.approx(100)
        assert a["polariser_crossed"] is True and a["t_K"] == pytest.approx(298.15)
        # The original comes back byte for byte, its checksum in the header.
        orig = client.get(a["original_url"], headers=world["w"])
        assert orig.status_code == 200 and orig.content == raw
        assert orig.headers["content-type"] == TYPES[fmt][1] and orig.headers["x-content-sha256"] == a["sha256"]
        # The thumbnail: a JPEG whose longer side is the bound, the aspect ratio kept.
        thumb = client.get(a["thumbnail_url"], headers=world["w"])
        assert thumb.headers["content-type"] == "image/jpeg"
        im = Image.open(io.BytesIO(thumb.content))
        assert im.format == "JPEG" and im.size == (bounds.THUMBNAIL_PX, bounds.THUMBNAIL_PX * 3 // 4)
        assert (a["thumb_width_px"], a["thumb_height_px"]) == im.size
        listed = client.get(url, headers=world["w"]).json()["items"]
        assert [x["id"] for x in listed] == [a["id"]] and listed[0]["ref"] == ref
    stored = session.exec(select(RawFile).where(RawFile.content_type.like("image/%"))).all()
    assert {hashlib.sha256(r.data).hexdigest() for r in stored} == {r.sha256 for r in stored} and len(stored) == 4
    session.expire_all()
    assert [e.action for e in session.exec(select(AuditEvent).where(AuditEvent.entity == "attachment"))] == \
        ["attachment.create"] * 4


def test_sixteen_bit_camera_tiff_gets_a_thumbnail(client, session):
    world = _world(client, session)
    raw = micrograph("TIFF", size=(300, 600), mode="I;16")
    r = _post(client, f"/api/v1/compounds/{world['code']}/attachments", raw, world["w"], *TYPES["TIFF"])
    assert r.status_code == 201, r.text
    im = Image.open(io.BytesIO(client.get(r.json()["thumbnail_url"], headers=world["w"]).content))
    assert im.size == (bounds.THUMBNAIL_PX // 2, bounds.THUMBNAIL_PX)
    px = np.asarray(im.convert("L"), dtype=float)
    assert px.max() - px.min() > 150  # stretched to 8 bits, not a black square


def _png_claiming(width: int, height: int) -> bytes:
    """A tiny, valid PNG whose header claims ``width`` x ``height`` pixels (IHDR rewritten, CRC redone)."""
    raw = bytearray(micrograph("PNG", size=(8, 8)))
    ihdr = 8  # after the signature: length (4), b"IHDR", then width, height
    raw[ihdr + 8:ihdr + 16] = struct.pack(">II", width, height)
    raw[ihdr + 21:ihdr + 25] = struct.pack(">I", zlib.crc32(bytes(raw[ihdr + 4:ihdr + 21])))
    return bytes(raw)


def test_bytes_decide_the_type_and_bad_images_store_nothing(client, session, settings):
    world = _world(client, session)
    url = f"/api/v1/samples/{world['refs']['samples']}/attachments"
    png, jpeg = micrograph("PNG"), micrograph("JPEG")
    rng = np.random.default_rng(7)
    cases = {
        "jpeg bytes claimed png": (jpeg, "m.png", "image/png", "claims to be PNG but its bytes are JPEG"),
        "png bytes claimed jpeg by name": (png, "m.jpg", "application/octet-stream", "claims to be JPEG"),
        "random bytes": (rng.bytes(5000), "m.png", "image/png", "not a PNG, JPEG or TIFF"),
        "text claimed png": (b"x,y\n1,2\n", "m.png", "image/png", "not a PNG, JPEG or TIFF"),
        "truncated png": (png[: len(png) // 2], "m.png", "image/png", "damaged or truncated"),
        "truncated jpeg": (jpeg[: len(jpeg) // 2], "m.jpg", "image/jpeg", "damaged or truncated"),
        "gif claim": (png, "m.gif", "image/gif", "PNG, JPEG or TIFF"),
        "bomb": (_png_claiming(40000, 40000), "m.png", "image/png", "pixels"),
        "bigger bomb than Pillow's own limit": (_png_claiming(60000, 60000), "m.png", "image/png", "pixels"),
    }
    for name, (raw, fname, ctype, says) in cases.items():
        r = _post(client, url, raw, world["w"], fname, ctype)
        assert r.status_code == 422, (name, r.status_code, r.text)
        assert r.json()["field"] == "file" and says in r.json()["detail"], (name, r.text)
    # Metadata that cannot be read are refused naming their field.
    for field, value in (("scale_bar", "100"), ("scale_bar", "100 K"), ("temperature", "-5 K"),
                         ("magnification", "lots"), ("polariser", "sideways"), ("caption", "x" * 2001)):
        r = _post(client, url, png, world["w"], **{field: value})
        named = r.json().get("field") or r.json().get("errors", [{}])[0].get("loc", [None])[-1]
        assert r.status_code == 422 and named == field, (field, r.text)
    assert session.exec(select(Attachment)).all() == []
    assert session.exec(select(RawFile).where(RawFile.content_type.like("image/%"))).all() == []
    # The same image twice on one target: 409 naming the first; on another target it is fine.
    first = _post(client, url, png, world["w"])
    assert first.status_code == 201
    again = _post(client, url, png, world["w"])
    assert again.status_code == 409 and again.json()["existing"] == first.json()["id"]
    assert _post(client, f"/api/v1/compounds/{world['code']}/attachments", png, world["w"]).status_code == 201
    assert len(session.exec(select(RawFile).where(RawFile.sha256 == first.json()["sha256"])).all()) == 1


def test_size_limit_is_the_upload_limit(client, session, settings, monkeypatch):
    world = _world(client, session)
    raw = micrograph("PNG")
    monkeypatch.setattr(type(settings), "max_upload_bytes", property(lambda self: len(raw) - 1))
    r = _post(client, f"/api/v1/compounds/{world['code']}/attachments", raw, world["w"])
    assert r.status_code == 413 and "REMANENCE_MAX_UPLOAD_MB" in r.text, r.text
    assert session.exec(select(Attachment)).all() == []


def test_embargoed_attachments_are_invisible_on_every_route(client, session):
    world = _world(client, session, embargoed=True)
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    plain = bearer(make_token(session, scope="read", name="plain-reader"))
    granted = bearer(make_token(session, scope="read", name="granted-reader", sees_embargoed=True))
    for i, (plural, ref) in enumerate(world["refs"].items()):
        url = f"/api/v1/{plural}/{ref}/attachments"
        a = _post(client, url, micrograph(seed=10 + i), world["w"], caption="six SC8H17 arms").json()
        routes = (f"/api/v1/attachments/{a['id']}", a["original_url"], a["thumbnail_url"])
        for who in (up, plain):
            got = client.get(url, headers=who)
            assert got.status_code == 200 and got.json() == {"items": [], "withheld": True}, got.text
            for route in routes:
                r = client.get(route, headers=who)
                assert r.status_code == 404 and r.json() == {"detail": f"no attachment {a['id']}"}, (route, r.text)
            # Nor may they attach (the upload token may not write at all; a read token neither).
            assert _post(client, url, micrograph(seed=99), who).status_code == 403
        # The control: a granted read token sees the gallery and every route.
        assert [x["id"] for x in client.get(url, headers=granted).json()["items"]] == [a["id"]]
        assert all(client.get(route, headers=granted).status_code == 200 for route in routes)
    # An open compound's attachment is visible to the plain reader; the upload token sees no names.
    open_world = _world(client, session, smiles="c1ccc2cc3ccccc3cc2c1")
    a = _post(client, f"/api/v1/compounds/{open_world['code']}/attachments", micrograph(seed=50), world["w"]).json()
    assert client.get(f"/api/v1/attachments/{a['id']}", headers=plain).json()["created_by"] == a["created_by"]
    assert client.get(f"/api/v1/attachments/{a['id']}", headers=up).json()["created_by"] == "(hidden)"


def test_archive_and_restore_keep_who_when_and_why(client, session):
    world = _world(client, session)
    url = f"/api/v1/compounds/{world['code']}/attachments"
    kept = _post(client, url, micrograph(seed=60), world["w"], caption="fan texture").json()
    raw = micrograph(seed=61)
    a = _post(client, url, raw, world["w"], caption="blurred, wrong sample").json()
    assert a["archived"] is False and a["archive_history"] == []
    route = f"/api/v1/attachments/{a['id']}"
    # The reason is required: missing, empty or blank refuses, naming the field, and changes nothing.
    for body in ({}, {"reason": ""}, {"reason": "   "}, {"reason": "x" * 501}):
        r = client.post(f"{route}/archive", json=body, headers=world["w"])
        assert r.status_code == 422 and "reason" in r.text, (body, r.text)
    assert session.get(Attachment, a["id"]).archived is False
    r = client.post(f"{route}/archive", json={"reason": "out of focus; retaken as the next image"}, headers=world["w"])
    assert r.status_code == 200, r.text
    got = r.json()
    assert got["archived"] is True and [s["action"] for s in got["archive_history"]] == ["archive"]
    step = got["archive_history"][0]
    assert step["reason"] == "out of focus; retaken as the next image" and step["by"] == a["created_by"]
    # Out of the list by default; listed with its label on request; still reachable by id, bytes unchanged.
    assert [x["id"] for x in client.get(url, headers=world["w"]).json()["items"]] == [kept["id"]]
    listed = client.get(url, params={"include_archived": "true"}, headers=world["w"]).json()["items"]
    assert [(x["id"], x["archived"]) for x in listed] == [(kept["id"], False), (a["id"], True)]
    assert client.get(route, headers=world["w"]).json()["archived"] is True
    original = client.get(a["original_url"], headers=world["w"])
    assert original.status_code == 200 and original.content == raw
    assert client.get(a["thumbnail_url"], headers=world["w"]).status_code == 200
    # Archiving what is archived is refused; a restore needs its reason too, and both steps stay in the history.
    assert client.post(f"{route}/archive", json={"reason": "again"}, headers=world["w"]).status_code == 409
    assert client.post(f"{route}/restore", json={"reason": " "}, headers=world["w"]).status_code == 422
    back = client.post(f"{route}/restore", json={"reason": "the only image of batch B01 at 120 °C"}, headers=world["w"])
    assert back.status_code == 200 and back.json()["archived"] is False
    assert [(s["action"], s["reason"]) for s in back.json()["archive_history"]] == [
        ("archive", "out of focus; retaken as the next image"), ("restore", "the only image of batch B01 at 120 °C")]
    assert len(client.get(url, headers=world["w"]).json()["items"]) == 2
    assert client.post(f"{route}/restore", json={"reason": "again"}, headers=world["w"]).status_code == 409
    # One mechanism: the flag on the row, who/when/why in the audit trail, as for measurements.
    events = session.exec(select(AuditEvent).where(AuditEvent.entity == "attachment",
                                                   AuditEvent.entity_code == str(a["id"]))
                          .order_by(AuditEvent.id)).all()
    assert [(e.action, (e.after or {}).get("reason")) for e in events] == [
        ("attachment.create", None), ("attachment.archive", "out of focus; retaken as the next image"),
        ("attachment.restore", "the only image of batch B01 at 120 °C")]
    assert all(e.compound_id is not None for e in events)


def test_archiving_an_embargoed_compounds_image_is_for_those_who_may_see_it(client, session):
    world = _world(client, session, embargoed=True)
    a = _post(client, f"/api/v1/compounds/{world['code']}/attachments", micrograph(seed=70), world["w"]).json()
    granted = bearer(make_token(session, scope="read", name="granted-reader", sees_embargoed=True))
    up = bearer(make_token(session, scope="upload", name="instrument-pc"))
    for who in (granted, up):  # may see it but not write; may not write at all
        r = client.post(f"/api/v1/attachments/{a['id']}/archive", json={"reason": "blurred"}, headers=who)
        assert r.status_code == 403, r.text
    assert session.get(Attachment, a["id"]).archived is False
    # A member archives it with a reason that names the structure: the history is as hidden as the image.
    client.post(f"/api/v1/attachments/{a['id']}/archive", json={"reason": "shows the SC8H17 arms badly"},
                headers=world["w"])
    plain = bearer(make_token(session, scope="read", name="plain-reader"))
    for who in (plain, up):
        listed = client.get(f"/api/v1/compounds/{world['code']}/attachments", params={"include_archived": "true"},
                            headers=who)
        assert listed.json() == {"items": [], "withheld": True} and "SC8H17" not in listed.text
        assert client.get(f"/api/v1/attachments/{a['id']}", headers=who).status_code == 404
    assert "SC8H17" in client.get(f"/api/v1/attachments/{a['id']}", headers=granted).text  # the control


def _zip(data: bytes) -> dict[str, bytes]:
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        return {name: z.read(name) for name in z.namelist()}


def test_report_pack_carries_the_images_unchanged_with_checksum_and_metadata(client, session):
    world = _world(client, session)
    images = {}
    for i, (plural, ref) in enumerate(world["refs"].items()):
        fmt = ("PNG", "JPEG", "TIFF", "PNG")[i]
        raw = micrograph(fmt, size=(80, 60), seed=80 + i)
        a = _post(client, f"/api/v1/{plural}/{ref}/attachments", raw, world["w"], *TYPES[fmt],
                  caption=f"on the {plural.removesuffix('es') if plural == 'batches' else plural[:-1]}", magnification="20x", polariser="crossed", temperature="350 K").json()
        images[a["id"]] = raw
    gone = _post(client, f"/api/v1/batches/{world['batch']}/attachments", micrograph(seed=89), world["w"]).json()
    client.post(f"/api/v1/attachments/{gone['id']}/archive", json={"reason": "duplicate view"}, headers=world["w"])
    r = client.get(f"/api/v1/compounds/{world['code']}/report.zip", headers=world["w"])
    assert r.status_code == 200, r.text
    files = _zip(r.content)
    manifest = json.loads(files[f"{world['code']}/manifest.json"])
    listed = {a["id"]: a for a in manifest["attachments"]}
    assert set(listed) == set(images)  # the archived one is left out
    for aid, raw in images.items():
        entry = listed[aid]
        assert files[f"{world['code']}/{entry['path']}"] == raw  # byte for byte
        assert entry["sha256"] == hashlib.sha256(raw).hexdigest()
        assert entry["magnification"] == 20 and entry["polariser_crossed"] is True and entry["t_K"] == 350
        assert entry["caption"] == f"on the {entry['target']}"
    assert {(a["target"], a["ref"]) for a in listed.values()} == {
        ("compound", world["code"]), ("batch", world["batch"]), ("sample", world["sample"]),
        ("measurement", str(world["measurement"]))}
    in_files = {f["path"]: f["sha256"] for f in manifest["files"]}
    assert all(in_files[a["path"]] == a["sha256"] for a in listed.values())
    assert not any(p.startswith(f"attachments/{gone['id']}-") for p in in_files)


_PDF_ESCAPES = {b"n": b"\n", b"r": b"\r", b"t": b"\t", b"b": b"\b", b"f": b"\f", b"(": b"(", b")": b")",
                b"\\": b"\\"}


def _pdf_lines(pdf: bytes) -> list[str]:
    """The text lines of a matplotlib PDF (ISO 32000-1: content streams inflated, each ``[...] TJ`` array's
    literal strings joined; matplotlib's TrueType fonts (pdf.fonttype 42) take two-byte codes that are the
    characters' code points, so each line decodes as UTF-16BE)."""
    lines = []
    for m in re.finditer(rb"stream\r?\n(.*?)\r?\nendstream", pdf, flags=re.S):
        try:
            content = zlib.decompress(m.group(1))
        except zlib.error:
            continue
        for arr in re.finditer(rb"\[(.*?)\]\s*TJ", content, flags=re.S):
            raw = b"".join(re.findall(rb"\(((?:\\.|[^\\)])*)\)", arr.group(1), flags=re.S))
            raw = re.sub(rb"\\([0-7]{1,3}|.)", lambda e: bytes([int(e.group(1), 8)]) if e.group(1).isdigit()
                         else _PDF_ESCAPES.get(e.group(1), e.group(1)), raw, flags=re.S)
            lines.append(raw.decode("utf-16-be", errors="replace"))
    return lines


def test_report_summary_lists_the_images_with_thumbnails_and_checksums(client, session):
    world = _world(client, session)
    shown = {}
    for i, (plural, ref, meta) in enumerate((
            ("compounds", world["code"], {"magnification": "20x", "polariser": "crossed", "temperature": "350 K"}),
            ("batches", world["batch"], {"scale_bar": "50 µm", "polariser": "parallel", "temperature": "25 °C"}))):
        raw = micrograph(("PNG", "TIFF")[i], size=(120, 90), seed=90 + i)
        a = _post(client, f"/api/v1/{plural}/{ref}/attachments", raw, world["w"], *TYPES[("PNG", "TIFF")[i]],
                  caption=f"pellet {i + 1} under the microscope", **meta)
        assert a.status_code == 201, a.text
        shown[a.json()["id"]] = (raw, a.json())
    gone = _post(client, f"/api/v1/compounds/{world['code']}/attachments", micrograph(seed=99), world["w"],
                 "blurred.png", "image/png").json()
    client.post(f"/api/v1/attachments/{gone['id']}/archive", json={"reason": "out of focus"}, headers=world["w"])
    r = client.get(f"/api/v1/compounds/{world['code']}/report.zip", headers=world["w"])
    assert r.status_code == 200, r.text
    files = {k.split("/", 1)[1]: v for k, v in _zip(r.content).items()}
    manifest = json.loads(files["manifest.json"])
    in_files = {f["path"]: f["sha256"] for f in manifest["files"]}
    html = BeautifulSoup(files["summary.html"], "html.parser")
    rows = {int(tr["data-id"]): tr for tr in html.select("#images tr[data-id]")}
    pdf = _pdf_lines(files["summary.pdf"])
    assert set(rows) == set(shown)  # the archived image is not listed ...
    assert html.select_one("#archived-images").get_text(strip=True) == "1 archived image left out"  # ... but counted
    expected_meta = {0: "20× · crossed polarisers · 350 K", 1: "scale bar 50 µm · polarisers not crossed · 298.1 K"}
    for i, (aid, (raw, a)) in enumerate(shown.items()):
        cells = [td.get_text(" ", strip=True) for td in rows[aid].select("td")]
        sha = hashlib.sha256(raw).hexdigest()
        assert cells[1:] == [("m.png", "m.tif")[i], ("compound " + world["code"], "batch " + world["batch"])[i],
                             f"pellet {i + 1} under the microscope", expected_meta[i],
                             f"120 × 90 px, {('image/png', 'image/tiff')[i]}", sha]
        # the thumbnail the row shows is in the pack (a JPEG, listed with its checksum) and links to the original
        img = rows[aid].select_one("img")
        thumb = files[img["src"]]
        assert Image.open(io.BytesIO(thumb)).format == "JPEG" and in_files[img["src"]] == hashlib.sha256(thumb).hexdigest()
        assert (int(img["width"]), int(img["height"])) == Image.open(io.BytesIO(thumb)).size
        assert files[rows[aid].select_one("a")["href"]] == raw
        # the PDF page lists it too: file, where, caption, what it shows, pixels, then its checksum
        at = pdf.index(f"{('m.png', 'm.tif')[i]} on the {cells[2]}: pellet {i + 1} under the microscope")
        assert pdf[at + 1:at + 3] == [f"{expected_meta[i]}; 120 × 90 px", f"SHA-256 {sha}"]
    assert "1 archived image left out" in pdf
    assert not any(hashlib.sha256(micrograph(seed=99)).hexdigest() in line for line in pdf)
    assert not any(p.startswith(f"attachments/thumbnails/{gone['id']}.") for p in files)
