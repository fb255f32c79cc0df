"""SHG: activity against the detection limit, and the temperature where a Landau-like signal vanishes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from server.analysis import shg
from server.errors import AnalysisError
from server.synth.shg import shg_run


def _frame(df):
    return df.rename(columns={"T (K)": "T_K", "SHG/ref ()": "shg_ratio"})


def test_signal_vanishes_at_tc_on_heating_and_cooling():
    # I(2w) ~ Ps^2 ~ (Tc - T)^(2 beta) (Landau, beta = 1/2: linear in Tc - T; Lines and Glass 1977, ch. 1)
    t = np.arange(300.0, 471.0, 10.0)
    heat = shg.analyse_shg(_frame(shg_run(t, tc_K=425.0, ratio_at_first=0.8, rng=np.random.default_rng(1))),
                           reference="quartz", detection_limit=0.01)
    assert heat.verdict == "vanishes" and heat.scan == "heating"
    assert heat.t_vanish_K == pytest.approx(425.0, abs=5.0) and heat.t_vanish_resolution_K == 5.0
    cool = shg.analyse_shg(_frame(shg_run(t[::-1], tc_K=425.0, ratio_at_first=0.8, rng=np.random.default_rng(2))),
                           reference="quartz", detection_limit=0.01)
    assert cool.scan == "cooling" and cool.t_vanish_K == pytest.approx(425.0, abs=5.0)
    assert heat.flags == () and "not polarity" in heat.meaning


def test_single_points_active_and_silent_and_the_default_limit():
    one = shg.analyse_shg(pd.DataFrame({"shg_ratio": [0.3]}), reference="KDP", temperature_K=295.0)
    assert one.verdict == "active" and one.temperature_K == 295.0
    assert [f.code for f in one.flags] == ["default_detection_limit"]
    quiet = shg.analyse_shg(pd.DataFrame({"shg_ratio": [0.004]}), reference="KDP", temperature_K=295.0,
                            detection_limit=0.005)
    assert quiet.verdict == "silent" and quiet.active is False


def test_refusals_name_the_field():
    with pytest.raises(AnalysisError) as e:
        shg.analyse_shg(pd.DataFrame({"shg_ratio": [0.3]}), reference="", temperature_K=295.0)
    assert e.value.field == "reference"
    with pytest.raises(AnalysisError) as e:
        shg.analyse_shg(pd.DataFrame({"shg_ratio": [0.3]}), reference="quartz")
    assert e.value.field == "temperature"
    with pytest.raises(AnalysisError):
        shg.analyse_shg(pd.DataFrame({"T_K": [300.0], "shg_ratio": [-0.1]}), reference="quartz")
