"""PhaseIndexTable.rows_of: the row of every hkl, -1 where the table has none.

The reference is a dictionary built in the test from the table's own hkl list (a different way to
look the rows up); the phases are built-in and their cells are checked elsewhere against handbook values.
"""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from saed.crystal import builtin_phase
from saed.index import prepare_phases

TABLES = prepare_phases([builtin_phase(p) for p in ("Co-fcc", "Co-hcp", "Cr")], voltage_kv=200.0, max_g_inv_nm=16.0)


def _by_dict(pt, hkl):
    where = {tuple(int(v) for v in row): i for i, row in enumerate(pt.hkl)}
    return np.array([where.get(tuple(int(v) for v in row), -1) for row in hkl.reshape(-1, 3)]).reshape(hkl.shape[:-1])


@settings(max_examples=200, deadline=None)
@given(st.integers(0, 2), st.lists(st.tuples(*[st.integers(-14, 14)] * 3), min_size=1, max_size=40))
def test_rows_of_agrees_with_a_dictionary_of_the_rows(phase, rows):
    pt = TABLES.phases[phase]
    hkl = np.array(rows, dtype=np.int64).reshape(1, -1, 3)          # the (candidates, spots, 3) shape of quick_scores
    assert np.array_equal(pt.rows_of(hkl), _by_dict(pt, hkl))


def test_rows_of_without_the_dense_table_gives_the_same_rows(monkeypatch):
    import saed.index.tables as tables

    pt = TABLES.phases[0]
    hkl = np.stack(np.meshgrid(*[np.arange(-pt.span - 2, pt.span + 3)] * 3, indexing="ij"), -1).reshape(-1, 3)
    dense = pt.rows_of(hkl)
    monkeypatch.setattr(tables, "DENSE_LOOKUP_MAX", 0)
    fresh = tables.PhaseIndexTable(**{f: getattr(pt, f) for f in pt.__dataclass_fields__})
    assert fresh._row_lookup is None
    assert np.array_equal(fresh.rows_of(hkl), dense)
    assert np.array_equal(dense, _by_dict(pt, hkl))
