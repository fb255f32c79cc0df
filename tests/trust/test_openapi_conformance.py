"""The OpenAPI document matches what the routes answer (issue 12, item 20).

Real requests, one or more per API operation (successes and the documented errors), against a
seeded registry; every answer is checked with schemathesis' response validation against the
operation it belongs to in ``/openapi.json`` (the body validates against the declared schema),
and here that the status code is documented and the content type is the declared one (which
schemathesis' ``validate_response`` leaves to its separate checks). A new operation with no
request here fails the coverage check, so the document cannot drift unnoticed.
"""

from __future__ import annotations

import pytest

schemathesis = pytest.importorskip("schemathesis")

from tests.factories import bearer, login_as, make_token  # noqa: E402

from .conftest import loop_bytes, seed_batch  # noqa: E402

SCAFFOLD_SMILES = "[*:1]c1ccc([*:2])cc1"
PROFILE = {"name": "semi", "kind": "pe_loop", "delimiter": ";", "decimal": ",",
           "columns": {"U": {"to": "E", "unit": "kV/cm"}, "C": {"to": "P", "unit": "uC/cm^2"}},
           "conditions": {"A": {"to": "area", "unit": "cm^2"}, "d": {"to": "thickness", "unit": "um"},
                          "f": {"to": "frequency", "unit": "Hz"}, "T": {"to": "temperature", "unit": "K"}},
           "blocks": {"separator": "blank_line", "varies": "temperature"}}


def _semi_file() -> bytes:
    """Two loops of the conftest's loop file in the profile's own dialect, at 300 K and 320 K."""
    from server.ingest.table import read_table

    frame = read_table(loop_bytes(9)).frame
    rows = [";".join(f"{v!r}".replace(".", ",") for v in row) for row in frame[["E_kV_cm", "P_uC_cm2"]].to_numpy()]
    out = ["A: 0,0785", "d: 150", "f: 100"]
    for t in (300, 320):
        out += ["", f"T: {t}", "U;C", *rows]
    return ("\n".join(out) + "\n").encode()


def _image(fmt: str, seed: int, claim: str | None = None, **data: str) -> dict:
    from tests.api.test_attachments import TYPES, micrograph

    name, ctype = TYPES[fmt]
    return {"files": {"file": (name, micrograph(fmt, size=(64, 48), seed=seed), claim or ctype)}, "data": data}


def _requests(code: str, batch: str) -> list[tuple[str, str, dict]]:
    """(method, path, httpx keyword arguments), in an order where each needs only what came before."""
    semi = _semi_file()
    loop = {"data": {"kind": "pe_loop"}, "files": {"file": ("loop.csv", loop_bytes(7), "text/csv")}}
    return [
        ("POST", "/api/v1/compounds", {"json": {"smiles": "CCOc1ccc(OCC)cc1", "label": "diethoxy"}}),
        ("POST", "/api/v1/compounds", {"json": {"smiles": "CCOc1ccc(OCC)cc1"}}),  # 409
        ("POST", "/api/v1/compounds", {"json": {"smiles": "C1CC"}}),  # 422
        ("GET", "/api/v1/compounds", {}),
        ("GET", "/api/v1/compounds?c_min=999", {}),  # 422
        ("GET", "/api/v1/search?substructure=c1ccccc1", {}),
        ("GET", "/api/v1/search?similar=CCOc1ccccc1&threshold=0.2", {}),
        ("GET", f"/api/v1/compounds/{code}", {}),
        ("GET", "/api/v1/compounds/RVZ-99999", {}),  # 404
        ("PATCH", f"/api/v1/compounds/{code}", {"json": {"label": "renamed"}}),
        ("GET", f"/api/v1/compounds/{code}/structure.svg", {}),
        ("GET", f"/api/v1/compounds/{code}/structure.svg?thumbnail=true", {}),
        ("POST", f"/api/v1/compounds/{code}/batches", {"json": {"chemist": "lab", "scale_mg": 120}}),
        ("GET", f"/api/v1/compounds/{code}/batches", {}),
        ("GET", f"/api/v1/batches/{batch}", {}),
        ("GET", "/api/v1/scaffolds", {}),
        ("POST", "/api/v1/scaffolds", {"json": {"code": "PARA", "name": "para-phenylene", "smiles": SCAFFOLD_SMILES}}),
        ("POST", "/api/v1/scaffolds", {"json": {"code": "PARA", "name": "again", "smiles": SCAFFOLD_SMILES}}),  # 409
        ("POST", f"/api/v1/batches/{batch}/measurements", loop),
        ("POST", f"/api/v1/batches/{batch}/measurements", loop),  # the same bytes: 200
        ("POST", f"/api/v1/batches/{batch}/measurements",
         {"data": {"kind": "pe_loop"}, "files": {"file": ("bad.csv", b"E (kV/cm),P\n1,x\n", "text/csv")}}),  # 422
        ("GET", "/api/v1/measurements", {}),
        ("GET", "/api/v1/measurements/1", {}),
        ("GET", "/api/v1/measurements/1/raw", {}),
        ("GET", "/api/v1/measurements/999", {}),  # 404
        ("POST", "/api/v1/measurements/1/archive", {}),
        ("POST", "/api/v1/measurements/1/restore", {}),
        ("POST", f"/api/v1/compounds/{code}/barriers", {"json": {"method": "coalescence", "tc_K": 298.15, "dnu_Hz": 100}}),
        ("GET", f"/api/v1/compounds/{code}/barriers", {}),
        ("GET", "/api/v1/barriers/1/rate?t_K=300&frequency_Hz=100", {}),
        ("POST", f"/api/v1/compounds/{code}/verdict/override", {"json": {"code": "not_ferroelectric", "reason": "r"}}),
        ("POST", f"/api/v1/compounds/{code}/verdict/clear", {}),
        ("POST", f"/api/v1/compounds/{code}/estimates", {}),
        ("POST", "/api/v1/estimates", {"json": {"compounds": [code]}}),
        ("GET", "/api/v1/jobs", {}),
        ("GET", "/api/v1/jobs/summary", {}),
        ("GET", "/api/v1/jobs/1", {}),
        ("POST", "/api/v1/jobs/1/cancel", {}),
        ("GET", "/api/v1/users", {}),
        ("POST", "/api/v1/users", {"json": {"username": "kai", "password": "long-enough-pw", "role": "viewer"}}),
        ("POST", "/api/v1/users/kai/deactivate", {}),
        ("GET", "/api/v1/tokens", {}),
        ("POST", "/api/v1/tokens", {"json": {"name": "xrd-pc", "scope": "upload"}}),
        ("POST", "/api/v1/tokens/1/revoke", {}),
        # Samples, series and corrections (issue 13); the batch's first upload made its default sample S01.
        ("GET", f"/api/v1/batches/{batch}/samples", {}),
        ("POST", f"/api/v1/batches/{batch}/samples", {"json": {"form": "pellet", "thickness": "150 um",
                                                               "electrode_area": "7.85 mm^2"}}),
        ("POST", f"/api/v1/batches/{batch}/samples", {"json": {"form": "pellet", "thickness": "0 um"}}),  # 422
        ("GET", f"/api/v1/samples/{batch}-S01", {}),
        ("GET", f"/api/v1/samples/{batch}-S01/series", {}),
        ("POST", f"/api/v1/samples/{batch}-S02/measurements",
         {"data": {"kind": "pe_loop"}, "files": {"file": ("loop8.csv", loop_bytes(8), "text/csv")}}),
        ("POST", f"/api/v1/samples/{batch}-S01/series", {"json": {"variable": "temperature", "measurements": [1]}}),
        # Import profiles, profiled uploads and dry runs (issue 14).
        ("POST", "/api/v1/import-profiles", {"json": PROFILE}),
        ("POST", "/api/v1/import-profiles", {"json": PROFILE}),  # 409
        ("POST", "/api/v1/import-profiles", {"json": {**PROFILE, "name": "x", "columns": {"C": {"to": "Q",
                                                                                               "unit": "mm"}}}}),  # 422
        ("GET", "/api/v1/import-profiles", {}),
        ("GET", "/api/v1/import-profiles/semi", {}),
        ("GET", "/api/v1/import-profiles/nobody", {}),  # 404
        ("PATCH", "/api/v1/import-profiles/semi", {"json": {"skip_lines": 1}}),  # 201, a new version
        ("PATCH", "/api/v1/import-profiles/semi", {"json": {"skip_lines": 1}}),  # 200, nothing changed
        ("PATCH", "/api/v1/import-profiles/semi", {"json": {"skip_lines": 0}}),
        ("POST", f"/api/v1/batches/{batch}/measurements?dry_run=true", {**loop}),  # 200 preview
        ("POST", f"/api/v1/batches/{batch}/measurements",
         {"data": {"profile": "semi"}, "files": {"file": ("semi.csv", semi, "text/csv")}}),  # 201, two blocks
        ("POST", f"/api/v1/samples/{batch}-S01/measurements?dry_run=true",
         {"data": {"profile": "semi"}, "files": {"file": ("semi.csv", semi, "text/csv")}}),
        # Identity and outputs (issues 17 and 19).
        ("GET", f"/api/v1/batches/{batch}/identity", {}),
        ("POST", f"/api/v1/batches/{batch}/identity/confirm", {"json": {}}),  # no agreeing evidence, no note: 422
        ("POST", f"/api/v1/batches/{batch}/identity/confirm", {"json": {"note": "NMR matches batch B01"}}),
        ("POST", f"/api/v1/batches/{batch}/identity/withdraw", {"json": {"note": "EA of the dried batch fails"}}),
        ("GET", "/api/v1/measurements/1/figure.svg", {}),
        ("GET", f"/api/v1/compounds/{code}/figures/switching.svg", {}),
        ("GET", f"/api/v1/compounds/{code}/report.zip", {}),
        # Comment threads (issue 23).
        ("POST", f"/api/v1/compounds/{code}/comments", {"json": {"body": "**first** @admin1"}}),
        ("POST", f"/api/v1/compounds/{code}/comments", {"json": {"body": ""}}),  # 422
        ("GET", f"/api/v1/compounds/{code}/comments", {}),
        ("POST", f"/api/v1/batches/{batch}/comments", {"json": {"body": "batch note"}}),
        ("GET", f"/api/v1/batches/{batch}/comments", {}),
        ("POST", f"/api/v1/samples/{batch}-S01/comments", {"json": {"body": "sample note"}}),
        ("GET", f"/api/v1/samples/{batch}-S01/comments", {}),
        ("POST", "/api/v1/measurements/1/comments", {"json": {"body": "loop note"}}),
        ("GET", "/api/v1/measurements/1/comments", {}),
        ("GET", "/api/v1/measurements/999/comments", {}),  # 404
        ("PATCH", "/api/v1/comments/1", {"json": {"body": "**first**, edited"}}),
        ("GET", "/api/v1/comments/1/history", {}),
        ("POST", "/api/v1/comments/1/archive", {}),
        ("POST", "/api/v1/comments/1/restore", {}),
        # Notifications, follows and preferences (issue 23).
        ("PUT", f"/api/v1/compounds/{code}/follow", {}),
        ("PUT", "/api/v1/compounds/RVZ-99999/follow", {}),  # 404
        ("GET", "/api/v1/notifications?unread=true&limit=10", {}),
        ("POST", "/api/v1/notifications/999/read", {}),  # 404
        ("POST", "/api/v1/notifications/read-all", {}),
        ("GET", "/api/v1/notifications/preferences", {}),
        ("PUT", "/api/v1/notifications/preferences", {"json": {"email": "admin@lab.example", "events": [
            {"event": "mention", "inbox": True, "email": True}]}}),
        ("PUT", "/api/v1/notifications/preferences", {"json": {"email": "", "events": [
            {"event": "mention", "email": True}]}}),  # 422: e-mail needs an address
        ("DELETE", f"/api/v1/compounds/{code}/follow", {}),
        # Image attachments (issue 23): every target, a type the bytes contradict, a duplicate, the bytes.
        ("POST", f"/api/v1/compounds/{code}/attachments", _image("PNG", 1, caption="POM", scale_bar="100 um")),
        ("POST", f"/api/v1/compounds/{code}/attachments", _image("PNG", 1)),  # 409: attached already
        ("POST", f"/api/v1/compounds/{code}/attachments", _image("JPEG", 2, claim="image/png")),  # 422
        ("GET", f"/api/v1/compounds/{code}/attachments", {}),
        ("POST", f"/api/v1/batches/{batch}/attachments", _image("JPEG", 3, polariser="crossed")),
        ("GET", f"/api/v1/batches/{batch}/attachments", {}),
        ("POST", f"/api/v1/samples/{batch}-S01/attachments", _image("TIFF", 4, temperature="300 K")),
        ("GET", f"/api/v1/samples/{batch}-S01/attachments", {}),
        ("POST", "/api/v1/measurements/1/attachments", _image("PNG", 5, magnification="10x")),
        ("GET", "/api/v1/measurements/1/attachments", {}),
        ("GET", "/api/v1/attachments/1", {}),
        ("GET", "/api/v1/attachments/99", {}),  # 404
        ("GET", "/api/v1/attachments/1/original", {}),
        ("GET", "/api/v1/attachments/3/original", {}),  # a TIFF
        ("GET", "/api/v1/attachments/1/thumbnail", {}),
        ("POST", "/api/v1/attachments/1/archive", {"json": {"reason": "out of focus"}}),
        ("POST", "/api/v1/attachments/1/archive", {"json": {"reason": "again"}}),  # 409: archived already
        ("POST", "/api/v1/attachments/1/restore", {"json": {}}),  # 422: no reason
        ("POST", "/api/v1/attachments/1/restore", {"json": {"reason": "the better of the two"}}),
        # Paper freezes (issue 23).
        ("POST", "/api/v1/freezes", {"json": {"name": "bowl-chains manuscript", "compounds": [code]}}),
        ("POST", "/api/v1/freezes", {"json": {"name": "bowl-chains manuscript", "compounds": [code]}}),  # 409
        ("POST", "/api/v1/freezes", {"json": {"name": "other", "compounds": ["RVZ-99999"]}}),  # 422
        ("GET", "/api/v1/freezes", {}),
        ("GET", "/api/v1/freezes/1", {}),
        ("GET", "/api/v1/freezes/99", {}),  # 404
        ("POST", "/api/v1/freezes/1/publication", {"json": {"dataset_doi": "10.5281/zenodo.1234567"}}),
        ("POST", "/api/v1/freezes/1/publication", {"json": {"dataset_doi": "nope"}}),  # 422
        ("GET", "/api/v1/freezes/1/pack.zip", {}),
        ("POST", "/api/v1/measurements/1/revise", {"data": {"thickness": "300 um"}}),
        # Planning (issue 20): a target, its state, the ranking (too few data here), a bad goal.
        ("POST", "/api/v1/compounds", {"json": {"smiles": "CCCOc1ccc(OCCC)cc1", "state": "planned", "priority": 1,
                                                "rationale": "propoxy analogue"}}),
        ("POST", "/api/v1/compounds", {"json": {"smiles": "CCCCOc1ccc(OCCCC)cc1", "state": "made"}}),  # 422
        ("PATCH", f"/api/v1/compounds/{code}", {"json": {"state": "abandoned"}}),  # 422: no reason
        ("GET", "/api/v1/planning/ranking?goal=tc", {}),
        ("GET", "/api/v1/planning/ranking?goal=cheapest", {}),  # 422
        ("POST", "/api/v1/reagents", {"json": {"name": "sodium hydride", "pictograms": ["GHS02"], "hazard_codes": ["H260"]}}),
        ("POST", "/api/v1/reagents", {"json": {"name": "Sodium hydride"}}),  # 409
        ("POST", "/api/v1/reagents", {"json": {"name": "x", "pictograms": ["GHS99"]}}),  # 422
        ("GET", "/api/v1/reagents", {}),
        ("PATCH", "/api/v1/reagents/1", {"json": {"sds_source": "supplier, rev. 2026"}}),
        ("PATCH", "/api/v1/reagents/999", {"json": {}}),  # 404
        ("PUT", f"/api/v1/batches/{batch}/route", {"json": {"steps": [{"solvent": "DMF", "temperature": "80 degC",
                                                                        "reagents": [{"reagent": "sodium hydride",
                                                                                      "amount": "2 mmol"}]}]}}),
        ("PUT", f"/api/v1/batches/{batch}/route", {"json": {"precursors": [batch]}}),  # 422: a cycle
        ("GET", f"/api/v1/batches/{batch}/route", {}),
        ("GET", "/api/v1/batches/NO-SUCH/route", {}),  # 404
        ("POST", f"/api/v1/batches/{batch}/route/copy", {"json": {"source": batch}}),  # 422
        ("POST", f"/api/v1/batches/{batch}/archive", {}),
        ("POST", f"/api/v1/batches/{batch}/measurements", loop),  # archived: 409
        ("POST", f"/api/v1/batches/{batch}/restore", {}),
        ("POST", f"/api/v1/compounds/{code}/archive", {}),
        ("POST", f"/api/v1/compounds/{code}/restore", {}),
    ]


def test_every_api_answer_matches_the_openapi_document(client, anon, session, app, settings):
    code, batch = seed_batch(app.state.engine, settings)
    csrf = login_as(client, session, "admin")
    reader = make_token(session, scope="read", name="reader-pc")
    # the document the app serves at /openapi.json, built in process (a loaded CI machine must not time out)
    schema = schemathesis.openapi.from_dict(app.openapi())
    assert client.get("/openapi.json").json() == schema.raw_schema, "/openapi.json is not the app's document"
    covered, failures = set(), []
    calls = [(client, m, p, {"headers": {"X-CSRF-Token": csrf}, **kw}) for m, p, kw in _requests(code, batch)]
    calls += [
        (anon, "GET", "/api/v1/compounds", {}),  # 401
        (anon, "POST", f"/api/v1/compounds/{code}/batches", {"json": {"chemist": "x"}, "headers": bearer(reader)}),  # 403
        (client, "POST", "/api/v1/compounds", {"json": {"smiles": 5, "embargoed": "perhaps"},
                                                "headers": {"X-CSRF-Token": csrf}}),  # 422, FastAPI validation
        (client, "GET", "/api/v1/compounds?limit=0", {"headers": {"X-CSRF-Token": csrf}}),  # 422
        (anon, "GET", "/api/v1/digest.atom", {"headers": bearer(reader)}),
    ]
    def check(http, method, path, kwargs):  # noqa: ANN001, ANN202 - test helper
        response = http.request(method, path, **kwargs)
        assert response.status_code < 500, (method, path, response.text[:500])
        op = schema.find_operation_by_path(method, path.split("?")[0])
        assert op is not None, f"{method} {path} is not in the OpenAPI document"
        covered.add((op.method.upper(), op.path))
        documented = op.definition.raw.get("responses", {})
        if str(response.status_code) not in documented and "default" not in documented:
            failures.append(f"{method} {path} -> {response.status_code}, not documented ({sorted(documented)})")
            return response
        declared = documented.get(str(response.status_code), {}).get("content", {})
        media = response.headers.get("content-type", "").split(";")[0].strip()
        if declared and media not in declared:
            failures.append(f"{method} {path} -> {response.status_code} {media}, declared {sorted(declared)}")
        try:
            op.validate_response(response)
        except Exception as exc:  # noqa: BLE001 - schemathesis raises a FailureGroup; collect them all
            failures.append(f"{method} {path} -> {response.status_code}: {exc}\n{response.text[:300]}")
        return response

    for call in calls:
        check(*call)
    # An edited NMR peak list (issue 17), after the calls above so measurement 1 stays the loop: a bad
    # edit (422), an edit (201: a new row), a revert of that row (201), a loop, which has no peak list (422).
    from tests.api.test_nmr_peak_edits import EDIT, _jdx
    h = {"X-CSRF-Token": csrf}
    nmr = client.post(f"/api/v1/batches/{batch}/measurements", data={"kind": "nmr_spectrum"},
                      files={"file": ("ea.jdx", _jdx(), "text/plain")}, headers=h)
    assert nmr.status_code == 201, nmr.text
    m = nmr.json()["id"]
    check(client, "POST", f"/api/v1/measurements/{m}/signals",
          {"json": {"signals": [{"from_ppm": "x", "to_ppm": 1}], "reason": "bad"}, "headers": h})
    edited = check(client, "POST", f"/api/v1/measurements/{m}/signals",
                   {"json": {"signals": EDIT, "reason": "by hand"}, "headers": h})
    assert edited.status_code == 201, edited.text
    reverted = check(client, "POST", f"/api/v1/measurements/{edited.json()['id']}/signals/revert",
                     {"json": {"reason": "undo"}, "headers": h})
    assert reverted.status_code == 201, reverted.text
    check(client, "POST", "/api/v1/measurements/1/signals", {"json": {"signals": EDIT, "reason": "a loop"}, "headers": h})
    all_ops = {(r.ok().method.upper(), r.ok().path) for r in schema.get_all_operations()}
    assert not failures, "\n\n".join(failures)
    assert all_ops <= covered, f"operations without a checked request: {sorted(all_ops - covered)}"
