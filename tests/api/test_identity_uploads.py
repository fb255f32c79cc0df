"""HRMS and elemental-analysis uploads through the API (SQLite and PostgreSQL).

The compound is the invented hexamethoxybenzene C12H18O6: monoisotopic mass 258.11033829 u (by hand from
NIST masses: 12 x 12 + 18 x 1.00782503223 + 6 x 15.99491461957), so [M+Na]+ = 258.11033829 +
22.9897692820 - 0.00054857991 = 281.09955899; C 55.81, H 7.03 % (IUPAC conventional atomic weights, by hand:
144.132 / 258.270 and 18.144 / 258.270).
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlmodel import select

from server.ingest.table import to_csv_bytes
from server.models import Measurement, RawFile
from server.synth.identity import elemental_file, hrms_profile
from tests.api.test_measurements import batch, post, uploader  # noqa: F401 - fixtures


def test_hrms_upload(client, batch, uploader):  # noqa: F811
    frame = hrms_profile("C12H18O6", "[M+Na]+", rng=np.random.default_rng(11), error_ppm=-1.5)
    r = post(client, batch, "hrms", to_csv_bytes(frame, {"ion": "[M+Na]+"}), uploader)
    assert r.status_code == 201, r.text
    res = r.json()["results"]
    assert res["calc_mz"] == pytest.approx(281.09955899, abs=2e-6)
    assert res["error_ppm"] == pytest.approx(-1.5, abs=0.3) and res["pass"] is True
    assert r.json()["verdict"] == "pass"


def test_hrms_without_ion_is_refused(client, session, batch, uploader):  # noqa: F811
    frame = hrms_profile("C12H18O6", "[M+H]+", rng=np.random.default_rng(12))
    r = post(client, batch, "hrms", to_csv_bytes(frame, {}), uploader)
    assert r.status_code == 422 and "ion" in r.json()["detail"]
    assert session.exec(select(Measurement)).all() == [] and session.exec(select(RawFile)).all() == []


def test_elemental_upload_and_over_100_refused(client, session, batch, uploader):  # noqa: F811
    r = post(client, batch, "elemental", elemental_file({"C": 55.70, "H": 7.10}), uploader)
    assert r.status_code == 201, r.text
    res = r.json()["results"]
    assert res["calc_pct"] == pytest.approx({"C": 55.807, "H": 7.025}, abs=0.001) and res["pass"] is True
    bad = post(client, batch, "elemental", elemental_file({"C": 80.0, "H": 25.0}), uploader)
    assert bad.status_code == 422 and "over 100" in bad.json()["detail"]
    assert len(session.exec(select(Measurement)).all()) == 1
