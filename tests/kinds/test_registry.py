"""Every registered kind supplies every part, so a half-added kind fails here and not in front of a user.

The checks are structural (server.kinds.base.check_kind) and behavioural: each kind's own
example file is read, analysed, labelled, summarised, drawn and turned into evidence and
CompoundStats fields without the rest of the application knowing the kind by name.
"""

from __future__ import annotations

import dataclasses
import importlib

import pytest

from server.ingest.conditions import FORM_FIELDS, parse_conditions
from server.kinds import KINDS, Context, Evidence, Kind, Need, check_kind, kind_modules
from server.kinds.base import EXAMPLE_SMILES
from server.models import CompoundStats
from server.services.measurements import analyse

# The example bowl, C27H24O6: 27 x 12.011 + 24 x 1.008 + 6 x 15.999 = 444.483 g/mol (IUPAC standard
# atomic weights, conventional values).
CONTEXT = Context(formula="C27H24O6", molar_mass_g_mol=444.483, smiles=EXAMPLE_SMILES)


@pytest.fixture(scope="module")
def analysed():
    out = {}
    for kind in KINDS.values():
        ex = kind.example()
        out[kind.name] = (ex, analyse(kind, ex.raw, filename=ex.filename, form={}, context=CONTEXT))
    return out


def test_the_registry_is_built_from_one_module_per_kind():
    assert set(KINDS) == set(kind_modules())
    assert list(KINDS)[:6] == ["pe_loop", "pund", "dielectric", "dsc", "nmr_rates", "crystal"]
    for name in kind_modules():
        assert importlib.import_module(f"server.kinds.{name}").KIND is KINDS[name]


@pytest.mark.parametrize("name", sorted(KINDS))
def test_every_kind_is_complete(name):
    assert check_kind(KINDS[name]) == []


def test_a_half_added_kind_is_refused():
    whole = KINDS["nmr_rates"]
    half = dataclasses.replace(whole, name="half_added", results=(), summary_keys=("dg298_kcal_mol",), figure=None,
                               needs=(Need(("pressure",)),), column_sets=(("T_K", "kk"),))
    problems = " | ".join(check_kind(half))
    for words in ("no result keys", "summary key 'dg298_kcal_mol' has no label", "no figure",
                  "condition 'pressure'", "column 'kk'"):
        assert words in problems, problems


def _scalar_keys(results: dict) -> set[str]:
    """Every key the page shows: top-level scalars, and the keys of nested tables and mappings."""
    keys = set()
    for key, value in results.items():
        if key in ("flags", "verdict"):  # shown by the page's own flag list and verdict line
            continue
        keys.add(key)
        if isinstance(value, dict):
            keys |= {k for k, v in value.items() if not isinstance(v, (dict, list))}
        if isinstance(value, list) and value and isinstance(value[0], dict):
            keys |= {k for row in value for k in row}
    return keys


@pytest.mark.parametrize("name", sorted(KINDS))
def test_every_result_key_of_the_example_has_a_label(name, analysed):
    kind = KINDS[name]
    _, done = analysed[name]
    declared = {r.key for r in kind.results}
    shown = _scalar_keys(done.results)
    if name == "pe_loop":  # the loop-shape diagnostics are labelled too
        shown |= set(done.results["shape"])
    assert shown - declared == set(), f"{name}: result keys without a label in server/kinds/{name}.py"


@pytest.mark.parametrize("name", sorted(KINDS))
def test_every_part_works_on_the_kinds_own_example(name, analysed):
    kind = KINDS[name]
    ex, done = analysed[name]
    assert ex.raw and ex.filename.startswith(name)
    assert kind.example().raw == ex.raw, "the example generator is deterministic"
    # Conditions the example carries are fields the kind declares.
    if kind.table:
        given = {k for k, v in parse_conditions({}, kind.read(ex.raw, ex.filename).metadata).sources.items()}
        assert given <= set(kind.condition_fields) | {"instrument", "operator", "notes"}
    assert set(kind.condition_fields) <= set(FORM_FIELDS)
    # Summary: a line naming its first key's label.
    items = kind.summary_items(done.results)
    assert items and items[0][0].key == kind.summary_keys[0]
    # Figure: drawn from the parsed file and the result, with titled axes.
    if kind.figure is not None:
        fig = kind.figure(done.parsed, done.result)
        assert fig.data and any(ax.title.text for ax in fig.select_xaxes())
    # Evidence and stats: only through the kind's own functions.
    if kind.evidence is not None:
        assert isinstance(kind.evidence(done.results, 300.0), Evidence)
    if kind.stats is not None:
        row = type("Row", (), {"results": done.results, "verdict": done.verdict, "id": 1, "temperature_K": 300.0})()
        fields = kind.stats([row])
        assert fields and set(fields) <= set(CompoundStats.model_fields)
        assert set(kind.stats([])) == set(fields), "stats returns every field it owns, even with no measurement"
        assert all(v in (None, "") for v in kind.stats([]).values()), "nothing measured: nothing said"


def test_the_kinds_share_no_stats_field():
    owners: dict[str, str] = {}
    for kind in KINDS.values():
        if kind.stats is None:
            continue
        for field in kind.stats([]):
            assert field not in owners, f"{field} filled by {owners[field]} and {kind.name}"
            owners[field] = kind.name


def test_kind_is_the_one_binding_of_name_analysis_and_version():
    for kind in KINDS.values():
        assert isinstance(kind, Kind)
        assert kind.version == kind.analysis.VERSION and kind.method == kind.analysis.METHOD
