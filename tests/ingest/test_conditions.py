"""Tests of server.ingest.conditions.

Expected values are worked by hand from the SI definitions (SI Brochure, 9th ed.,
BIPM 2019): prefixes m = 1e-3, u = 1e-6, k = 1e3 (section 3); degree Celsius
t/degC = T/K - 273.15 and a Celsius interval equals a kelvin interval (2.3.1);
minute = 60 s (table 8).
"""

from __future__ import annotations

import json

import pytest

from server.errors import IngestError
from server.ingest.conditions import Conditions, parse_conditions
from server.ingest.table import read_table


def error(form: dict, meta: dict | None = None) -> IngestError:
    with pytest.raises(IngestError) as info:
        parse_conditions(form, meta or {})
    return info.value


@pytest.mark.parametrize(
    ("field", "text", "kwarg", "expected"),
    [
        # 1 mm = 0.1 cm, so 0.785 mm^2 = 0.785 x 0.01 cm^2 = 0.00785 cm^2 (SI prefixes).
        ("area", "0.785 mm^2", "area_cm2", 0.00785),
        ("area", "0.785 mm²", "area_cm2", 0.00785),
        ("area", "1 cm2", "area_cm2", 1.0),
        ("area", "1e-4 m^2", "area_cm2", 1.0),
        ("thickness", "150 um", "thickness_um", 150.0),
        ("thickness", "150 µm", "thickness_um", 150.0),
        ("thickness", "0.15 mm", "thickness_um", 150.0),
        ("thickness", "1.5e-4 m", "thickness_um", 150.0),
        ("mass", "4.2 mg", "mass_mg", 4.2),
        ("mass", "0.0042 g", "mass_mg", 4.2),
        ("rate", "10 K/min", "rate_K_min", 10.0),
        # a Celsius interval is a kelvin interval (SI Brochure 2.3.1)
        ("rate", "10 °C/min", "rate_K_min", 10.0),
        ("rate", "10 degC/min", "rate_K_min", 10.0),
        ("rate", "0.5 K/s", "rate_K_min", 30.0),
        ("temperature", "300 K", "temperature_K", 300.0),
        # 25 degC = 25 + 273.15 K by the definition of the Celsius scale (SI Brochure 2.3.1)
        ("temperature", "25 degC", "temperature_K", 298.15),
        ("temperature", "25 °C", "temperature_K", 298.15),
        ("temperature", "-40 C", "temperature_K", 233.15),
        ("frequency", "100 Hz", "frequency_Hz", 100.0),
        ("frequency", "1 kHz", "frequency_Hz", 1000.0),
        ("frequency", "2.5MHz", "frequency_Hz", 2.5e6),
    ],
)
def test_conversions(field: str, text: str, kwarg: str, expected: float) -> None:
    cond = parse_conditions({field: text}, {})
    assert getattr(cond, kwarg) == pytest.approx(expected, rel=1e-12)
    assert cond.sources == {field: "form"}


def test_defaults() -> None:
    cond = parse_conditions({}, {})
    assert cond == Conditions()
    assert cond.endo == "up"
    assert cond.as_kwargs() == {
        "area_cm2": None, "thickness_um": None, "mass_mg": None, "rate_K_min": None,
        "temperature_K": None, "frequency_Hz": None, "spectrometer_MHz": None,
    }  # fmt: skip


def test_nmr_conditions_from_file_lines() -> None:
    # The spectrometer frequency converts like any quantity (1 GHz = 1000 MHz, SI prefixes);
    # nucleus and solvent are text.
    cond = parse_conditions({}, {"spectrometer": "0.4 GHz", "nucleus": "1H", "solvent": "CD2Cl2"})
    assert cond.spectrometer_MHz == pytest.approx(400.0)
    assert cond.nucleus == "1H" and cond.solvent == "CD2Cl2"
    assert cond.to_dict()["solvent"] == "CD2Cl2"
    with pytest.raises(IngestError) as err:
        parse_conditions({}, {"spectrometer": "400 K"})
    assert err.value.field == "spectrometer"


def test_form_wins_and_aliases() -> None:
    meta = {
        "sample area": "1 cm^2",
        "d": "150 um",
        "sample mass": "4.2 mg",
        "heating rate": "5 K/min",
        "temp": "300 K",
        "freq": "1 kHz",
        "endo": "down",
        "instrument": "DSC-7",
        "operator": "A. Tester",
        "lot": "RMX-0001-b",
    }
    form = {"area": "0.785 mm^2", "thickness": "", "mass": None, "rate": "  ", "notes": "second run"}
    cond = parse_conditions(form, meta)
    assert cond.area_cm2 == pytest.approx(0.00785)
    assert cond.thickness_um == 150.0
    assert cond.mass_mg == 4.2
    assert cond.rate_K_min == 5.0
    assert cond.temperature_K == 300.0
    assert cond.frequency_Hz == 1000.0
    assert cond.endo == "down"
    assert (cond.instrument, cond.operator, cond.notes) == ("DSC-7", "A. Tester", "second run")
    assert cond.extra == {"lot": "RMX-0001-b"}
    assert cond.sources["area"] == "form" and cond.sources["thickness"] == "file"
    assert cond.sources["notes"] == "form"


def test_metadata_keys_normalised() -> None:
    cond = parse_conditions({}, {"Sample_Area": "2 mm^2", "Frequency": "10 Hz", "Heating Rate": "2 K/min"})
    assert cond.area_cm2 == pytest.approx(0.02)
    assert cond.frequency_Hz == 10.0
    assert cond.rate_K_min == 2.0


def test_from_parsed_file() -> None:
    raw = b"# Sample Area: 0.785 mm^2\n# thickness: 0.1 mm\n# cell: C-2\nT (K),C (pF)\n300,10\n"
    cond = parse_conditions({"frequency": "1 kHz"}, read_table(raw).metadata)
    assert cond.as_kwargs() == pytest.approx(
        {"area_cm2": 0.00785, "thickness_um": 100.0, "mass_mg": None, "rate_K_min": None,
         "temperature_K": None, "frequency_Hz": 1000.0, "spectrometer_MHz": None}
    )  # fmt: skip
    assert cond.extra == {"cell": "C-2"}


def test_as_kwargs_and_to_dict() -> None:
    cond = parse_conditions({"mass": "4.2 mg", "endo": "Down"}, {"run": "3"})
    assert cond.as_kwargs(endo=True)["endo"] == "down"
    assert "endo" not in cond.as_kwargs()
    out = cond.to_dict()
    assert out["mass_mg"] == 4.2 and out["endo"] == "down" and out["extra"] == {"run": "3"}
    assert json.loads(json.dumps(out)) == out


def test_no_unit_message() -> None:
    err = error({"area": "0.785"})
    assert err.field == "area"
    assert str(err) == "field 'area': '0.785' has no unit; write e.g. '0.785 mm^2'"


def test_error_from_file_says_where() -> None:
    err = error({}, {"sample area": "0.785"})
    assert err.field == "area"
    assert "from the file line '# sample area: 0.785'" in err.message


def test_form_value_shadows_bad_file_value() -> None:
    cond = parse_conditions({"area": "1 mm^2"}, {"area": "nonsense"})
    assert cond.area_cm2 == pytest.approx(0.01)


@pytest.mark.parametrize(
    ("form", "field", "fragment"),
    [
        ({"area": "abc"}, "area", "'abc' is not a number with a unit"),
        ({"area": "1 kg"}, "area", "'kg' is not a unit of area"),
        ({"area": "1 mm^"}, "area", "'mm^' is not a unit"),
        ({"area": "1 blorp"}, "area", "'blorp' is not a unit"),
        ({"area": "-0.785 mm^2"}, "area", "must be greater than zero"),
        ({"area": "0 mm^2"}, "area", "must be greater than zero"),
        ({"thickness": "150"}, "thickness", "has no unit; write e.g. '150 um'"),
        ({"thickness": "-150 um"}, "thickness", "must be greater than zero"),
        ({"thickness": "1 s"}, "thickness", "'s' is not a unit of thickness"),
        ({"mass": "0 mg"}, "mass", "must be greater than zero"),
        ({"mass": "4.2 mL"}, "mass", "not a unit of mass"),
        ({"rate": "-10 K/min"}, "rate", "must be greater than zero"),
        ({"rate": "10 K"}, "rate", "'K' is not a unit of rate"),
        ({"rate": "10"}, "rate", "has no unit"),
        ({"temperature": "300"}, "temperature", "has no unit"),
        ({"temperature": "-300 degC"}, "temperature", "below absolute zero"),
        ({"temperature": "300 Hz"}, "temperature", "not a unit of temperature"),
        ({"frequency": "0 Hz"}, "frequency", "must be greater than zero"),
        ({"frequency": "1 kHz 2"}, "frequency", "not a unit"),
        ({"frequency": "nan Hz"}, "frequency", "not a number with a unit"),
        ({"frequency": "inf Hz"}, "frequency", "not a number with a unit"),
        ({"area": "1e400 mm^2"}, "area", "out of range"),
        ({"endo": "sideways"}, "endo", "neither 'up' nor 'down'"),
    ],
)
def test_errors(form: dict, field: str, fragment: str) -> None:
    err = error(form)
    assert err.field == field
    assert fragment in err.message


def test_conflicting_file_values() -> None:
    err = error({}, {"area": "1 mm^2", "sample area": "2 mm^2"})
    assert err.field == "area" and "more than once" in err.message
    # agreeing duplicates are fine
    assert parse_conditions({}, {"area": "1 mm^2", "sample area": "1 mm^2"}).area_cm2 == pytest.approx(0.01)
