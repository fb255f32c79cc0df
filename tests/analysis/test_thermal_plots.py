"""Structure of the dielectric and DSC figures: axis titles with units, traces carry the data."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from server.analysis.dielectric import analyse_dielectric
from server.analysis.dsc import analyse_dsc
from server.plots import SERIES
from server.plots.dielectric import frequency_label, permittivity_figure
from server.plots.dsc import dsc_figure
from server.precision import value_text
from server.synth.dielectric import curie_weiss_scan
from server.synth.dsc import dsc_trace


def _dielectric_result(as_capacitance=True):
    frame = curie_weiss_scan(
        3.3e3, 300.0, 300.0, 6.0, t_min_K=250.0, t_max_K=380.0, step_K=1.0,
        frequencies_Hz=[1e3, 1e4, 1e5], noise_rel=1e-3, as_capacitance=as_capacitance,
    )
    if as_capacitance:
        canon = pd.DataFrame({"T_K": frame["T (K)"], "f_Hz": frame["f (Hz)"], "C_F": frame["C (pF)"] * 1e-12,
                              "tan_delta": frame["D ()"]})
        return analyse_dielectric(canon, area_cm2=frame.attrs["area_cm2"], thickness_um=frame.attrs["thickness_um"])
    canon = pd.DataFrame({"T_K": frame["T (K)"], "f_Hz": frame["f (Hz)"], "eps_r": frame["eps_r ()"]})
    return analyse_dielectric(canon)


@pytest.mark.parametrize(("f", "label"), [(1e3, "1 kHz"), (100.0, "100 Hz"), (1.5e6, "1.5 MHz"), (None, "f not given")])
def test_frequency_label(f, label):
    assert frequency_label(f) == label


def test_permittivity_figure_with_loss_panel():
    res = _dielectric_result()
    fig = permittivity_figure(res, title="RMX-0003 pellet")
    assert fig.layout.title.text == "RMX-0003 pellet"
    assert fig.layout.xaxis3.title.text == "T (K)"
    assert "(relative permittivity, 1)" in fig.layout.yaxis.title.text
    # the loss panel is tan delta = eps''/eps' on a log axis (issue 16)
    assert fig.layout.yaxis2.title.text.startswith("tan δ") and fig.layout.yaxis2.type == "log"
    tan = next(t for t in fig.data if t.name == "tan δ 1 kHz")
    c0 = res.curves["frequencies"][0]
    np.testing.assert_allclose(tan.y, np.asarray(c0["eps_i"]) / np.asarray(c0["eps_r"]), rtol=1e-12)
    assert fig.layout.yaxis3.title.text == "1/ε' (1)"
    names = [t.name for t in fig.data]
    assert {"1 kHz", "10 kHz", "100 kHz"} <= set(names)
    first = next(t for t in fig.data if t.name == "1 kHz")
    assert first.line.color == SERIES[0]
    np.testing.assert_allclose(first.y, res.curves["frequencies"][0]["eps_r"])
    # Peak markers sit at the reported peaks.
    peak = next(t for t in fig.data if t.name == "peak 1 kHz")
    assert peak.x[0] == pytest.approx(res.peaks[0].t_peak_K)
    # The Curie-Weiss line on the 1/eps panel matches the fitted law.
    cw = next(t for t in fig.data if t.name and t.name.startswith("Curie-Weiss: C"))
    assert cw.yaxis == "y3"
    x = np.asarray(cw.x)
    np.testing.assert_allclose(cw.y, 1.0 / (res.eps_inf + res.curie_constant_K / (x - res.t0_K)), rtol=1e-9)
    assert any(t.name and t.name.startswith("Landau slopes") for t in fig.data)
    fig.to_json()


def test_permittivity_figure_two_panels_without_loss():
    res = _dielectric_result(as_capacitance=False)
    fig = permittivity_figure(res)
    assert fig.layout.xaxis2.title.text == "T (K)"
    assert fig.layout.yaxis2.title.text == "1/ε' (1)"
    assert "yaxis3" not in fig.layout.to_plotly_json()


def _dsc_result():
    frame = dsc_trace(
        [{"t_K": 429.7485, "dh_J_g": 28.6624, "width_K": 1.2, "kind": "melting"},
         {"t_K": 360.0, "dh_J_g": 4.0, "width_K": 4.0, "kind": "gaussian"}],
        t_start_K=330.0, t_end_K=450.0, mass_mg=5.0, noise_mW=0.003, baseline_slope=0.003,
        rng=np.random.default_rng(4), endo="down",
    )
    canon = pd.DataFrame({"T_K": frame["T (K)"], "t_s": frame["t (s)"], "heat_flow_mW": frame["heat flow (mW)"]})
    return canon, analyse_dsc(canon, mass_mg=5.0, endo="down", molar_mass_g_mol=114.818)


def test_dsc_figure_axes_areas_and_hover():
    canon, res = _dsc_result()
    fig = dsc_figure(res, title="RMX-0004 DSC")
    assert fig.layout.xaxis.title.text == "T (K)"
    assert fig.layout.yaxis.title.text == "heat flow (W/g), endo up"
    fills = [t for t in fig.data if t.fill == "toself"]
    assert len(fills) == len(res.peaks) == 2
    for t, p in zip(fills, res.peaks, strict=True):
        # the label gives ΔH with its uncertainty, digits following it (JCGM 100:2008 7.2.6)
        assert p.dh_err_J_g is not None and p.dh_err_J_g > 0
        assert f"ΔH = {value_text(p.dh_J_g, p.dh_err_J_g, 3)} J/g" in t.text
        assert "±" in t.text
    # Plotted endo up although the file was endo down: the melting peak points up.
    trace = fig.data[0]
    assert max(trace.y) > abs(min(trace.y))
    onsets = [t for t in fig.data if t.name == "onset"]
    assert len(onsets) == 2
    assert onsets[-1].x[0] == pytest.approx(res.peaks[-1].onset_K)
    fig.to_json()


def test_dsc_figure_reanalyses_from_frame_when_curves_missing():
    import dataclasses

    canon, res = _dsc_result()
    bare = dataclasses.replace(res, curves=None)
    with pytest.raises(ValueError):
        dsc_figure(bare)
    fig = dsc_figure(bare, canon)
    assert len([t for t in fig.data if t.fill == "toself"]) == 2


@pytest.mark.parametrize("with_loss", [True, False])
def test_permittivity_panels_leave_room_for_their_axis_titles(with_loss):
    """Issue 22 item 11: the stacked y titles overlapped. Each rotated title's estimated length
    (0.6 em per character, a common approximation for sans-serif text) fits its panel's height in
    pixels, and the y axes push the margin out for their tick labels and keep a standoff."""
    from server.plots import title_length_px

    fig = permittivity_figure(_dielectric_result(as_capacitance=with_loss), title="RVZ-0003 pellet")
    lay = fig.layout
    area_px = lay.height - lay.margin.t - lay.margin.b
    rows = 3 if with_loss else 2
    axes = ["yaxis"] + [f"yaxis{k}" for k in range(2, rows + 1)]
    for name in axes:
        ax = lay[name]
        panel_px = (ax.domain[1] - ax.domain[0]) * area_px
        assert title_length_px(ax.title.text) < panel_px, (name, ax.title.text, panel_px)
        assert ax.automargin is True and ax.title.standoff >= 8
    # panels do not touch: a gap between each domain and the next
    domains = sorted((lay[a].domain for a in axes), key=lambda d: d[0])
    assert all(upper[0] - lower[1] > 0.03 for lower, upper in zip(domains, domains[1:]))
    # only the bottom panel carries the x title, so no x title sits between panels
    x_axes = ["xaxis"] + [f"xaxis{k}" for k in range(2, rows + 1)]
    assert [a for a in x_axes if lay[a].title.text] == [f"xaxis{rows}"]


def test_a_small_transition_beside_a_large_melting_peak_gets_a_zoomed_panel():
    # Issue 16: a solid-solid transition of 3 J/g (3 % of the 100 J/g melting peak, below the 10 % of
    # plots.dsc.SMALL_PEAK_FRACTION, common practice) is drawn again in a panel zoomed on it. Peaks from
    # server/synth/dsc.py (unit-area shapes, Hoehne, Hemminger and Flammersheim 2003, ch. 5).
    from server.plots.dsc import SMALL_PEAK_FRACTION, small_peaks

    frame = dsc_trace(
        [{"t_K": 420.0, "dh_J_g": 100.0, "width_K": 1.5, "kind": "melting"},
         {"t_K": 350.0, "dh_J_g": 3.0, "width_K": 4.0, "kind": "gaussian"}],
        t_start_K=320.0, t_end_K=440.0, mass_mg=5.0, noise_mW=0.002, baseline_slope=0.002,
        rng=np.random.default_rng(9),
    )
    canon = pd.DataFrame({"T_K": frame["T (K)"], "t_s": frame["t (s)"], "heat_flow_mW": frame["heat flow (mW)"]})
    res = analyse_dsc(canon, mass_mg=5.0, endo="up")
    assert len(res.peaks) == 2 and SMALL_PEAK_FRACTION == 0.10
    fig = dsc_figure(res)
    assert fig.layout.yaxis2.title.text == "heat flow (W/g), zoom" and fig.layout.xaxis2.title.text == "T (K)"
    lo, hi = fig.layout.xaxis2.range
    assert lo < 350.0 < hi and hi < 419.0  # the small peak inside, the melting peak outside
    zoomed = [t for t in fig.data if t.yaxis == "y2"]
    small = small_peaks(res.curves["peaks"])
    assert [round(p["peak_K"]) for p in small] == [350]
    fill = next(t for t in zoomed if t.fill == "toself")
    assert "3" in fill.text.split(" J/g")[0]
    ylo, yhi = fig.layout.yaxis2.range
    peak = max(max(t.y) for t in fig.data if t.yaxis in (None, "y") and t.mode == "lines" and t.fill is None)
    assert yhi - ylo < 0.3 * peak  # the zoom is at least three times the full scale
    # peaks of comparable size (the 28.7 and 4.0 J/g of _dsc_result, 14 %) keep one panel
    _, res2 = _dsc_result()
    assert "yaxis2" not in dsc_figure(res2).to_plotly_json()["layout"]


def test_the_zoomed_dsc_figure_redraws_as_vector():
    from server.plots.vector import render

    frame = dsc_trace([{"t_K": 420.0, "dh_J_g": 100.0, "width_K": 1.5}, {"t_K": 350.0, "dh_J_g": 3.0, "width_K": 4.0,
                                                                           "kind": "gaussian"}],
                      t_start_K=320.0, t_end_K=440.0, mass_mg=5.0, noise_mW=0.002, rng=np.random.default_rng(9))
    canon = pd.DataFrame({"T_K": frame["T (K)"], "t_s": frame["t (s)"], "heat_flow_mW": frame["heat flow (mW)"]})
    svg = render(dsc_figure(analyse_dsc(canon, mass_mg=5.0, endo="up")), "svg").decode()
    assert svg.startswith("<?xml") and "zoom" in svg
