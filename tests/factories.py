"""Factories and helpers shared by the tests: accounts, tokens, logins, compounds."""

from __future__ import annotations

from bs4 import BeautifulSoup
from sqlmodel import Session

from server.services import accounts

PASSWORD = "correct-horse-battery"



def make_user(session: Session, name: str = "ana", role: str = "member", password: str = PASSWORD):
    return accounts.create_user(session=session, username=name, password=password, role=role, actor="test")


def make_token(session: Session, scope: str = "write", name: str = "test-pc", kinds=None,
               sees_embargoed: bool = False) -> str:
    _, secret = accounts.create_token(session=session, name=name, scope=scope, kinds=kinds, actor="test",
                                      sees_embargoed=sees_embargoed)
    return secret


def bearer(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def csrf_of(html: str) -> str:
    """The CSRF token a page carries (meta tag), read structurally."""
    soup = BeautifulSoup(html, "html.parser")
    meta = soup.find("meta", attrs={"name": "csrf-token"})
    assert meta is not None, "page has no csrf-token meta tag"
    return meta["content"]


def login_as(client, session: Session, role: str = "member", name: str | None = None) -> str:
    """Create a user with ``role``, log ``client`` in through the login form; returns the CSRF token."""
    name = name or f"{role}1"
    make_user(session, name=name, role=role)
    page = client.get("/login")
    token = csrf_of(page.text)
    resp = client.post("/login", data={"username": name, "password": PASSWORD, "csrf_token": token, "next": "/compounds"},
                       follow_redirects=False)
    assert resp.status_code == 303, resp.text
    return csrf_of(client.get("/compounds").text)


def soup(html: str) -> BeautifulSoup:
    return BeautifulSoup(html, "html.parser")


def targets(client, session: Session, *, embargoed: bool = False, smiles: str = "c1ccc2ccccc2c1",
            cycles: int = 4) -> dict:
    """A compound, its batch, and a P-E loop measurement (which makes the batch's sample), registered through
    the API with a write token of its own: the four objects comments and attachments hang on.

    Returns ``w`` (the token's header), ``code``, ``batch``, ``sample``, ``measurement`` (its id) and
    ``refs`` ({"compounds": code, "batches": ..., "samples": ..., "measurements": "<id>"}, the API's plurals)."""
    from tests.trust.conftest import loop_bytes

    w = bearer(make_token(session, scope="write", name=f"registrar-{smiles}"))
    r = client.post("/api/v1/compounds", json={"smiles": smiles, "embargoed": embargoed}, headers=w)
    assert r.status_code == 201, r.text
    code = r.json()["code"]
    batch = client.post(f"/api/v1/compounds/{code}/batches", json={"chemist": "lab"}, headers=w).json()["code"]
    m = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "pe_loop"},
                    files={"file": ("m.csv", loop_bytes(cycles), "text/csv")}, headers=w)
    assert m.status_code == 201, m.text
    sample, mid = m.json()["sample"], m.json()["id"]
    return {"w": w, "code": code, "batch": batch, "sample": sample, "measurement": mid,
            "refs": {"compounds": code, "batches": batch, "samples": sample, "measurements": str(mid)}}


#: The heat-cool DSC file of the transitions tests (tests/web/test_dsc_transitions.py and
#: tests/browser/test_dsc_transitions_fit.py): a solid-solid transition (8 J/g, at 335 K on heating, 333 K on
#: cooling) and melting (60 J/g, onset 410 K, the freezing supercooled to an onset of 398 K), 5 mg at 10 K/min.
DSC_HEATING = ({"t_K": 335.0, "dh_J_g": 8.0, "width_K": 4.0, "kind": "gaussian"},
               {"t_K": 410.0, "dh_J_g": 60.0, "width_K": 1.5, "kind": "melting"})
DSC_COOLING = ({"t_K": 333.0, "dh_J_g": 8.0, "width_K": 4.0, "kind": "gaussian"},
               {"t_K": 398.0, "dh_J_g": 60.0, "width_K": 1.5, "kind": "melting"})


def heat_cool_dsc_file(seed: int = 31) -> bytes:
    """One heating and one cooling run in one file (server/synth/dsc.py, Hoehne, Hemminger and Flammersheim,
    Differential Scanning Calorimetry, Springer 2003, ch. 5 for the peak shapes), 3 µW white noise and a
    sloped baseline, as an instrument exports a heat-cool programme."""
    import numpy as np

    from server.ingest.table import to_csv_bytes
    from server.synth.dsc import heat_cool_trace

    frame = heat_cool_trace(DSC_HEATING, DSC_COOLING, t_low_K=300.0, t_high_K=430.0, mass_mg=5.0, noise_mW=0.003,
                            baseline_slope=0.002, rng=np.random.default_rng(seed))
    return to_csv_bytes(frame, {"mass": "5 mg", "endo": "up"})
