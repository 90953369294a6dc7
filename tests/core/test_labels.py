"""Every index the core computes has words for a person, with the unit the core gives."""

from __future__ import annotations

import re

from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.core.labels import INDEX_LABELS, change_unit, index_label


def test_every_index_has_words_and_its_unit():
    table = compute_indices(SpaceInputs.create(1), with_phs=True)
    assert set(INDEX_LABELS) == set(table)
    for name, column in table.items():
        words, unit = INDEX_LABELS[name]
        assert unit == column.unit, name
        assert not re.search(r"\b[a-z]+_[a-z_]+\b", words), words  # no field names
        assert words[0].isupper(), words


def test_changes_are_read_in_kelvin():
    assert change_unit("operative_temperature") == "K"
    assert change_unit("radiant_asymmetry_horizontal") == "K"
    assert change_unit("pmv_iso") == ""
    assert index_label("not_an_index") == "Not an index"
