"""Every analysis result serialises to the same JSON as before the one generic serialiser.

``result_json_pins.json`` holds, for each result type, what its ``to_dict()`` gave on a fixed
instance (built below from the field types: numpy scalars, NaN, infinities, None, tuples, nested
results, arrays) when each type still had a hand-written ``to_dict()``. The comparison is of the
JSON text, so key order counts too (pages list results in that order). After a deliberate change of
a result's keys, write the pins again with ``REMANENCE_REPIN=1`` and review the diff. The pxrd, saxs, shg,
relaxation and nmr_spectrum types never had a hand-written ``to_dict()``: their pins are regression snapshots of the generic
serialiser, taken when they were added, so a change to their keys shows up here too.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import typing
from pathlib import Path

import numpy as np
import pytest

from server.analysis import (calibration, crystal, dielectric, dsc, hysteresis, kinetics, nmr_spectrum, prediction,
                             pund, pxrd, relaxation, saxs, shg, verdict, xtb)
from server.analysis.results import Flag, Result

PINS = Path(__file__).with_name("result_json_pins.json")

RESULT_TYPES = (
    Flag, pund.PundResult, hysteresis.LoopResult, calibration.Calibration, crystal.CrystalResult,
    dielectric.DielectricPeak, dielectric.DielectricResult, dsc.DscPeak, dsc.DscSegment, dsc.DscResult,
    xtb.XtbEstimate, kinetics.CoalescenceResult, kinetics.EyringFit, kinetics.RateSummary,
    kinetics.ImportedBarrier, verdict.UsedEvidence, verdict.Conflict, verdict.CompoundVerdict,
    prediction.RegressionResult, prediction.ClassificationResult,
    pxrd.Reflection, pxrd.MeasuredPeak, pxrd.Comparison, pxrd.PxrdResult, pxrd.PatternChange, saxs.SaxsResult,
    shg.ShgResult, relaxation.Isotherm, relaxation.TemperatureFit, relaxation.RelaxationResult,
    nmr_spectrum.NmrSignal, nmr_spectrum.NmrSpectrumResult,
)
# Values a type needs to exercise its own branches (e.g. a fitted calibration computes residuals).
OVERRIDES = {
    "Calibration": {"status": "ok", "computed_kcal_mol": (10.0, 11.5, np.float64(13.0)),
                    "measured_kcal_mol": (10.4, 12.0, 13.1), "labels": ("a", "b", "c"),
                    "a_kcal_mol": 0.5, "b": np.float64(0.97)},
    # The hand-written Conflict.to_dict passed ids through unconverted: pinned with plain ints.
    "Conflict": {"measurement_ids": (3, 4)},
    "CrystalResult": {"cell": {"a": np.float64(7.5), "b": 8.25, "alpha": float("nan")}},
}


class _Sampler:
    """Deterministic values by field type; every third optional is None, some floats are NaN/inf."""

    def __init__(self) -> None:
        self.n = 0

    def value(self, tp, name: str):  # noqa: ANN001 - a typing form
        self.n += 1
        n = self.n
        origin, args = typing.get_origin(tp), typing.get_args(tp)
        if origin in (typing.Union, getattr(__import__("types"), "UnionType", None)):
            inner = [a for a in args if a is not type(None)]
            if type(None) in args and n % 3 == 0:
                return None
            return self.value(inner[0], name)
        if origin is tuple:
            if len(args) == 2 and args[1] is Ellipsis:
                return tuple(self.value(args[0], name) for _ in range(2))
            return tuple(self.value(a, name) for a in args)
        if origin in (dict, typing.Mapping) or tp is dict:
            return {"x": np.float64(n + 0.5), "nan": float("nan"), "list": (1, np.int64(2)), "s": f"v{n}"}
        if tp is float:
            return [np.float64(n * 1.25), float("nan"), n / 7.0, float("inf"), np.float32(0.5)][n % 5]
        if tp is int:
            return np.int64(n) if n % 2 else n
        if tp is bool:
            return np.bool_(n % 2 == 0)
        if tp is str:
            return f"{name}-{n}"
        if tp is np.ndarray:
            return np.arange(3.0) + n
        if tp is typing.Any:
            return {"k": np.float64(1.5)}
        if dataclasses.is_dataclass(tp):
            return self.instance(tp)
        raise TypeError(f"no sample for {tp!r} ({name})")

    def instance(self, cls):  # noqa: ANN001
        hints = typing.get_type_hints(cls)
        kw = {f.name: self.value(hints[f.name], f.name) for f in dataclasses.fields(cls) if f.init}
        kw.update(OVERRIDES.get(cls.__name__, {}))
        return cls(**kw)


def _sample(cls):  # noqa: ANN001
    return _Sampler().instance(cls)


def _json(obj) -> str:  # noqa: ANN001
    return json.dumps(obj.to_dict(), allow_nan=False)  # a NaN left in would fail here


def test_every_result_type_matches_its_pin():
    current = {cls.__name__: json.loads(_json(_sample(cls))) for cls in RESULT_TYPES}
    if os.environ.get("REMANENCE_REPIN") == "1":
        PINS.write_text(json.dumps(current, indent=1) + "\n", encoding="utf-8")
    pins = json.loads(PINS.read_text(encoding="utf-8"))
    assert sorted(pins) == sorted(current)
    for name, value in current.items():
        assert json.dumps(value) == json.dumps(pins[name]), name  # same keys, same order, same values


def test_samples_exercise_numpy_nan_and_nesting():
    # The pins are only worth something if the samples carry what the serialiser must convert.
    d = _sample(dielectric.DielectricResult)
    assert any(isinstance(getattr(d, f.name), np.floating) for f in dataclasses.fields(d))
    assert any(isinstance(v, float) and math.isnan(v) for v in dataclasses.astuple(d) if isinstance(v, float))
    assert d.peaks and dataclasses.is_dataclass(d.peaks[0])
    assert isinstance(_sample(pund.PundResult).t_s, np.ndarray)


def test_no_result_type_writes_its_own_to_dict():
    # One serialiser: a hand-written to_dict on a result would be a second home for the JSON shape.
    for cls in RESULT_TYPES:
        assert "to_dict" not in vars(cls), cls.__name__
        assert issubclass(cls, Result), cls.__name__


def test_generic_serialiser_converts_what_json_cannot_hold():
    @dataclasses.dataclass(frozen=True)
    class Sample(Result):
        JSON_OMIT = ("trace",)
        n: int
        x: float
        pair: tuple
        nested: verdict.Conflict
        trace: np.ndarray

    s = Sample(n=np.int64(3), x=np.float64("nan"), pair=(np.float32(0.5), np.bool_(True)),
               nested=verdict.Conflict("m", (np.int64(1), 2)), trace=np.arange(4.0))
    assert s.to_dict() == {"n": 3, "x": None, "pair": [0.5, True], "nested": {"message": "m", "measurement_ids": [1, 2], "suggestion": "", "blocking": True}}
    assert type(s.to_dict()["n"]) is int and type(s.to_dict()["pair"][1]) is bool
    assert json.loads(json.dumps(s.to_dict(), allow_nan=False)) == s.to_dict()
