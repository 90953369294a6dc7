"""The catalogue of indices agrees with what the core computes, with the README's methods
table, and with itself (every reader's flag names something that exists)."""

from __future__ import annotations

import fnmatch
import importlib
import pathlib
import re

from thermowarden.core import catalogue as cat
from thermowarden.core.forecast import FORESIGHT_COLUMNS
from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.core.labels import INDEX_LABELS, change_unit, index_label

README = pathlib.Path(__file__).parents[2] / "README.md"


def test_every_computed_column_is_catalogued_with_its_unit():
    table = compute_indices(SpaceInputs.create(1), with_phs=True)
    assert [e.name for e in cat.computed()] == [e.name for e in cat.computed()
                                                if e.name in table]
    assert {e.name for e in cat.computed()} == set(table)
    assert set(INDEX_LABELS) == set(table)
    for e in cat.computed():
        assert e.unit == table[e.name].unit, e.name
        assert e.categories == table[e.name].labels or e.categories is None, e.name
        if table[e.name].labels is not None and e.exported:
            assert e.categories == table[e.name].labels, e.name


def test_engine_columns_are_catalogued():
    assert {e.name for e in cat.INDICES if e.engine} == set(FORESIGHT_COLUMNS)


def test_names_are_unique_and_words_are_for_people():
    names = [e.name for e in cat.EVERYTHING]
    assert len(names) == len(set(names))
    for e in cat.EVERYTHING:
        assert not re.search(r"\b[a-z]+_[a-z_]+\b", e.label), e.label  # no field names
        assert e.label[0].isupper(), e.label


def test_families_are_modules_that_compute():
    for e in cat.EVERYTHING:
        assert e.family in cat.FAMILIES, e.name
        module = cat.FAMILIES[e.family]
        if module:
            assert callable(getattr(importlib.import_module(module), "compute", None)) or e.engine


def test_every_flag_names_something_that_exists():
    charts = {c.key for c in cat.CHARTS}
    for e in cat.EVERYTHING:
        assert not e.exported or e.kept, e.name
        assert not e.drawn or (e.kept and e.drawn in charts), e.name
        assert e.shown in ("", "overview", "space"), e.name
        assert e.place in ("", *cat.PLACES), e.name
        assert set(e.key) <= set(cat.PLACES), e.name
    kept = [e.kept for e in cat.kept()]
    assert len(kept) == len(set(kept))
    for chart in cat.CHARTS:
        assert cat.drawn(chart.key), chart.key


def test_demo_columns_fit_its_80_column_view():
    assert all(len(e.short) <= 8 for e in cat.in_demo())
    assert 14 + 9 * len(cat.in_demo()) < 80  # space name, then 9 columns per value


def test_every_index_has_one_method_that_names_it():
    for e in cat.INDICES:
        assert e.method in cat.METHOD_BY_KEY, e.name
        patterns = re.findall(r"`([a-z_*]+)`", cat.METHOD_BY_KEY[e.method].names)
        assert any(fnmatch.fnmatchcase(e.name, p) for p in patterns), (e.name, patterns)
    used = {e.method for e in cat.EVERYTHING if e.method}
    assert used == set(cat.METHOD_BY_KEY)


def test_readme_methods_table_is_the_catalogue():
    """The README's table is :func:`methods_table`: edit the catalogue, then paste
    ``python -m thermowarden.core.catalogue`` over the README's table."""
    text = README.read_text(encoding="utf-8")
    start = text.index("| index | method | needs | applies |")
    end = text.index("\n\n", start)
    assert text[start:end + 1] == cat.methods_table()


def test_changes_are_read_in_kelvin():
    assert change_unit("operative_temperature") == "K"
    assert change_unit("radiant_asymmetry_horizontal") == "K"
    assert change_unit("pmv_iso") == ""
    assert index_label("not_an_index") == "Not an index"
    assert index_label("wbgt_effective") == cat.BY_NAME["wbgt_effective"].label
