"""Comment text: Markdown rendered safely, and ``@name`` mentions of accounts.

Markdown goes through markdown-it-py (the CommonMark reference port kept by the Executable Books
project) with raw HTML switched off: ``<script>`` or ``<img onerror=...>`` in a comment is shown as
text, never passed through. Links are limited to http, https and mailto URLs and relative paths
(markdown-it's own check already refuses ``javascript:``, ``vbscript:``, ``file:`` and ``data:``);
images are switched off (pictures are attachments, not remote URLs a page would fetch). Every link
opens with ``rel="nofollow noopener noreferrer"``.

Mentions are found in the parsed text only (not in code spans, code blocks or link text), so the
names that get a notification are exactly the ones shown as mentions.
"""

from __future__ import annotations

import re
from html import escape
from typing import Iterable, Optional

from markdown_it import MarkdownIt
from markdown_it.token import Token

#: ``@name`` not preceded by a word character, '@' or '.', so e-mail addresses are not mentions.
#: Names follow the account rule (letters, digits, '.', '-', '_'); a trailing '.' ends the sentence.
MENTION = re.compile(r"(?<![\w@.])@([A-Za-z0-9_][A-Za-z0-9_.-]{0,79})")
_SAFE_LINK = re.compile(r"^(?:https?://|mailto:|/(?!/)|#)", re.I)


def _name(raw: str) -> str:
    return raw.rstrip(".-")


def _mentions_rule(state) -> None:  # noqa: ANN001 - markdown-it's StateCore
    known: Optional[frozenset[str]] = state.env.get("known")
    found: list[str] = state.env.setdefault("found", [])
    for block in state.tokens:
        if block.type != "inline" or not block.children:
            continue
        out: list[Token] = []
        in_link = 0
        for child in block.children:
            in_link += child.type == "link_open"
            in_link -= child.type == "link_close"
            if child.type != "text" or in_link:
                out.append(child)
                continue
            pos, text = 0, child.content
            for m in MENTION.finditer(text):
                name = _name(m.group(1))
                if name not in found:
                    found.append(name)
                if known is None or name not in known:
                    continue
                if m.start() > pos:
                    out.append(_text(text[pos:m.start()]))
                mention = Token("mention", "", 0)
                mention.content = name
                out.append(mention)
                pos = m.start() + 1 + len(name)
            out.append(child if pos == 0 else _text(text[pos:]))
        block.children = [t for t in out if t.type != "text" or t.content]


def _text(content: str) -> Token:
    t = Token("text", "", 0)
    t.content = content
    return t


def _render_mention(self, tokens, idx, options, env) -> str:  # noqa: ANN001 - markdown-it renderer hook
    name = escape(tokens[idx].content)
    return f'<span class="mention" data-user="{name}">@{name}</span>'


def _render_link_open(self, tokens, idx, options, env) -> str:  # noqa: ANN001
    tokens[idx].attrSet("rel", "nofollow noopener noreferrer")
    return self.renderToken(tokens, idx, options, env)


def _parser() -> MarkdownIt:
    md = MarkdownIt("js-default", {"html": False, "linkify": False, "typographer": False})
    md.disable(["image", "html_inline", "html_block"])
    default_validate = md.validateLink
    md.validateLink = lambda url: default_validate(url) and bool(_SAFE_LINK.match(url.strip()))
    md.core.ruler.push("mentions", _mentions_rule)
    md.add_render_rule("mention", _render_mention)
    md.add_render_rule("link_open", _render_link_open)
    return md


_MD = _parser()


def find_mentions(text: str) -> list[str]:
    """Every ``@name`` in the Markdown text (outside code and link text), in order, each once."""
    env: dict = {"known": frozenset()}
    _MD.parse(text, env)
    return list(env["found"])


def render_markdown(text: str, *, known: Iterable[str] = ()) -> str:
    """Safe HTML for ``text``; ``@name`` becomes a mention where ``name`` is in ``known`` (accounts)."""
    return _MD.render(text, {"known": frozenset(known)})
