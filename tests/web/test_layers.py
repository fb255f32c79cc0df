"""The seams of issue 11, checked on the source (AST, not text search):

* the web layer is thin: no module in ``server/web`` imports the database layer (sqlmodel,
  sqlalchemy), the analyses (``server.analysis``, except the verdict labels it displays), the
  plots or the API router, or touches a session (``session.exec``,
  ``session.get`` ...); web modules import none of each other except ``render`` and ``format``;
* one access authority: the capability names and the ``embargoed`` flag are read only in
  ``server/access.py`` (plus the two places that store and serialise the flag);
* no vague module names in the web and API packages.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SERVER = Path(__file__).resolve().parents[2] / "server"
WEB = sorted((SERVER / "web").glob("*.py"))
SESSION_CALLS = {"exec", "get", "add", "commit", "execute", "scalar", "scalars", "delete", "flush", "query"}
SHARED_WEB = {"render", "format"}


def _imports(tree: ast.AST, package: str) -> list[str]:
    """Absolute module names imported by a module of ``package`` (relative imports resolved)."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = package.split(".")
            if node.level:
                base = base[: len(base) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            out += [f"{mod}.{a.name}" for a in node.names] if node.module is None or node.level else [mod]
            if node.level and node.module:
                out.append(mod)
    return out


@pytest.mark.parametrize("path", WEB, ids=lambda p: p.name)
def test_web_modules_are_thin(path):
    tree = ast.parse(path.read_text())
    problems = []
    for mod in _imports(tree, "server.web"):
        top = mod.split(".")[0]
        if top in ("sqlmodel", "sqlalchemy"):
            problems.append(f"imports {mod}")
        elif mod.startswith("server.analysis") and not mod.startswith("server.analysis.verdict"):
            problems.append(f"imports {mod} (analyses belong in services)")
        elif mod.startswith(("server.api", "server.plots")):
            problems.append(f"imports {mod}")
        elif mod.startswith("server.web.") and mod.split(".")[2] not in SHARED_WEB:
            problems.append(f"imports {mod} (web modules do not import each other)")
    for node in ast.walk(tree):
        if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                and isinstance(node.func.value, ast.Name) and node.func.value.id == "session"
                and node.func.attr in SESSION_CALLS):
            problems.append(f"line {node.lineno}: session.{node.func.attr}(...) in a web route")
    assert not problems, f"{path.name}: " + "; ".join(problems)


def test_the_import_check_can_fail():
    tree = ast.parse("from ..api.v1.measurements import x\nfrom sqlmodel import select\nfrom .pages import y\n"
                     "def f(session):\n    return session.exec(1)\n")
    mods = _imports(tree, "server.web")
    assert "server.api.v1.measurements" in mods and "sqlmodel" in mods and "server.web.pages" in mods


CAPABILITIES = {"can_see_embargoed", "can_write", "is_admin", "can_upload"}
# Where the flag itself is stored or serialised (not decided on): registration, the API shape,
# and the structure search, which applies the include/exclude decision access.py hands it.
EMBARGO_FLAG_READERS = {"access.py", "services/registry.py", "services/search.py"}


def test_only_access_decides():
    problems = []
    for path in sorted(SERVER.rglob("*.py")):
        rel = path.relative_to(SERVER).as_posix()
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Attribute):
                if node.attr in CAPABILITIES and rel != "access.py":
                    problems.append(f"{rel}:{node.lineno} reads .{node.attr}")
                if node.attr == "embargoed" and rel not in EMBARGO_FLAG_READERS:
                    problems.append(f"{rel}:{node.lineno} reads .embargoed")
    assert not problems, "access is decided outside server/access.py:\n" + "\n".join(problems)


def test_no_vague_module_names_in_web_and_api():
    vague = {"common", "science", "utils", "helpers", "misc", "pages"}
    found = [p.relative_to(SERVER).as_posix() for d in ("web", "api") for p in (SERVER / d).rglob("*.py")
             if p.stem in vague]
    assert not found, found
