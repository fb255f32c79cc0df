"""The registry in a real browser: log in, register with the live preview, batches, scaffolds.

Expected formulas are counted by hand from the structures (atom bookkeeping written beside each
check), not taken from the code under test; side-chain summaries follow the wording of
``server.chem.sidechains.describe_side_chains`` ("<count> x C<n> <kind> (<shape>)").
"""

from __future__ import annotations

import re

import pytest
from playwright.sync_api import Page, expect

from server.chem.scaffold import PARENT_BOWLS
from tests.factories import PASSWORD

pytestmark = pytest.mark.browser

CODE_URL = re.compile(r"/compounds/(RVZ-\d{5})$")


def _type_smiles(page: Page, smiles: str) -> None:
    # Key by key, as a chemist types; the preview is debounced (htmx "delay:300ms") so it
    # should settle on the whole string, not on a prefix.
    box = page.locator('#new-compound textarea[name="smiles"]')
    box.click()
    box.press_sequentially(smiles, delay=15)


def _code_of(page: Page) -> str:
    m = CODE_URL.search(page.url)
    assert m, f"not on a compound page: {page.url}"
    return m.group(1)


def test_login_then_register_typed_smiles_with_live_preview(page: Page, live):
    name = live.user("member")
    page.goto("/compounds/new")
    # Not logged in: the page sends us to the login form and back afterwards.
    expect(page).to_have_url(re.compile(r"/login\?next=/compounds/new$"))
    page.get_by_label("User name").fill(name)
    page.get_by_label("Password").fill(PASSWORD)
    page.get_by_role("button", name="Log in").click()
    expect(page).to_have_url(re.compile(r"/compounds/new$"))
    expect(page.locator(".who .badge")).to_contain_text(name)

    preview = page.locator("#preview")
    expect(preview.locator("svg")).to_have_count(0)
    # 1,4-dibutoxybenzene: C6H4 ring + 2 x O-C4H9 -> C14H22O2 (hand count).
    _type_smiles(page, "CCCCOc1ccc(OCCCC)cc1")
    expect(preview.locator(".drawing svg")).to_be_visible()
    expect(page.locator('[data-field="formula"]')).to_have_text("C14H22O2")
    expect(page.locator('[data-field="side_chains"]')).to_have_text("2 x C4 alkoxy (linear)")
    # C 14 x 12.011 + H 22 x 1.008 + O 2 x 15.999 = 222.33 g/mol (IUPAC 2021 standard atomic weights)
    expect(page.locator('[data-field="mw"]')).to_have_text("222.33 g/mol")

    page.get_by_label("Label").fill("dibutoxy test ring")
    page.get_by_role("button", name="Register").click()
    expect(page).to_have_url(CODE_URL)
    code = _code_of(page)
    expect(page.locator("h1")).to_contain_text(code)
    expect(page.locator("h1 .sub")).to_have_text("dibutoxy test ring")
    drawing = page.locator(f'img[alt="structure of {code}"]')
    expect(drawing).to_be_visible()
    # The structure image really loaded (a broken image has naturalWidth 0).
    page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=drawing.element_handle())
    chains = page.locator("section", has=page.get_by_role("heading", name="Side chains")).locator("table tbody tr")
    expect(chains).to_have_count(1)
    expect(chains.first.locator("td")).to_have_text(["alkoxy", "4", "linear", "2"])


def test_invalid_smiles_shows_inline_error(page: Page, login, browser_log):
    login("member")
    page.goto("/compounds/new")
    _type_smiles(page, "c1ccccc")  # ring 1 opened, never closed
    alert = page.locator("#preview [role=alert]")
    expect(alert).to_contain_text("unclosed ring")
    expect(page.locator("#preview svg")).to_have_count(0)

    # Finishing the ring clears the error: benzene, C6H6.
    page.locator('textarea[name="smiles"]').press("End")
    page.locator('textarea[name="smiles"]').press_sequentially("1", delay=15)
    expect(page.locator('[data-field="formula"]')).to_have_text("C6H6")
    expect(alert).to_have_count(0)

    # Submitting a broken SMILES re-renders the form with the message and keeps what was typed.
    browser_log.expect_status(422)
    page.locator('textarea[name="smiles"]').fill("CC(C")
    page.get_by_role("button", name="Register").click()
    expect(page.locator("main > p.error[role=alert]")).to_contain_text("parenthes")
    expect(page).to_have_url(re.compile(r"/compounds/new$"))
    expect(page.locator('textarea[name="smiles"]')).to_have_value("CC(C")


def test_add_batch_through_the_form(page: Page, live, login, browser_log):
    code = live.compound("CCCCCCCOc1ccccc1", label="heptyloxy test ring")
    login("member")
    page.goto(f"/compounds/{code}")
    expect(page.locator("p.empty", has_text="No batches yet")).to_be_visible()
    page.get_by_role("link", name="Add a batch", exact=True).click()  # the batches section's button; the next-steps link is named "Add a batch of <code>"
    expect(page).to_have_url(re.compile(rf"/compounds/{code}/batches/new$"))
    expect(page.locator("aside.caution")).to_be_visible()

    # An out-of-range yield is refused inline, and nothing is stored.
    browser_log.expect_status(422)
    page.get_by_label("Yield (%)").fill("140")
    page.get_by_role("button", name="Add batch").click()
    expect(page.locator("p.error[role=alert]")).to_contain_text("100")

    page.get_by_label("Made on").fill("2026-03-14")
    page.get_by_label("Chemist").fill("T. Okonkwo-Lind")
    page.get_by_label("State").select_option("impure")
    page.get_by_label("Scale (mg)").fill("120")
    page.get_by_label("Yield (%)").fill("55")
    page.get_by_label("Purity (%)").fill("98.5")
    page.get_by_label("Notes").fill("recrystallised once from hexane")
    page.get_by_role("button", name="Add batch").click()

    expect(page).to_have_url(re.compile(rf"/compounds/{code}$"))
    rows = page.locator("#batches tbody tr")
    expect(rows).to_have_count(1)
    cells = rows.first.locator("td")
    expect(cells.nth(0)).to_have_text(f"{code}-B01")
    expect(cells.nth(1)).to_have_text("2026-03-14")
    expect(cells.nth(2)).to_have_text("T. Okonkwo-Lind")
    expect(cells.nth(3)).to_have_text("120.0")
    expect(cells.nth(4)).to_have_text("55.0")
    expect(cells.nth(5)).to_have_text("98.5")
    expect(cells.nth(6)).to_have_text("impure")
    expect(cells.nth(10)).to_have_text("recrystallised once from hexane")
    expect(rows.first.get_by_role("link", name="Upload")).to_have_attribute("href", f"/batches/{code}-B01/upload")


def test_build_from_scaffold_preview_follows_the_choices(page: Page, login):
    login("member")
    # The scaffold through its own form: the S-bridged parent bowl with six rim positions.
    page.goto("/scaffolds")
    page.get_by_label("Code").fill("BWL-S")
    page.get_by_label("Name").fill("S-bridged bowl")
    page.get_by_label("Core SMILES with attachment points").fill(PARENT_BOWLS["S"])
    page.get_by_role("button", name="Add scaffold").click()
    expect(page).to_have_url(re.compile(r"/scaffolds$"))
    row = page.locator("table.plain tbody tr", has_text="BWL-S")
    expect(row.locator("td").nth(3)).to_have_text("6")

    page.goto("/compounds/new")
    page.get_by_label("Scaffold").select_option("BWL-S")
    page.get_by_label("Side chain").select_option("alkoxy")
    page.get_by_label("Carbons").fill("3")
    formula = page.locator('[data-field="formula"]')
    chains = page.locator('[data-field="side_chains"]')
    # Parent C18H6S3 with each of its 6 H replaced by O-C3H7: C18+18 H42 O6 S3.
    expect(formula).to_have_text("C36H42O6S3")
    expect(chains).to_have_text("6 x C3 alkoxy (linear)")
    expect(page.locator("#preview .drawing svg")).to_be_visible()
    expect(page.locator("#preview dt", has_text="Built SMILES")).to_be_visible()

    page.get_by_label("Carbons").fill("5")
    # 6 x O-C5H11: C18+30 H66 O6 S3.
    expect(formula).to_have_text("C48H66O6S3")
    expect(chains).to_have_text("6 x C5 alkoxy (linear)")

    page.get_by_label("Side chain").select_option("alkylthio")
    # 6 x S-C5H11: C48 H66 S(3+6).
    expect(formula).to_have_text("C48H66S9")
    expect(chains).to_have_text("6 x C5 alkylthio (linear)")

    # A named branched chain fixes its own carbon count: 5 and 2-ethylhexyl disagree, inline.
    page.get_by_label("Branched form").select_option("2-ethylhexyl")
    expect(page.locator("#preview [role=alert]")).to_contain_text("2-ethylhexyl has 8 carbons, not 5")
    page.get_by_label("Carbons").fill("")
    # 2-ethylhexyl is C8H17: 6 x S-C8H17 -> C(18+48) H102 S9.
    expect(formula).to_have_text("C66H102S9")
    expect(chains).to_contain_text("6 x C8 alkylthio (branched)")

    page.get_by_role("button", name="Register").click()
    expect(page).to_have_url(CODE_URL)
    facts = page.locator("dl.facts").first
    expect(facts.locator("dt", has_text="Scaffold").locator("xpath=following-sibling::dd[1]")).to_have_text("BWL-S")
    expect(facts.locator("dt", has_text="Formula").locator("xpath=following-sibling::dd[1]")).to_have_text("C66H102S9")


def test_a_pasted_bowl_is_matched_to_its_scaffold_in_the_preview(page: Page, login):
    login("member")
    page.goto("/scaffolds")
    page.get_by_label("Code").fill("BWL-SE")
    page.get_by_label("Name").fill("Se-bridged bowl")
    page.get_by_label("Core SMILES with attachment points").fill(PARENT_BOWLS["Se"])
    page.get_by_role("button", name="Add scaffold").click()
    expect(page).to_have_url(re.compile(r"/scaffolds$"))

    page.set_viewport_size({"width": 390, "height": 844})
    page.goto("/compounds/new")
    # Pasted, not built: the Se bowl with six ethoxy chains and no scaffold chosen (the case of issue 22).
    smiles = PARENT_BOWLS["Se"]
    for n in range(1, 7):
        smiles = smiles.replace(f"[*:{n}]", "OCC")
    page.locator('#new-compound textarea[name="smiles"]').fill(smiles)
    scaffold = page.locator('#preview [data-field="scaffold"]')
    expect(scaffold.locator("[data-scaffold]")).to_have_text("BWL-SE")
    expect(scaffold.locator('[data-field="scaffold_note"]')).to_contain_text("6 of 6 attachment points substituted")
    # nothing in the preview pushes the phone-width page sideways
    assert page.evaluate("() => document.documentElement.scrollWidth <= document.documentElement.clientWidth + 1")
    page.get_by_role("button", name="Register").click()
    expect(page).to_have_url(CODE_URL)
    facts = page.locator("dl.facts").first
    expect(facts.locator("dt", has_text="Scaffold").locator("xpath=following-sibling::dd[1]")).to_have_text("BWL-SE")
