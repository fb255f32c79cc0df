"""Schema-driven fuzzing of the JSON API with schemathesis, in process (ASGI), on SQLite and PostgreSQL.

Every operation in ``/openapi.json`` gets a bounded number of generated requests (bodies, query
strings, path parameters and multipart forms that fit, and do not fit, the schema), sent with a
write token. Half the path parameters are swapped for identifiers that exist (a compound, a batch,
a job), so that the handlers behind the lookups are reached too. The one property asserted: no
answer is a 5xx. A server exception would be re-raised with its traceback by the test client.

schemathesis is a test dependency (``pip install schemathesis``); the test is skipped without it.
"""

from __future__ import annotations

import os
import time

import pytest
from hypothesis import HealthCheck, given, settings as hsettings
from hypothesis.errors import Unsatisfiable

schemathesis = pytest.importorskip("schemathesis")

from tests.factories import bearer, make_token  # noqa: E402

from .conftest import seed_batch  # noqa: E402

EXAMPLES = int(os.environ.get("REMANENCE_TRUST_SCHEMA_EXAMPLES", "6"))


@pytest.fixture
def known(app, settings, session):
    """Identifiers that exist, and the write token the fuzzer sends."""
    code, batch = seed_batch(app.state.engine, settings)
    token = make_token(session, scope="write", name="fuzzer")
    return {"headers": bearer(token), "ids": {"code": code, "batch_code": batch, "job_id": 1, "barrier_id": 1,
                                              "measurement_id": 1}}


def test_no_operation_answers_5xx(app, known):
    # Built in the test (not schemathesis.pytest.from_fixture, which reads a pytest attribute that
    # pytest 9 no longer has), one Hypothesis run per operation and generation mode.
    schema = schemathesis.openapi.from_asgi("/openapi.json", app)
    operations = [result.ok() for result in schema.get_all_operations()]
    assert len(operations) >= 20, [f"{o.method} {o.path}" for o in operations]
    failures: list[str] = []
    tried = 0
    timing: list[tuple[float, str]] = []

    for op in operations:
        modes = [(schemathesis.GenerationMode.POSITIVE, EXAMPLES)]
        # Invalid data needs something to make invalid: a body or a query string (a free-text path
        # parameter cannot be invalid, and Hypothesis would spend seconds finding that out).
        if len(op.body) or len(op.query):
            modes.append((schemathesis.GenerationMode.NEGATIVE, max(1, EXAMPLES // 2)))
        for mode, examples in modes:
            @hsettings(max_examples=examples, deadline=None, database=None,
                       derandomize=os.environ.get("CI", "") == "true", suppress_health_check=list(HealthCheck))
            @given(case=op.as_strategy(generation_mode=mode))
            def run(case) -> None:
                nonlocal tried
                # Half the cases aim at things that exist; decided by the case itself, so a replay is the same.
                if case.path_parameters and hash(repr(sorted(case.path_parameters.items(), key=str))) % 2:
                    for name in case.path_parameters:
                        if name in known["ids"]:
                            case.path_parameters[name] = known["ids"][name]
                tried += 1
                try:
                    response = case.call(headers=known["headers"])
                except Exception as exc:  # noqa: BLE001 - a server exception is the finding; report it
                    raise AssertionError(f"{case.method} {case.formatted_path} raised in the app:\n"
                                         f"{case.as_curl_command()}") from exc
                assert response.status_code < 500, (
                    f"{case.method} {case.formatted_path} -> {response.status_code}\n{case.as_curl_command()}\n"
                    f"{response.text[:2000]}")

            t0 = time.perf_counter()
            try:
                run()
            except Unsatisfiable:
                pass  # nothing in this operation can be made invalid (no parameters, no body)
            except AssertionError as exc:
                cause = exc.__cause__
                line = f"[{mode.value}] {exc}" + (f"\n  cause: {type(cause).__name__}: {cause}" if cause else "")
                failures.append(line)
            timing.append((time.perf_counter() - t0, f"{op.method.upper()} {op.path} [{mode.value}]"))
    slow = ", ".join(f"{name} {t:.1f} s" for t, name in sorted(timing, reverse=True)[:5])
    print(f"\n[schema fuzz] {len(operations)} operations, {tried} requests; slowest: {slow}")
    assert not failures, "\n\n".join(failures)


HUGE = [2**31, 2**63, 3148615774380050845860762310672384]  # past PostgreSQL integer, SQLite INTEGER, both


@pytest.mark.parametrize("path", ["/api/v1/measurements/{n}", "/api/v1/measurements/{n}/raw", "/api/v1/jobs/{n}",
                                  "/api/v1/barriers/{n}/rate", "/api/v1/measurements?offset={n}"])
def test_huge_integer_ids_answer_404_not_500(client, known, path):
    for n in HUGE:
        r = client.get(path.format(n=n), headers=known["headers"])
        assert r.status_code in (404, 422) or (r.status_code == 200 and "offset" in path), (n, r.status_code)
