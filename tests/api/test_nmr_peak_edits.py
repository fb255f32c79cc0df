"""A person's peak list of an NMR spectrum: stored as a correction beside the automatic analysis, shown as
"edited by", revertable, audited, embargo-respecting (SQLite and PostgreSQL).

The spectrum is the model ethyl acetate of tests/analysis/test_nmr_multiplets.py (Gottlieb, Kotlyar and
Nudelman, J. Org. Chem. 62, 7512 (1997): 4.12 q, 2.05 s, 1.26 t, J = 7.1 Hz; recalled from memory), whose
areas are 2 : 3 : 3 H of the 8 H of C4H8O2.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from server.models import AuditEvent, Measurement
from server.synth.nmr_spectrum import Signal, jcamp_file, spectrum
from tests.api.test_measurements import post, uploader  # noqa: F401 - fixtures
from tests.factories import bearer, login_as, make_token, soup

ETHYL_ACETATE = "CC(=O)OCC"
EA = [Signal(2.05, 3), Signal(4.12, 2, 3, 7.1), Signal(1.26, 3, 2, 7.1), Signal(7.26, 0.5), Signal(0.0, 1.0)]
EDIT = [{"from_ppm": 4.05, "to_ppm": 4.19, "n_H": 2, "multiplicity": "q", "j_Hz": [7.1], "label": "OCH2"},
        {"from_ppm": 2.0, "to_ppm": 2.1, "multiplicity": "s", "label": "CH3CO"},
        {"from_ppm": 1.19, "to_ppm": 1.33, "multiplicity": "t", "j_Hz": "7.1", "label": "CH3"}]


def _jdx() -> bytes:
    ppm, y = spectrum(EA, rng=np.random.default_rng(3), mhz=400.13, noise_rel=0.01, points=65536, fwhm_Hz=1.0)
    return jcamp_file(ppm, y, mhz=400.13, solvent="CDCl3", t_K=298.15, title="ethyl acetate")


@pytest.fixture
def writer(session):
    return bearer(make_token(session, scope="write", name="registrar"))


def _spectrum(client, writer, uploader, *, embargoed=False):  # noqa: F811
    client.post("/api/v1/compounds", json={"smiles": ETHYL_ACETATE, "embargoed": embargoed}, headers=writer)
    code = client.post("/api/v1/compounds/RVZ-00001/batches", json={"chemist": "lab"}, headers=writer).json()["code"]
    r = post(client, code, "nmr_spectrum", _jdx(), uploader, filename="ea.jdx")
    assert r.status_code == 201, r.text
    return code, r.json()


def test_an_edit_is_a_correction_beside_the_automatic_analysis(client, session, writer, uploader):  # noqa: F811
    code, old = _spectrum(client, writer, uploader)
    auto = [s["multiplicity"] for s in old["results"]["signals"] if not s["assigned"]]
    assert auto == ["q", "s", "t"]
    r = client.post(f"/api/v1/measurements/{old['id']}/signals", json={"signals": EDIT, "reason": "assigned by hand"},
                    headers=writer)
    assert r.status_code == 201, r.text
    new = r.json()
    assert new["supersedes"] == old["id"] and new["sha256"] == old["sha256"]
    assert new["results"] == old["results"]  # the automatic analysis is unchanged
    c = new["correction"]
    assert c["by"].startswith("token:") and "registrar" in c["by"]
    assert (c["reason"], c["analysis_version"]) == ("assigned by hand", old["analysis_version"])
    signals = c["results"]["signals"]
    assert [s["label"] for s in signals] == ["OCH2", "CH3CO", "CH3"]  # downfield first
    # integrals taken again over the person's regions: 2 : 3 : 3 of 8 H within 4 % (the model's areas)
    assert [s["integral_rel"] for s in signals] == pytest.approx([0.25, 0.375, 0.375], rel=0.04)
    assert signals[0]["n_H"] == 2 and signals[1]["n_H"] == pytest.approx(3.0, rel=0.04)  # typed, else scaled
    assert signals[2]["j_Hz"] == [7.1] and c["results"]["signals_found"] == 3
    assert client.get(f"/api/v1/measurements/{old['id']}", headers=writer).json()["superseded_by"] == new["id"]
    si = client.get(f"/api/v1/batches/{code}/identity", headers=writer).json()
    assert "δ 4.12 (q, J = 7.1 Hz, 2H), 2.05 (s, 3H), 1.26 (t, J = 7.1 Hz, 3H)." in si["si_text"]
    assert si["evidence"]["nmr_spectrum"]["edited"] is True
    events = session.exec(select(AuditEvent).where(AuditEvent.action == "measurement.correct")).all()
    assert len(events) == 1 and events[0].before["correction"] is None
    assert events[0].after["correction"]["results"]["signals"][0]["label"] == "OCH2"

    # revert: the automatic peak list stands again, with who and why; history keeps both
    r = client.post(f"/api/v1/measurements/{new['id']}/signals/revert", json={"reason": "the edit was wrong"},
                    headers=writer)
    assert r.status_code == 201, r.text
    back = r.json()
    assert back["correction"]["results"] == {} and back["results"] == old["results"]
    r = client.post(f"/api/v1/measurements/{back['id']}/signals/revert", json={"reason": "again"}, headers=writer)
    assert r.status_code == 422 and r.json()["field"] == "correction"
    # the superseded measurement cannot be edited: 409 naming the newest
    r = client.post(f"/api/v1/measurements/{old['id']}/signals", json={"signals": EDIT, "reason": "x"}, headers=writer)
    assert r.status_code == 409 and str(back["id"]) in r.json()["detail"]
    assert {e.action for e in session.exec(select(AuditEvent)).all()} >= {"measurement.correct",
                                                                           "measurement.correct_revert"}


@pytest.mark.parametrize("change, field", [
    ({"signals": [EDIT[0], {**EDIT[1], "from_ppm": 4.10}], "reason": "x"}, "signals[1].from_ppm"),  # overlap
    ({"signals": EDIT, "reason": "  "}, "reason"),
    ({"signals": [{**EDIT[0], "j_Hz": [7.1, 2.0]}], "reason": "x"}, "signals[0].j_Hz"),  # a q has one J
    ({"signals": [{**EDIT[0], "multiplicity": "dddd"}], "reason": "x"}, "signals[0].multiplicity"),  # 4 J: not named
    ({"signals": [{**EDIT[0], "multiplicity": "ddt"}], "reason": "x"}, "signals[0].j_Hz"),  # a ddt has three J
    ({"signals": [{**EDIT[0], "multiplicity": "dt"}], "reason": "x"}, "signals[0].j_Hz"),  # a dt has two J
    ({"signals": [{**EDIT[0], "to_ppm": 40.0}], "reason": "x"}, "signals[0].from_ppm"),  # outside the spectrum
    ({"signals": [{**EDIT[0], "n_H": "two"}], "reason": "x"}, "signals[0].n_H"),
    ({"signals": [], "reason": "x"}, "signals"),
])
def test_a_bad_edit_is_refused_by_field_and_stores_nothing(client, session, writer, uploader, change, field):  # noqa: F811
    _, old = _spectrum(client, writer, uploader)
    before = len(session.exec(select(Measurement)).all())
    r = client.post(f"/api/v1/measurements/{old['id']}/signals", json=change, headers=writer)
    assert r.status_code == 422 and r.json().get("field") == field, r.text
    session.expire_all()
    assert len(session.exec(select(Measurement)).all()) == before
    assert client.get(f"/api/v1/measurements/{old['id']}", headers=writer).json()["superseded_by"] is None


def test_the_page_form_works_without_javascript(client, session, writer, uploader):  # noqa: F811
    _, old = _spectrum(client, writer, uploader)
    token = login_as(client, session, role="member", name="ana")
    page = soup(client.get(f"/measurements/{old['id']}").text)
    form = page.select_one("#peak-list form[action$='/signals']")
    # the five signals (three of the sample, the CHCl3 residual and TMS), then three empty rows
    assert form is not None and len(form.select("input[name=from_ppm]")) == 5 + 3
    rows = [("4.05", "4.19", "", "2", "q", "7.1", "OCH2", ""), ("2.0", "2.1", "", "", "s", "", "", "impurity"),
            ("1.19", "1.33", "", "", "t", "7.1", "CH3", ""), ("", "", "", "", "m", "", "", "")]
    names = ("from_ppm", "to_ppm", "shift_ppm", "n_H", "multiplicity", "j_Hz", "label", "assigned")
    data = {"csrf_token": token, "reason": "the CH3CO is a solvent",
            **{name: [row[k] for row in rows] for k, name in enumerate(names)}}  # repeated fields, one per row
    r = client.post(f"/measurements/{old['id']}/signals", data=data, follow_redirects=False)
    assert r.status_code == 303, r.text
    page = soup(client.get(r.headers["location"].split("#")[0]).text)
    assert "Edited by user:" in page.select_one("#peak-list-edited").text and "ana" in page.select_one("#peak-list-edited").text
    cells = [[td.text.strip() for td in tr.select("td")] for tr in page.select("#peak-list-table tbody tr")]
    assert [c[5] for c in cells] == ["OCH2", "", "CH3"] and cells[1][6] == "impurity"
    assert cells[0][4] == "2"  # typed; the impurity row is out of the sample's integrals
    assert len(page.select("#peak-list-history li")) == 1
    # a bad row comes back with the message and the rows as typed
    new_id = int(r.headers["location"].split("/")[-1].split("#")[0])
    bad = {"csrf_token": token, "reason": "x", "from_ppm": ["4.0"], "to_ppm": ["abc"], "shift_ppm": [""],
           "n_H": [""], "multiplicity": ["m"], "j_Hz": [""], "label": [""], "assigned": [""]}
    r = client.post(f"/measurements/{new_id}/signals", data=bad)
    assert r.status_code == 422 and "to_ppm" in soup(r.text).select_one("#signals-error").text
    # back to the automatic peak list from the page: a reason is asked for
    assert client.post(f"/measurements/{new_id}/signals/revert", data={"csrf_token": token}).status_code == 422
    r = client.post(f"/measurements/{new_id}/signals/revert", data={"csrf_token": token, "reason": "undo"},
                    follow_redirects=False)
    assert r.status_code == 303
    page = soup(client.get(r.headers["location"].split("#")[0]).text)
    assert page.select_one("#peak-list-edited") is None
    assert [li.text.split(":")[1].split(" by ")[0].strip() for li in page.select("#peak-list-history li")] == [
        "automatic peak list restored", "edited"]


def test_an_embargoed_compound_s_edit_is_withheld_from_an_upload_token(client, session, writer, uploader):  # noqa: F811
    _, old = _spectrum(client, writer, uploader, embargoed=True)
    r = client.post(f"/api/v1/measurements/{old['id']}/signals", json={"signals": EDIT, "reason": "by hand"},
                    headers=writer)
    assert r.status_code == 201
    seen = client.get(f"/api/v1/measurements/{r.json()['id']}", headers=uploader).json()
    assert seen["correction"] is None and seen["results"] == {}
    assert client.post(f"/api/v1/measurements/{r.json()['id']}/signals/revert", json={"reason": "x"},
                       headers=uploader).status_code == 403


def test_a_person_s_multiplet_prints_as_the_range_of_the_lines_in_its_region(client, session, writer, uploader):  # noqa: F811
    # the quartet called m by hand: its stored lines lie at 4.12 ± 1.5 x 7.1 Hz (± 0.0266 ppm at 400.13 MHz)
    code, old = _spectrum(client, writer, uploader)
    edit = [{**EDIT[0], "multiplicity": "m", "j_Hz": []}, EDIT[1], EDIT[2]]
    r = client.post(f"/api/v1/measurements/{old['id']}/signals", json={"signals": edit, "reason": "overlap"},
                    headers=writer)
    assert r.status_code == 201, r.text
    m = r.json()["correction"]["results"]["signals"][0]
    assert (m["high_ppm"], m["low_ppm"]) == pytest.approx((4.12 + 0.0266, 4.12 - 0.0266), abs=0.001)
    si = client.get(f"/api/v1/batches/{code}/identity", headers=writer).json()
    assert "δ 4.15–4.09 (m, 2H), 2.05 (s, 3H), 1.26 (t, J = 7.1 Hz, 3H)." in si["si_text"]
