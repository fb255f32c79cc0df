"""Import profiles in a real browser: write one from a sample file (no JSON), preview it, save it, edit it into
a second version with the preview of the edit, and upload an instrument's own export through it; the pages
fit at 1440 and 390 px without sideways scroll.

The export is the corpus file ``tests/data/exports/pe_loop_marker_cp1252.txt`` (an invented format: a text
header, a ``[Data]`` marker, semicolons, decimal commas, Windows-1252, CRLF).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from playwright.sync_api import Page, expect

pytestmark = pytest.mark.browser

EXPORT = Path(__file__).parent.parent / "data" / "exports" / "pe_loop_marker_cp1252.txt"
WIDTHS_PX = (1440, 390)
# (the file's column, canonical column, the file's unit) and (header key, condition, unit of a bare number)
COLUMNS = (("Point", "ignore", ""), ("Time", "t_s", "ms"), ("Drive Voltage", "V_V", "V"), ("Charge", "Q_uC", "nC"))
CONDITIONS = (("Area", "area", "mm^2"), ("Thickness", "thickness", ""), ("Frequency", "frequency", "Hz"),
              ("Temperature", "temperature", "K"))


def _sideways(page: Page) -> int:
    return page.evaluate("() => document.documentElement.scrollWidth - document.documentElement.clientWidth")


def _fits(page: Page) -> dict[int, int]:
    """Sideways scroll (CSS px) of the page as it is now, at each width; {} when it fits at every one."""
    wide = {}
    for width in WIDTHS_PX:
        page.set_viewport_size({"width": width, "height": 900})
        if (extra := _sideways(page)) > 0:
            wide[width] = extra
    page.set_viewport_size({"width": 1440, "height": 900})
    return wide


# A read goes through the analysis pool's child process (server/budget.py). The app warms the pool at start-up,
# but on a machine loaded by other suites a read (decode, parse, analyse, draw) can still take some seconds; the
# wait is long, and on the answer itself: a refused read (422) or a server error fails at once, with its text.
READ_TIMEOUT_MS = 90_000


def _read_file(page: Page, shows: str) -> None:
    """Press "Read the file", wait for the draft's answer, check it is a 200, and wait for ``shows`` (a locator
    of the part it fills) to be there."""
    with page.expect_response(lambda r: r.request.method == "POST" and r.url.endswith("/import-profiles/draft"),
                              timeout=READ_TIMEOUT_MS) as answer:
        page.get_by_role("button", name="Read the file / update the preview").click()
    assert answer.value.status == 200, f"the draft answered {answer.value.status}: {answer.value.text()[:500]}"
    expect(page.locator(shows).first).to_be_visible(timeout=READ_TIMEOUT_MS)


def test_a_profile_is_written_previewed_edited_and_used_for_an_upload(page: Page, live, login):
    name = live.unique("tracer-").lower()
    login("member")
    page.goto("/import-profiles")
    editor = page.locator("#profile-editor")
    editor.locator("input[name=name]").fill(name)
    editor.locator("select[name=kind]").select_option("pe_loop")
    editor.locator("input[type=file][name=file]").set_input_files(EXPORT)
    editor.locator("input[name=start_after]").fill(r"^\[Data\]")
    editor.locator("select[name=delimiter]").select_option(";")
    editor.locator("select[name=decimal]").select_option(",")
    editor.locator("select[name=encoding]").select_option("cp1252")
    _read_file(page, "#file-head")
    expect(page.locator("#file-head")).to_contain_text("[Data]")
    expect(page.locator("#preview")).to_have_count(0)  # nothing mapped yet
    for cell, to, unit in COLUMNS:
        page.get_by_label(f"read {cell} as").select_option(to)
        if unit:
            page.get_by_label(f"unit of {cell}").fill(unit)
    for key, to, unit in CONDITIONS:
        page.get_by_label(f"read {key} as").select_option(to)
        page.get_by_label(f"unit of {key}").fill(unit)
    _read_file(page, "#preview ul.conversions")
    preview = page.locator("#preview")
    expect(preview.locator("ul.conversions")).to_contain_text("Charge (nC) \u2192 Q (uC)")
    expect(preview.locator("#preview-blocks tbody tr")).to_have_count(1)
    expect(preview.locator("#preview-blocks tbody tr").first).to_contain_text("Pr")
    expect(preview.locator(".plot[data-figure] svg.main-svg").first).to_be_visible()
    assert _fits(page) == {}, "the editor with its preview scrolls sideways"

    page.get_by_role("button", name="Save profile").click()
    expect(page).to_have_url(re.compile(r"/import-profiles$"))
    page.locator("#profiles").get_by_role("link", name=name).click()
    expect(page).to_have_url(re.compile(rf"/import-profiles/{re.escape(name)}$"))
    expect(page.locator("#profile-versions tbody tr")).to_have_count(1)
    expect(page.get_by_label("read Charge as")).to_have_value("Q_uC")  # the stored mapping, no file needed
    assert _fits(page) == {}, "the edit page scrolls sideways"

    # The edit: a preview of a wrong unit first (the drive voltage in kV), then back to V, the operator line read
    # too, and saved as version 2.
    page.get_by_label("unit of Drive Voltage").fill("kV")
    page.locator("#profile-editor input[type=file][name=file]").set_input_files(EXPORT)
    _read_file(page, "#preview ul.conversions")
    expect(page.locator("#preview ul.conversions")).to_contain_text("Drive Voltage (kV) \u2192 V (V)")
    expect(page.get_by_label("read Charge as")).to_have_value("Q_uC")  # the mapping stayed on its column
    page.get_by_label("unit of Drive Voltage").fill("V")
    page.get_by_label("read Operator as").select_option("operator")
    page.get_by_role("button", name="Save as version 2").click()
    expect(page).to_have_url(re.compile(rf"/import-profiles/{re.escape(name)}$"))
    expect(page.locator("#profile-versions tbody td:first-child")).to_have_text(["2", "1"])
    expect(page.get_by_label("read Operator as")).to_have_value("operator")
    expect(page.get_by_label("unit of Drive Voltage")).to_have_value("V")

    # The upload: the instrument's export as it is, read through the profile's newest version.
    code = live.compound("CCCCCCCCCCCCCCCOc1ccccc1")  # C15: unique among the browser tests (one live registry)
    batch = live.batch(code, state="made")
    page.goto(f"/batches/{batch}/upload")
    page.get_by_label("Import profile").select_option(name)
    page.locator('input[type="file"][name="file"]').set_input_files(EXPORT)
    page.get_by_role("button", name="Preview (stores nothing)").click()
    expect(page.locator("#upload-preview")).to_contain_text(f"Read through profile {name} (version 2)",
                                                            timeout=READ_TIMEOUT_MS)
    assert live.measurement_ids(batch) == []
    assert _fits(page) == {}, "the upload page with the profiled preview scrolls sideways"
    page.get_by_role("button", name="Upload and analyse").click()
    expect(page).to_have_url(re.compile(r"/measurements/\d+$"), timeout=READ_TIMEOUT_MS)
    assert len(live.measurement_ids(batch)) == 1
