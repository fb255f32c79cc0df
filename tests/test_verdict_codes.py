"""The one verdict table: complete, claims no proof, colours from Okabe-Ito, readable, and used by the pages."""

from __future__ import annotations

import re

import pytest

from server import verdict_codes as vc
from server.analysis import verdict as rules
from server.palette import OKABE_ITO
from tests.factories import login_as, soup


def _luminance(hex_colour: str) -> float:
    # Relative luminance, WCAG 2.1 (W3C Recommendation 2018), definition "relative luminance".
    def channel(c: float) -> float:
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (int(hex_colour.lstrip("#")[i:i + 2], 16) / 255 for i in (0, 2, 4))
    return 0.2126 * channel(r) + 0.7152 * channel(g) + 0.0722 * channel(b)


def contrast(a: str, b: str) -> float:
    # Contrast ratio (L1 + 0.05) / (L2 + 0.05), WCAG 2.1.
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_contrast_formula_against_wcag_extremes():
    # WCAG 2.1: black on white is 21:1, a colour on itself 1:1.
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast("#777777", "#777777") == pytest.approx(1.0)


def test_one_table_with_unique_codes_and_labels():
    assert len(set(vc.CODES)) == len(vc.CODES) == 9
    assert len(set(vc.LABELS.values())) == len(vc.LABELS) and len(set(vc.SHORT.values())) == len(vc.SHORT)
    assert rules.LABELS is vc.LABELS  # the rules read the table; they hold no copy
    assert [v.rank for v in vc.VERDICTS] == list(range(len(vc.VERDICTS)))
    assert set(vc.HITS) <= set(vc.CODES) and {vc.UNTESTED, vc.CONFLICTING} <= set(vc.CODES)


def test_no_code_or_label_claims_a_proof():
    for v in vc.VERDICTS:
        for text in (v.code, v.label, v.short):
            assert not re.search(r"prov|proof|ferroelectric", text, re.I), text
    assert "proven_ferroelectric" not in vc.CODES
    assert all(new in vc.CODES for new in vc.RETIRED.values())


def test_colours_are_okabe_ito_or_neutral_and_readable():
    hues = set(OKABE_ITO.values())
    for v in vc.VERDICTS:
        if v.border is not None:
            r, g, b = v.border[1:3], v.border[3:5], v.border[5:7]
            assert v.border in hues or r == g == b, v  # a palette hue or a neutral grey
        if v.ink is not None:
            # WCAG 2.1 success criterion 1.4.3: normal text needs at least 4.5:1.
            assert contrast(v.ink, "#ffffff") >= 4.5, v
            assert contrast(v.ink, v.cell) >= 4.5, v
    assert len({v.cell for v in vc.VERDICTS}) == len(vc.VERDICTS)  # every outcome has its own cell colour


def test_effective_is_override_else_computed():
    assert vc.effective(None, "nonpolar") == "nonpolar"
    assert vc.effective("", "nonpolar") == "nonpolar"
    assert vc.effective("conflicting", "nonpolar") == "conflicting"


def test_strongest_follows_table_order():
    assert vc.strongest(["untested", "nonpolar", "switching_phase_unknown"]) == "switching_phase_unknown"
    assert vc.strongest(["untested", "no_such_code"]) == "untested"
    assert vc.strongest(["conflicting", "no_switching_seen"]) == "conflicting"


def test_pages_carry_a_colour_rule_for_every_verdict(client, session):
    login_as(client, session)
    page = soup(client.get("/outcomes").text)
    css = "\n".join(s.get_text() for s in page.find_all("style"))
    for v in vc.VERDICTS:
        cell = re.search(rf"\.cell-{v.code} {{ background: ([^;]+);", css)
        assert cell and v.cell in cell.group(1), v.code
        badge = re.search(rf"\.v-{v.code} {{ border-color: (#[0-9A-Fa-f]{{6}});", css)
        assert (badge.group(1) if badge else None) == v.border, v.code
    legend = [li.find("strong").get_text() for li in page.select("ul.legend li")]
    assert legend == list(vc.SHORT.values())


def test_explorer_grouped_by_verdict_wears_the_badge_colours():
    from server.plots.explorer import explorer_figure
    from server.services.explore import Point, group_colours

    points = [Point(code=f"C-{i}", label="", x=float(i), y=float(i) ** 2, group=vc.LABELS[code])
              for i, code in enumerate(("polar_switching_supported", "conflicting", "untested", "nonpolar"))]
    fig = explorer_figure(points, x_title="x (1)", y_title="y (1)", colours=group_colours("verdict"))
    by_name = {t.name.rsplit(" (", 1)[0]: t.marker.color for t in fig.data}
    assert by_name[vc.LABELS["polar_switching_supported"]] == OKABE_ITO["green"]
    assert by_name[vc.LABELS["conflicting"]] == OKABE_ITO["vermillion"]
    assert by_name[vc.LABELS["nonpolar"]] == vc.NEUTRAL_BORDER
    assert by_name[vc.LABELS["untested"]] == vc.BY_CODE["untested"].cell
    assert group_colours("scaffold") == {}
