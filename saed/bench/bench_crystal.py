"""Crystal-model benchmarks: reflection tables (structure factors of every hkl up to max_g)."""

from __future__ import annotations

from saed.bench import Case


def _table_setup():
    from saed.crystal import builtin_phase

    return [builtin_phase(n) for n in ("Si", "Co-hcp", "Al2O3", "SrTiO3")]


def _table_fn(phases):
    from saed.crystal.reflections import reflection_table

    reflection_table.cache_clear()
    n = sum(len(reflection_table(p, 10.0)) for p in phases)
    return {"reflections": n}


def cases():
    return [Case("crystal: reflection tables, 4 phases, max_g 10 1/nm (cold)", _table_setup, _table_fn, repeat=5)]
