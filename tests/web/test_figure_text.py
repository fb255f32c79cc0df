"""Every page figure has a caption naming what is plotted with units, and its data as tables.

The tables are read back from the JSON the page embeds (plotly packs numpy arrays as base64);
the arrays the figure was built from are the reference."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from server.kinds import KINDS
from server.kinds.base import EXAMPLE_SMILES
from server.plots import base_layout, figure_json
from server.plots.alt import MAX_ROWS, figure_alt
from tests.factories import login_as, soup


def test_packed_arrays_read_back_as_plotly_reads_them():
    rng = np.random.default_rng(7)
    e_kV_cm = np.linspace(-40, 40, 1001)
    p_uC_cm2 = 6 * np.tanh(e_kV_cm / 12) + rng.normal(0, 0.1, e_kV_cm.size)  # a noisy tanh loop branch
    fig = base_layout(go.Figure(go.Scatter(x=e_kV_cm, y=p_uC_cm2, name="branch")),
                      x_title="E (kV/cm)", y_title="P (µC/cm²)")
    text = figure_json(fig)
    assert '"bdata"' in text  # plotly packs numpy arrays: the case that needs decoding
    alt = figure_alt(text)
    assert alt["axes"] == "P (µC/cm²) against E (kV/cm)"
    (trace,) = alt["traces"]
    assert trace["total"] == 1001 and trace["step"] == 6 and len(trace["rows"]) == len(range(0, 1001, 6)) <= MAX_ROWS
    for row, j in zip(trace["rows"], range(0, 1001, 6)):
        assert float(row[0]) == float(f"{e_kV_cm[j]:.4g}")
        assert float(row[1]) == float(f"{p_uC_cm2[j]:.4g}")


def test_subplots_name_each_axis_pair():
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True)
    fig.add_trace(go.Scatter(x=[300, 310], y=[6.0, 5.1], name="Pr"), row=1, col=1)
    fig.add_trace(go.Scatter(x=[300, 310], y=[50.0, 44.0], name="Ec"), row=2, col=1)
    fig.update_yaxes(title_text="Pr (µC/cm²)", row=1, col=1)
    fig.update_yaxes(title_text="Ec (kV/cm)", row=2, col=1)
    fig.update_xaxes(title_text="T (K)", row=2, col=1)
    alt = figure_alt(figure_json(fig))
    assert [t["y_title"] for t in alt["traces"]] == ["Pr (µC/cm²)", "Ec (kV/cm)"]
    assert alt["traces"][1]["rows"] == [["300", "50", ""], ["310", "44", ""]]


def test_measurement_page_figure_has_caption_table_and_no_img_role(client, session):
    csrf = login_as(client, session)
    client.post("/compounds/new", data={"smiles": EXAMPLE_SMILES, "csrf_token": csrf})
    client.post("/compounds/RVZ-00001/batches/new", data={"state": "made", "csrf_token": csrf})
    ex = KINDS["pe_loop"].example()
    r = client.post("/batches/RVZ-00001-B01/upload", data={"kind": "pe_loop", "csrf_token": csrf},
                    files={"file": (ex.filename, ex.raw)}, follow_redirects=False)
    page = soup(client.get(r.headers["location"]).text)
    figure = page.select_one("figure.figure")
    caption = figure.figcaption.text
    assert "RVZ-00001" in caption and "E (kV/cm)" in caption and "P (uC/cm²)" in caption, caption  # ferro P_TITLE
    plot = figure.select_one("[data-figure]")
    assert plot.get("role") != "img" and plot["aria-label"].startswith("interactive plot")
    details = figure.select_one("details.figure-data")
    assert details is not None and not details.has_attr("open")  # collapsed by default
    table = details.select_one("table")
    headers = [th.text for th in table.select("thead th")]
    assert headers == ["E (kV/cm)", "P (uC/cm²)"]
    assert 0 < len(table.select("tbody tr")) <= MAX_ROWS
    region = details.select_one("div.scroll")
    assert region["tabindex"] == "0" and region["role"] == "region"  # a keyboard can scroll it
