"""The compound page's "next steps" after registering: add a batch, describe a sample, upload a file,
each marked done from the data, shown to writers until the first file arrives (SQLite and PostgreSQL)."""

from __future__ import annotations

from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import Batch, SampleCreate
from server.services import samples
from server.synth.ferro import miller_loop
from tests.factories import csrf_of, login_as, make_user, PASSWORD, soup


def _steps(html: str) -> dict[str, dict]:
    panel = soup(html).find(id="next-steps")
    if panel is None:
        return {}
    out = {}
    for li in panel.select("li[data-step]"):
        link = li.find("a")
        out[li["data-step"]] = {"state": li["data-state"], "current": li.get("aria-current") == "step",
                                "href": link["href"] if link else None}
    return out


def _register(client, csrf) -> str:
    r = client.post("/compounds/new", data={"smiles": "CCCCCCCCOc1ccccc1", "csrf_token": csrf}, follow_redirects=False)
    assert r.status_code == 303
    return r.headers["location"].rsplit("/", 1)[-1]


def test_steps_follow_the_data_and_the_panel_leaves_with_the_first_file(client, session):
    csrf = login_as(client, session)
    code = _register(client, csrf)
    steps = _steps(client.get(f"/compounds/{code}").text)
    assert list(steps) == ["batch", "sample", "upload"]
    assert steps["batch"] == {"state": "todo", "current": True, "href": f"/compounds/{code}/batches/new"}
    # Without a batch there is nowhere to describe a sample or upload a file: no links yet.
    assert steps["sample"] == {"state": "todo", "current": False, "href": None}
    assert steps["upload"] == {"state": "todo", "current": False, "href": None}

    client.post(f"/compounds/{code}/batches/new", data={"state": "made", "csrf_token": csrf})
    batch_code = f"{code}-B01"
    steps = _steps(client.get(f"/compounds/{code}").text)
    assert steps["batch"]["state"] == "done" and not steps["batch"]["current"] and steps["batch"]["href"] is None
    assert steps["sample"] == {"state": "todo", "current": True,
                               "href": f"/batches/{batch_code}/upload?sample=new#new-sample"}
    assert steps["upload"]["href"] == f"/batches/{batch_code}/upload"
    # The sample link opens the upload form with "a new sample" chosen.
    form = soup(client.get(steps["sample"]["href"]).text)
    assert form.select_one("#sample-choice option[selected]")["value"] == "new"

    # A batch's default sample (made by an upload to the batch itself) is not a described sample.
    batch = session.exec(select(Batch).where(Batch.code == batch_code)).one()
    samples.ensure_default_sample(session, batch, actor="test")
    session.commit()
    assert _steps(client.get(f"/compounds/{code}").text)["sample"]["state"] == "todo"
    samples.create_sample(session=session, batch=batch, data=SampleCreate(form="pellet", thickness="150 um"),
                          actor="test")
    steps = _steps(client.get(f"/compounds/{code}").text)
    assert steps["sample"]["state"] == "done"
    assert steps["upload"] == {"state": "todo", "current": True, "href": f"/batches/{batch_code}/upload"}

    raw = to_csv_bytes(miller_loop(10, 8, 50, 300), {"temperature": "300 K"})
    r = client.post(f"/batches/{batch_code}/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": ("loop.csv", raw)}, follow_redirects=False)
    assert r.status_code == 303, r.text
    assert _steps(client.get(f"/compounds/{code}").text) == {}


def test_steps_point_at_the_newest_live_batch(client, session):
    csrf = login_as(client, session)
    code = _register(client, csrf)
    for _ in range(2):
        client.post(f"/compounds/{code}/batches/new", data={"state": "made", "csrf_token": csrf})
    assert _steps(client.get(f"/compounds/{code}").text)["upload"]["href"] == f"/batches/{code}-B02/upload"
    newest = session.exec(select(Batch).where(Batch.code == f"{code}-B02")).one()
    newest.archived = True
    session.add(newest)
    session.commit()
    assert _steps(client.get(f"/compounds/{code}").text)["upload"]["href"] == f"/batches/{code}-B01/upload"


def test_no_steps_for_archived_compounds(client, session):
    csrf = login_as(client, session)
    code = _register(client, csrf)
    assert _steps(client.get(f"/compounds/{code}").text)
    client.post(f"/compounds/{code}/archive", data={"csrf_token": csrf})
    assert _steps(client.get(f"/compounds/{code}").text) == {}


def test_no_steps_for_viewers(client, session):
    csrf = login_as(client, session)
    code = _register(client, csrf)
    assert _steps(client.get(f"/compounds/{code}").text)
    client.post("/logout", data={"csrf_token": csrf})
    make_user(session, name="vera", role="viewer")
    r = client.post("/login", data={"username": "vera", "password": PASSWORD,
                                    "csrf_token": csrf_of(client.get("/login").text), "next": "/compounds"},
                    follow_redirects=False)
    assert r.status_code == 303
    page = client.get(f"/compounds/{code}")
    assert page.status_code == 200 and soup(page.text).find("h1").text.strip().startswith(code)
    assert "Add a batch" not in [a.text for a in soup(page.text).find_all("a")]  # really a reader's page
    assert _steps(page.text) == {}
