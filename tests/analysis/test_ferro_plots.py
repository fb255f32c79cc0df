"""Loop and PUND figures: axis titles with units, markers where the analysis put Pr and Ec."""

from __future__ import annotations

import numpy as np
import pytest

from server.analysis.hysteresis import analyse_loop
from server.analysis.pund import analyse_pund
from server.plots.ferro import loop_figure, pund_figure
from server.synth.ferro import miller_loop, pund_train


def test_loop_figure_marks_pr_and_ec():
    frame = miller_loop(10, 8, 50, 300).rename(columns={"E (kV/cm)": "E_kV_cm", "P (uC/cm^2)": "P_uC_cm2"})
    r = analyse_loop(frame)
    fig = loop_figure(r, title="RMX-0001 batch 3")
    assert fig.layout.xaxis.title.text == "E (kV/cm)"
    assert fig.layout.yaxis.title.text == "P (uC/cm²)"
    by_name = {t.name: t for t in fig.data}
    pr = by_name["±Pr"]
    assert list(pr.x) == [0.0, 0.0]
    assert list(pr.y) == pytest.approx([8.0, -8.0], rel=2e-3)  # Miller et al. 1990 model Pr (docs/methods.md)
    assert all("uC/cm²" in s for s in pr.text)
    ec = by_name["±Ec"]
    assert list(ec.x) == pytest.approx([50.0, -50.0], rel=2e-3)
    assert list(ec.y) == [0.0, 0.0]
    assert all("kV/cm" in s for s in ec.text)
    loop = fig.data[0]
    assert np.asarray(loop.x).size == r.points
    assert "switching" in loop.name


def test_pund_figure_labels_the_five_pulses():
    raw = pund_train(8, 10, 50, 200, area_cm2=0.01, thickness_um=1.5)
    frame = raw.rename(columns={"t (s)": "t_s", "V (V)": "V_V", "Q (uC)": "Q_uC"})
    r = analyse_pund(frame, area_cm2=0.01)
    fig = pund_figure(frame, r)
    assert fig.layout.xaxis.title.text == "t (s)"
    assert fig.layout.yaxis.title.text == "Q (uC)"  # charge shown as recorded
    labels = [a.text for a in fig.layout.annotations]
    assert labels == ["pre", "P", "U", "N", "D"]
    assert len(fig.layout.shapes) == 5
    starts = [s.x0 for s in fig.layout.shapes]
    assert starts == sorted(starts)
    ep = pund_train(8, 10, 50, 200).rename(columns={"t (s)": "t_s", "E (kV/cm)": "E_kV_cm", "P (uC/cm^2)": "P_uC_cm2"})
    fig2 = pund_figure(ep, analyse_pund(ep))
    assert fig2.layout.yaxis.title.text == "P (uC/cm²)"
