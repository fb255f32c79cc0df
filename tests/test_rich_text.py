"""Comment Markdown: safe rendering and mentions (server/rich_text.py)."""

from __future__ import annotations

from bs4 import BeautifulSoup

from server.rich_text import find_mentions, render_markdown

# Classic injection attempts (OWASP XSS filter evasion cheat sheet, recalled from memory): none may
# come out as an element, an attribute handler or a script URL.
ATTACKS = [
    "<script>alert(1)</script>",
    "<img src=x onerror=alert(1)>",
    '<a href="javascript:alert(1)">x</a>',
    "[click](javascript:alert(1))",
    "[click](JaVaScRiPt:alert(1))",
    "[click](vbscript:msgbox(1))",
    "[click](data:text/html;base64,PHNjcmlwdD5hbGVydCgxKTwvc2NyaXB0Pg==)",
    "![pic](http://example.invalid/track.png)",
    '<iframe src="https://example.invalid"></iframe>',
    "<div onmouseover=alert(1)>hover</div>",
    '[x](https://ok.invalid "title\\" onclick=\\"alert(1)")',
    "<svg/onload=alert(1)>",
]


def _tags(html: str) -> list:
    return BeautifulSoup(html, "html.parser").find_all(True)


def test_raw_html_and_script_urls_never_pass():
    for text in ATTACKS:
        html = render_markdown(text)
        for tag in _tags(html):
            assert tag.name in {"p", "a", "code", "em", "strong"}, (text, html)
            assert not any(a.lower().startswith("on") for a in tag.attrs), (text, html)
            if tag.name == "a":
                assert tag["href"].startswith(("https://", "http://", "mailto:", "/", "#")), (text, html)
                assert tag["rel"] == ["nofollow", "noopener", "noreferrer"]
    # The text itself is kept, escaped: people see what was written.
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in render_markdown(ATTACKS[0])


def test_markdown_renders_what_people_write():
    html = render_markdown("**Pr** rose after *annealing*:\n\n- 2 h at 350 K\n- `P_r = 3.1`\n\n[notes](https://lab.invalid/x)")
    soup = BeautifulSoup(html, "html.parser")
    assert soup.find("strong").text == "Pr" and soup.find("em").text == "annealing"
    assert [li.text for li in soup.find_all("li")] == ["2 h at 350 K", "P_r = 3.1"]
    assert soup.find("a")["href"] == "https://lab.invalid/x"
    table = BeautifulSoup(render_markdown("| T (K) | Pr |\n|---|---|\n| 300 | 2.0 |"), "html.parser")
    assert [td.text for td in table.find_all("td")] == ["300", "2.0"]


def test_mentions_are_found_outside_code_and_addresses():
    text = "@ann please check; cc @bob.\n\nNot `@carl`, not mail@dan.invalid, not [@erin](https://x.invalid).\n\n    @fay in code"
    assert find_mentions(text) == ["ann", "bob"]
    html = render_markdown(text, known=["ann"])
    spans = BeautifulSoup(html, "html.parser").select("span.mention")
    assert [s["data-user"] for s in spans] == ["ann"]  # bob is no account: plain text
    assert "@bob." in BeautifulSoup(html, "html.parser").get_text()
