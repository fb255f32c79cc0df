"""Uploading a P-E loop in a real browser: progress bar, plotly figure with Pr/Ec markers, results, errors.

The loop is the Miller et al. tanh model (S. L. Miller et al., J. Appl. Phys. 68, 6463 (1990),
doi:10.1063/1.346845) built with Ps = 10 uC/cm^2, Pr = 8 uC/cm^2, Ec = 50 kV/cm: by construction
its branches cross E = 0 at +/-Pr and P = 0 at +/-Ec, so the page must report Pr close to 8.
"""

from __future__ import annotations

import json
import re

import pytest
from playwright.sync_api import Page, expect

from server.ingest.table import to_csv_bytes
from server.synth.ferro import miller_loop

pytestmark = pytest.mark.browser

PR_UC_CM2 = 8.0
EC_KV_CM = 50.0

# Report the state of the progress bar at each upload-progress event to the test, through the console
# (the test listens for lines starting with PROGRESS_TAG). The probe listens on window, which an event
# bubbling from the form reaches after document, so the page's own handler (static/js/remanence.js, on
# document) has updated the bar when the probe reads it, in the same task, and the record does not depend
# on the page that follows (an earlier probe kept it in sessionStorage and read it back behind a timer).
PROGRESS_TAG = "upload-progress "
PROGRESS_PROBE = """
window.addEventListener("htmx:xhr:progress", function (evt) {
  var bar = document.getElementById("upload-progress");
  if (!bar) { return; }
  console.log("upload-progress " + JSON.stringify({hidden: bar.hidden, value: bar.value}));
});
"""


def _loop_file(tmp_path):
    frame = miller_loop(10, PR_UC_CM2, EC_KV_CM, 300)
    path = tmp_path / "loop_300K.csv"
    path.write_bytes(to_csv_bytes(frame, {"temperature": "300 K"}))
    return path


def _open_upload(page: Page, live, login, smiles: str) -> str:
    code = live.compound(smiles)
    batch = live.batch(code, state="made")
    login("member")
    page.goto(f"/compounds/{code}")
    page.locator("#batches").get_by_role("link", name="Upload").click()
    expect(page).to_have_url(re.compile(rf"/batches/{batch}/upload$"))
    # The URL changes when the navigation commits, before the page's scripts have run. A click before
    # htmx has taken over the form sends it the plain way (the page works without JavaScript), with no
    # progress events: under load that happened to one upload in three. A person cannot click that
    # fast; the test waits for the load event, by which the deferred scripts have run.
    page.wait_for_load_state("load")
    return batch


def _upload_through_form(page: Page, tmp_path) -> None:
    page.get_by_label("Kind").select_option("pe_loop")
    page.locator('input[type="file"][name="file"]').set_input_files(_loop_file(tmp_path))
    page.get_by_role("textbox", name="Temperature").fill("300 K")
    with page.expect_response(lambda r: r.request.method == "POST" and "/upload" in r.url):
        page.get_by_role("button", name="Upload and analyse").click()


def test_upload_shows_progress_and_stores_the_measurement(page: Page, live, login, tmp_path):
    seen = []
    page.on("console", lambda msg: seen.append(json.loads(msg.text[len(PROGRESS_TAG):]))
            if msg.text.startswith(PROGRESS_TAG) else None)
    page.add_init_script(PROGRESS_PROBE)
    batch = _open_upload(page, live, login, "CCCCCCCCCOc1ccccc1")

    bar = page.locator("progress#upload-progress")
    expect(bar).to_be_attached()
    expect(bar).to_be_hidden()  # shown only while a file travels
    _upload_through_form(page, tmp_path)

    expect(page).to_have_url(re.compile(r"/measurements/\d+$"))
    for _ in range(50):  # console events reach the test asynchronously; give them up to 5 s
        if seen:
            break
        page.wait_for_timeout(100)
    assert seen and seen[0] == {"hidden": False, "value": 100}, f"progress bar once the file was sent: {seen}"
    assert len(live.measurement_ids(batch)) == 1


def test_upload_lands_on_the_measurement_page(page: Page, live, login, tmp_path):
    batch = _open_upload(page, live, login, "CCCCCCCCCCCOc1ccccc1")
    _upload_through_form(page, tmp_path)
    expect(page).to_have_url(re.compile(r"/measurements/\d+$"))
    expect(page.locator("h1")).to_have_count(1)
    expect(page.locator("h1 .sub")).to_contain_text(batch)
    expect(page.locator(".plot[data-figure] .plotly svg.main-svg").first).to_be_visible()


def test_measurement_page_draws_the_loop_with_pr_and_ec_markers(page: Page, live, login, tmp_path):
    code = live.compound("CCCCCCCCCCCCOc1ccccc1")
    batch = live.batch(code, state="made")
    mid = live.measurement(batch, "pe_loop", _loop_file(tmp_path).read_bytes(), "loop_300K.csv", temperature="300 K")
    login("member")
    page.goto(f"/compounds/{code}")
    page.locator("#measurements").get_by_role("link", name=str(mid), exact=True).click()
    expect(page).to_have_url(re.compile(rf"/measurements/{mid}$"))
    expect(page.locator("h1 .sub")).to_contain_text(batch)

    # plotly drew the figure: the .plot div gains the .plotly wrapper and its main SVG.
    plot = page.locator(".plot[data-figure]")
    expect(plot.locator(".plotly svg.main-svg").first).to_be_visible()
    figure = json.loads(page.locator('script[type="application/json"]').text_content())
    names = [trace.get("name", "") for trace in figure["data"]]
    assert "±Pr" in names and "±Ec" in names, names
    assert figure["layout"]["xaxis"]["title"]["text"] == "E (kV/cm)"
    # The same traces reached plotly in the page (the div's `data` is what plotly drew).
    drawn = plot.evaluate("el => el.data.map(t => ({name: t.name, x: Array.from(t.x), y: Array.from(t.y)}))")
    markers = {t["name"]: t for t in drawn}
    assert {"±Pr", "±Ec"} <= set(markers)
    pr_pos, pr_neg = markers["±Pr"]["y"]
    ec_pos, ec_neg = markers["±Ec"]["x"]
    # Miller model, Pr = 8 uC/cm^2 and Ec = 50 kV/cm by construction; 2 % allows for the sampling
    # of the record (500 points per cycle, crossings between samples) - common practice tolerance.
    assert pr_pos == pytest.approx(PR_UC_CM2, rel=0.02) and pr_neg == pytest.approx(-PR_UC_CM2, rel=0.02)
    assert ec_pos == pytest.approx(EC_KV_CM, rel=0.02) and ec_neg == pytest.approx(-EC_KV_CM, rel=0.02)

    # Hovering the +Pr marker shows its value with the unit (pixel position from plotly's own axes).
    x_px, y_px = plot.evaluate(
        "(el, y) => { const L = el._fullLayout; const r = el.getBoundingClientRect();"
        " return [r.left + L._size.l + L.xaxis.l2p(0), r.top + L._size.t + L.yaxis.l2p(y)]; }",
        pr_pos,
    )
    page.mouse.move(x_px, y_px)
    expect(plot.locator(".hoverlayer .hovertext").first).to_contain_text("+Pr =")

    pr_row = page.locator("table.results tr").filter(has=page.locator("th", has_text=re.compile(r"^Pr$")))
    expect(pr_row).to_have_count(1)
    pr_value = float(pr_row.locator("td").first.text_content())
    assert pr_value == pytest.approx(PR_UC_CM2, rel=0.02)
    expect(pr_row.locator("td").nth(1)).to_contain_text("µC\u202fcm⁻²")  # units as the trade prints them (server/precision.py)


def test_bad_file_shows_inline_error_and_stays(page: Page, live, login, tmp_path, browser_log):
    batch = _open_upload(page, live, login, "CCCCCCCCCCOc1ccccc1")
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"E (kV/cm),P (uC/cm^2)\n1,x\n")
    browser_log.expect_status(422)
    page.locator('input[type="file"][name="file"]').set_input_files(bad)
    page.get_by_role("button", name="Upload and analyse").click()

    alert = page.locator("#upload [role=alert]")
    expect(alert).to_contain_text("line 2")
    expect(page).to_have_url(re.compile(rf"/batches/{batch}/upload$"))
    # Only the form was swapped: the page around it (caution, kinds table) is still there, once.
    expect(page.locator("aside.caution")).to_have_count(1)
    expect(page.locator("#upload form")).to_have_count(1)
    expect(page.locator("h1")).to_have_count(1)
