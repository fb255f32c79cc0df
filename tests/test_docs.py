"""The README documents every setting, every CLI command and every upload kind."""

from __future__ import annotations

from server.cli import build_parser
from server.settings import PROJECT_ROOT, SETTINGS

README = (PROJECT_ROOT / "README.md").read_text()


def _commands(parser, prefix="remanence"):
    for action in parser._subparsers._group_actions if parser._subparsers else []:
        for name, sub in action.choices.items():
            if sub._subparsers:
                yield from _commands(sub, f"{prefix} {name}")
            else:
                yield f"{prefix} {name}"


def test_every_setting_is_in_the_readme():
    missing = [s.env for s in SETTINGS if f"`{s.env}`" not in README]
    assert not missing, f"README lacks settings: {missing}"


def test_every_command_is_in_the_readme():
    commands = list(_commands(build_parser()))
    assert "remanence token create" in commands
    missing = [c for c in commands if f"`{c}" not in README]
    assert not missing, f"README lacks commands: {missing}"


def test_readme_opens_with_the_two_commands():
    head = README.split("## ", 1)[0]
    assert "make demo" in head and "make test" in head


def test_the_readme_table_of_upload_kinds_is_the_one_the_kind_modules_give():
    """Columns and conditions live in server/kinds/; the README carries their rows verbatim."""
    from server.kinds import KINDS

    rows = [line for line in README.splitlines() if line.startswith("| `") and line.split("`")[1] in KINDS
            and line.count("|") == 4]
    assert rows == [k.readme_row() for k in KINDS.values()], "regenerate the README table from KINDS"


def test_the_readme_names_every_form_field():
    from server.ingest.conditions import FORM_FIELDS

    missing = [f for f in FORM_FIELDS if f"`{f}`" not in README]
    assert not missing, f"README lacks upload form fields: {missing}"
