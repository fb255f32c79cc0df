"""Integers from a request are bounded in one place (server/bounds.py): an oversized or absurd
number is a 422 naming the parameter, on every route that reads the registry view."""

from __future__ import annotations

import pytest

from server.bounds import CARBONS, whole_number
from server.errors import InputError
from tests.factories import login_as

# Every route that parses the registry view's query string (issue 12, item 11: these answered 500).
VIEW_ROUTES = ("/compounds", "/api/v1/compounds", "/explorer", "/outcomes", "/compounds/export.csv",
               "/compounds/export.xlsx", "/api/v1/search?substructure=c1ccccc1")
BIG = "9" * 30  # past every SQL integer type


@pytest.mark.parametrize("name", ["c_min", "c_max", "main_c", "page", "size"])
def test_oversized_integers_are_422_naming_the_parameter(client, session, name):
    login_as(client, session, "member")
    for route in VIEW_ROUTES:
        sep = "&" if "?" in route else "?"
        resp = client.get(f"{route}{sep}{name}={BIG}")
        assert resp.status_code == 422, (route, resp.status_code)
        assert name in resp.text, route
        if route.startswith("/api/"):
            assert resp.json()["field"] == name


def test_in_range_values_still_filter(client, session):
    login_as(client, session, "member")
    for route in VIEW_ROUTES:
        sep = "&" if "?" in route else "?"
        assert client.get(f"{route}{sep}c_min=6&c_max=12&main_c=8").status_code == 200, route


@pytest.mark.parametrize("text", ["101", "-1", "1_0", "٣", "1e3", "", " ", "0x10", BIG])
def test_whole_number_refuses(text):
    with pytest.raises(InputError) as err:
        whole_number("c_min", text, lo=CARBONS[0], hi=CARBONS[1])
    assert err.value.field == "c_min"


def test_whole_number_accepts_the_ends():
    assert whole_number("c_min", " 0 ", lo=0, hi=100) == 0
    assert whole_number("c_min", "+100", lo=0, hi=100) == 100


def test_row_ids_past_32_bits_are_422(client, session):
    login_as(client, session, "member")
    for route in ("/api/v1/measurements/" + BIG, "/api/v1/jobs/" + BIG, "/measurements/" + BIG,
                  "/api/v1/measurements?offset=" + BIG):
        assert client.get(route).status_code == 422, route
