"""Simulation benchmarks: one zone pattern from a warm reflection table, and every zone of a cubic phase.

The per-pattern cache of :func:`saed.simulate.zone.zone_pattern` is cleared before each timed call,
so the numbers measure the selection, rotation, excitation errors, shape factors and the
double-diffraction search, not a cache hit; the reflection table (structure factors) stays warm,
as it does in a session.
"""

from __future__ import annotations

from saed.bench import Case


def _one_setup():
    from saed.crystal import builtin_phase, reflection_table

    si = builtin_phase("Si")
    reflection_table(si, 10.0)
    return si


def _one_fn(si):
    from saed.simulate.zone import _zone_pattern_cached, zone_pattern

    _zone_pattern_cached.cache_clear()
    zp = zone_pattern(si, [0, 1, 1], voltage_kv=200.0, max_g_inv_nm=10.0)
    return {"reflections": len(zp)}


def _all_setup():
    from saed.crystal import builtin_phase, reflection_table
    from saed.simulate.families import all_zone_axes

    cu = builtin_phase("Cu")
    reflection_table(cu, 10.0)
    return cu, all_zone_axes(5)


def _all_fn(state):
    from saed.simulate.zone import _zone_pattern_cached, zone_pattern

    cu, axes = state
    _zone_pattern_cached.cache_clear()
    n = 0
    for uvw in axes:
        n += len(zone_pattern(cu, uvw, voltage_kv=200.0, max_g_inv_nm=10.0))
    return {"zones": len(axes), "reflections": n}


def cases():
    return [
        Case("simulate: one zone pattern, Si [011], max_g 10 1/nm (warm table)", _one_setup, _one_fn,
             target_s=0.002, repeat=51, warmup=3),
        Case("simulate: every zone up to index 5 of Cu (one of each +/- pair)", _all_setup, _all_fn,
             target_s=1.0, repeat=5),
    ]
