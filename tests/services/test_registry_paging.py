"""Keyset pages of the registry list (server/services/views.py, DEVELOPERS.md "Registry lists"): walking a
view page by page through its cursors lists every row once, in the order of the whole view, under heavy
ties of the sort value, with rows inserted between two requests, and, for a caller who may not see
embargoed structures, in an order that does not depend on an embargoed compound's structure-derived
values. SQLite and PostgreSQL (the ``db_url`` fixture)."""

from __future__ import annotations

import base64
import json
import random
from datetime import datetime, timedelta, timezone
from typing import Optional

import pytest
from sqlmodel import Session

from server.access import Actor
from server.models import Compound, CompoundStats
from server.services import views
from tests.factories import bearer, login_as, make_token, soup

# A read token without the embargo grant may not see embargoed structures; every account may.
VIEWER = Actor(kind="token", name="dashboard-pc", scope="read")
MEMBER = Actor(kind="user", name="member1", role="member")
T0 = datetime(2026, 3, 2, 9, 0, tzinfo=timezone.utc)
SIZE = 7


def _add(session: Session, number: int, *, mw: float, batches: int, barrier: Optional[float], embargoed: bool = False,
         label: str = "") -> None:
    """One registry row as the services would leave it (the list reads only these columns)."""
    compound = Compound(number=number, code=f"PG-{number:05d}", label=label or f"bowl {number % 5}", smiles="C",
                        inchi=f"InChI=1S/test{number}", inchikey=f"{number:014d}-TESTKEYAA-N"[:27],
                        formula="C", mw=mw, exact_mass=mw, embargoed=embargoed,
                        created_at=T0 + timedelta(hours=number % 9), updated_at=T0)
    session.add(compound)
    session.flush()
    session.add(CompoundStats(compound_id=compound.id, n_batches=batches, n_measurements=batches * 2,
                              barrier_measured_kcal_mol=barrier))


@pytest.fixture
def registry(session):
    """60 rows: molar masses from four values (heavy ties), batch counts 0-2, a barrier for two rows in three
    (NULLs in between), every seventh row embargoed; numbers not in insertion order."""
    rng = random.Random(21)
    numbers = rng.sample(range(10, 400), 60)
    for i, n in enumerate(numbers):
        _add(session, n, mw=(300.25, 412.5, 412.5, 530.0)[i % 4], batches=i % 3,
             barrier=None if i % 3 == 1 else round(11 + (i % 5) * 0.5, 2), embargoed=i % 7 == 0)
    session.commit()
    return numbers


def _walk(session: Session, params: dict, actor: Actor, *, between=None) -> list[int]:
    """Registration numbers seen walking forward through ``next_cursor`` from the first page."""
    q = views.parse_view({**params, "size": str(SIZE)})
    seen: list[int] = []
    for step in range(200):
        result = views.query_view(session, q, actor=actor, count=False)
        seen += [r.compound.number for r in result.rows]
        if between is not None:
            between(step)
        if result.next_cursor is None:
            assert not result.has_next
            return seen
        q = views.parse_view({**params, "size": str(SIZE), "page": str(q.page + 1), "after": result.next_cursor.token})
    raise AssertionError("the walk did not end")


def _whole(session: Session, params: dict, actor: Actor) -> list[int]:
    return [r.compound.number for r in views.query_view(session, views.parse_view(params), actor=actor,
                                                          paged=False).rows]


SORTS = [{}, {"sort": "code", "dir": "asc"}, {"sort": "mw", "dir": "desc"}, {"sort": "mw", "dir": "asc"},
         {"sort": "batches", "dir": "desc"}, {"sort": "barrier", "dir": "desc"}, {"sort": "barrier", "dir": "asc"},
         {"sort": "label", "dir": "asc"}, {"sort": "created", "dir": "desc"}, {"sort": "verdict", "dir": "asc"}]


@pytest.mark.parametrize("params", SORTS, ids=lambda p: f"{p.get('sort', 'code')}-{p.get('dir', 'desc')}")
@pytest.mark.parametrize("actor", [VIEWER, MEMBER], ids=["read-token", "member"])
def test_walking_the_cursors_lists_every_row_once_in_the_order_of_the_whole_view(session, registry, params, actor):
    whole = _whole(session, params, actor)
    assert len(whole) == len(registry)
    assert _walk(session, params, actor) == whole
    # Offset pages (links from before cursors) list the same rows page by page.
    by_offset = []
    for page in range(1, -(-len(whole) // SIZE) + 1):
        q = views.parse_view({**params, "size": str(SIZE), "page": str(page)})
        by_offset += [r.compound.number for r in views.query_view(session, q, actor=actor).rows]
    assert by_offset == whole


@pytest.mark.parametrize("params", SORTS[2:7], ids=lambda p: f"{p['sort']}-{p['dir']}")
def test_walking_back_through_before_cursors_gives_the_same_pages(session, registry, params):
    forward = []
    q = views.parse_view({**params, "size": str(SIZE)})
    while True:
        result = views.query_view(session, q, actor=VIEWER, count=False)
        forward.append((q.page, [r.compound.number for r in result.rows], result.prev_cursor))
        if result.next_cursor is None:
            break
        q = views.parse_view({**params, "size": str(SIZE), "page": str(q.page + 1), "after": result.next_cursor.token})
    # From each page, "previous" (before= its first row) gives the page before it.
    for (page, rows, prev), (_, before_rows, _) in zip(forward[1:], forward[:-1]):
        q = views.parse_view({**params, "size": str(SIZE), "page": str(page - 1), "before": prev.token})
        back = views.query_view(session, q, actor=VIEWER, count=False)
        assert [r.compound.number for r in back.rows] == before_rows
        assert back.query.page == page - 1


def test_rows_inserted_between_requests_leave_no_gap_and_no_duplicate(session, registry):
    params = {"sort": "mw", "dir": "desc"}
    before = set(_whole(session, params, MEMBER))
    added = iter(range(1000, 1100))

    def insert(step: int) -> None:
        # Rows tying with every molar mass already listed, above and below the page just read, and a new maximum.
        for mw in (530.0, 412.5, 300.25, 999.0):
            _add(session, next(added), mw=mw, batches=1, barrier=12.0, embargoed=step % 2 == 0)
        session.commit()

    seen = _walk(session, params, MEMBER, between=insert)
    assert len(seen) == len(set(seen)), "a row was listed twice"
    assert before <= set(seen), f"rows present from the start were skipped: {sorted(before - set(seen))}"
    whole_now = _whole(session, params, MEMBER)
    assert seen == [n for n in whole_now if n in set(seen)], "the walk left the view's order"


def test_a_viewers_pages_do_not_depend_on_embargoed_structure_values(session, registry):
    params = {"sort": "mw", "dir": "desc"}
    first_walk = _walk(session, params, VIEWER)
    embargoed = [c for c in session.exec(Compound.__table__.select().where(Compound.embargoed == True)).all()]  # noqa: E712
    assert embargoed
    # The viewer's order puts embargoed rows with the rows without a value, by number alone.
    tail = first_walk[-len(embargoed):]
    assert sorted(tail, reverse=True) == tail and set(tail) == {c.number for c in embargoed}
    # Change every embargoed molar mass: nothing the viewer is answered changes, cursors included.
    cursors_before = []
    q = views.parse_view({**params, "size": str(SIZE)})
    result = views.query_view(session, q, actor=VIEWER, count=False)
    cursors_before.append(result.next_cursor.token)
    for c in embargoed:
        session.get(Compound, c.id).mw = 10_000.0 + c.number
    session.commit()
    assert _walk(session, params, VIEWER) == first_walk
    assert views.query_view(session, q, actor=VIEWER, count=False).next_cursor.token == cursors_before[0]
    # A position a member was given (on an embargoed row, by its true molar mass) places a viewer by code alone.
    member_rows = _whole(session, params, MEMBER)
    assert member_rows[0] in {c.number for c in embargoed}  # the member sees the new, largest masses first
    token = views.Cursor("mw", True, member_rows[0]).token
    assert set(json.loads(base64.urlsafe_b64decode(token + "=" * (-len(token) % 4)))) == {"s", "d", "n"}
    after = views.query_view(session, views.parse_view({**params, "size": "50", "after": token}), actor=VIEWER,
                             count=False)
    position = first_walk.index(member_rows[0])
    assert [r.compound.number for r in after.rows] == first_walk[position + 1: position + 51]


@pytest.mark.parametrize("where", ["/compounds", "/api/v1/compounds"])
def test_a_bad_position_is_refused_naming_its_field(client, session, registry, where):
    headers = bearer(make_token(session, scope="read")) if where.startswith("/api/") else {}
    if not headers:
        login_as(client, session, role="viewer")
    good = views.Cursor("mw", True, registry[0]).token
    for query, field in ((f"after=not-a-cursor", "after"), ("before=eyJzIjoiY29kZSJ9", "before"),
                         (f"sort=code&after={good}", "after"), (f"sort=mw&dir=desc&after={good}&before={good}", "before"),
                         (f"sort=mw&dir=desc&after={views.Cursor('mw', True, 99_999).token}", "after")):
        r = client.get(f"{where}?{query}", headers=headers)
        assert r.status_code == 422, (query, r.text[:300])
        if where.startswith("/api/"):
            assert r.json()["field"] == field, query
        else:
            assert soup(r.text).select_one("#view-error")["data-field"] == field, query


def test_the_api_pages_by_next_after(client, session, registry):
    h = bearer(make_token(session, scope="read"))
    seen, query = [], "sort=batches&dir=desc&limit=9"
    first = client.get(f"/api/v1/compounds?{query}", headers=h).json()
    assert first["total"] == len(registry)
    body = first
    while True:
        seen += [i["code"] for i in body["items"]]
        if body["next_after"] is None:
            break
        body = client.get(f"/api/v1/compounds?{query}&after={body['next_after']}", headers=h).json()
    offset = client.get(f"/api/v1/compounds?sort=batches&dir=desc&limit=500", headers=h).json()
    assert seen == [i["code"] for i in offset["items"]]
    assert offset["next_after"] is None


def test_the_page_counts_after_its_rows_and_older_page_links_still_work(client, session, registry):
    login_as(client, session, role="viewer")
    page = soup(client.get("/compounds?size=10&sort=mw&dir=asc").text)
    count = page.select_one("#view-count")
    assert "counting" in count.get_text() and count.get("data-total") is None
    counted = client.get(count["hx-get"], headers={"HX-Request": "true"})
    assert counted.status_code == 200
    fragment = soup(counted.text)
    assert fragment.select_one("#view-count")["data-total"] == str(len(registry))
    assert fragment.select_one("#view-pages").get_text() == "6"
    # Without JavaScript the count is a page of its own.
    assert f"{len(registry)} compounds" in soup(client.get(count.select_one("a")["href"]).text).get_text(" ")
    # Next carries a position; the page it leads to is the second page of the offset link.
    nxt = page.select_one("#pager-next")["href"]
    assert "after=" in nxt and "page=2" in nxt
    by_cursor = [tr["data-code"] for tr in soup(client.get(nxt).text).select("table.registry tbody tr")]
    by_offset = [tr["data-code"] for tr in
                 soup(client.get("/compounds?size=10&sort=mw&dir=asc&page=2").text).select("table.registry tbody tr")]
    assert by_cursor == by_offset and len(by_cursor) == 10
    # A page that holds the whole view gives its count at once.
    whole = soup(client.get("/compounds?size=100").text).select_one("#view-count")
    assert whole["data-total"] == str(len(registry))
