"""``saed grain`` benchmarks: accuracy on generated tilt series, and speed on two 2048^2 frames.

Generated series (:func:`series_cases`): a grain of known phase and orientation U0 is put on a
first zone at holder readings (alpha1, beta1); the other patterns are the zones the holder reaches
from there (index <= 2, 4-index for hexagonal; 8-45 deg away, within alpha +-35, beta +-30 deg; only zones
with at least six spots in two rows within 12 1/nm, as an operator would record), with readings from the
holder geometry of ``saed tilt`` (H = R(e_alpha, alpha) R(e_beta, beta), e_alpha at a random azimuth on
the detector, e_beta = z x e_alpha; the tests check that geometry independently). Each pattern is
rendered at 512 x 512 by :func:`saed.synth.kinematic.synthetic_image` (log-normal intensity disorder, Poisson noise) with a
small mistilt (0.1-0.5 deg toward a random reflection). The readings handed to the solver carry
uniform noise of +-0.5 deg. Candidate phases are the true one and its look-alikes.

Scenarios (:data:`SCENARIOS`): fcc [112] / hcp [01-10] cobalt (the 0.6 % look-alike), fcc <111>,
<112>, <013> and hcp <10-11> starts (no two-fold axis: the 180-degree sense), hcp starting on [01-10], bcc / B2 and
fcc / L1_2 pairs, and three-pattern series. Reported: phase right, orientation within 2 deg (up to
the crystal's symmetry; the truth is U0 in the first pattern's detector frame at readings 0, 0),
and the distribution of misorientations.

``python -m saed.bench.bench_grain`` prints the full report.
"""

from __future__ import annotations

import math
import statistics
import tempfile
from pathlib import Path

import numpy as np

from saed.bench import Case

__all__ = ["SCENARIOS", "series_cases", "accuracy_report", "cases"]

#: (name, true phase, candidate phases, first zone (3-index), patterns in the series)
SCENARIOS = (
    ("fcc [112] vs hcp", "Co-fcc", ("Co-fcc", "Co-hcp"), (1, 1, 2), 2),
    ("hcp [01-10] vs fcc", "Co-hcp", ("Co-fcc", "Co-hcp"), (1, 2, 0), 2),
    ("fcc <111>: 180 deg", "Co-fcc", ("Co-fcc", "Co-hcp"), (1, 1, 1), 2),
    ("fcc <013>: 180 deg", "Ni", ("Ni", "Ni3Al"), (0, 1, 3), 2),
    ("hcp <10-11>: 180 deg", "Co-hcp", ("Co-fcc", "Co-hcp"), (2, 1, 1), 2),
    ("bcc vs B2 (bcc true)", "Fe-bcc", ("Fe-bcc", "NiAl"), (0, 1, 1), 2),
    ("B2 vs bcc (B2 true)", "NiAl", ("Fe-bcc", "NiAl"), (1, 1, 1), 2),
    ("fcc vs L1_2 (fcc true)", "Ni", ("Ni", "Ni3Al"), (1, 1, 2), 2),
    ("L1_2 vs fcc (L1_2 true)", "Ni3Al", ("Ni", "Ni3Al"), (0, 1, 2), 2),
    ("three patterns, fcc/hcp", "Co-fcc", ("Co-fcc", "Co-hcp"), (1, 1, 2), 3),
    ("three patterns, hcp", "Co-hcp", ("Co-fcc", "Co-hcp"), (2, 1, 0), 3),
)

READING_NOISE_DEG = 0.5
SCALE = 13.0 / (0.46 * 512)


def _holder(axis_deg, alpha, beta):
    """H(alpha, beta) in the detector frame, alpha axis at `axis_deg` from +x toward +y (saed tilt's holder)."""
    from saed.simulate.tilt import Holder, holder_rotation

    return holder_rotation(Holder(alpha_axis_deg=axis_deg, alpha_range_deg=(-90, 90), beta_range_deg=(-90, 90)),
                           alpha, beta)


def _readings_for(d_lab0, axis_deg):
    """Readings that bring the unit direction d (detector frame at readings 0, 0) onto +z: alpha = asin(d . e_beta),
    beta = atan2(-d . e_alpha, d_z), as in saed.simulate.tilt."""
    ea = np.array([math.cos(math.radians(axis_deg)), math.sin(math.radians(axis_deg)), 0.0])
    eb = np.cross([0.0, 0.0, 1.0], ea)
    return (math.degrees(math.asin(max(-1.0, min(1.0, float(d_lab0 @ eb))))),
            math.degrees(math.atan2(-float(d_lab0 @ ea), float(d_lab0[2]))))


def _in_plane(u, phase, uvw):
    from saed.simulate.geometry import orientation_matrix

    m = u @ orientation_matrix(phase.lattice, uvw, 0.0).T
    return math.degrees(math.atan2(m[1, 0], m[0, 0])), float(m[2, 2])


def _indexable(phase, uvw) -> bool:
    """At least six visible spots in two non-parallel rows within the rendered |g| (as bench_index skips)."""
    from saed.simulate.zone import zone_pattern

    zp = zone_pattern(phase, uvw, max_g_inv_nm=12.0, include_holz=False)
    sel = ~np.asarray(zp.kinematically_forbidden) & (np.asarray(zp.g_inv_nm) > 0) & (np.asarray(zp.f_abs) > 0)
    v = np.asarray(zp.xy_inv_nm)[sel]
    if len(v) < 6:
        return False
    u = v / np.linalg.norm(v, axis=1, keepdims=True)
    return bool(np.any(np.abs(u[:, None, 0] * u[None, :, 1] - u[:, None, 1] * u[None, :, 0]) > 0.2))


def series_cases(*, seed: int = 10, per_scenario: int = 5):
    """Yield (scenario, true phase, candidates, truth U0 (first detector frame at 0,0), patterns, axis)."""
    from saed.crystal import builtin_phase
    from saed.simulate.families import zone_families

    rng = np.random.default_rng(seed)
    for name, true, cand, z1, n_pat in SCENARIOS:
        ph = builtin_phase(true)
        lat = ph.lattice
        zones = [np.array(m) for f in zone_families(ph, max_index=2) for m in f.members.tolist()
                 if _indexable(ph, m)]
        made = 0
        tries = 0
        while made < per_scenario and tries < 50:
            tries += 1
            axis = float(rng.uniform(0, 360))
            a1, b1 = float(rng.uniform(-10, 10)), float(rng.uniform(-10, 10))
            from saed.simulate.geometry import orientation_matrix

            u1 = orientation_matrix(lat, z1, float(rng.uniform(0, 360)))
            u0 = _holder(axis, a1, b1).T @ u1
            r1 = lat.r_cartesian_nm(z1)
            options = []
            for z in zones:
                r = lat.r_cartesian_nm(z)
                ang = math.degrees(math.acos(min(1.0, abs(float(r @ r1)) / np.linalg.norm(r) / np.linalg.norm(r1))))
                if not 8.0 <= ang <= 45.0:
                    continue
                d = u0 @ (r / np.linalg.norm(r))
                a, b = _readings_for(d, axis)
                if abs(a) <= 35 and abs(b) <= 30:
                    options.append((tuple(int(v) for v in z), a, b))
            if len(options) < n_pat - 1:
                continue
            pick = rng.choice(len(options), size=n_pat - 1, replace=False)
            pats = [(tuple(int(v) for v in z1), a1, b1)] + [options[k] for k in pick]
            made += 1
            yield name, true, cand, u0 @ np.eye(3), pats, axis, rng


def _render(phase, uvw, u_lab, rng):
    from saed.synth.kinematic import synthetic_image
    from saed.simulate.zone import zone_pattern

    phi, cz = _in_plane(u_lab, phase, uvw)
    if cz < 0:  # the zone points back toward the gun: use its negative
        uvw = tuple(-v for v in uvw)
        phi, _ = _in_plane(u_lab, phase, uvw)
    zp = zone_pattern(phase, uvw, max_g_inv_nm=9.0, include_holz=False)
    low = np.flatnonzero(~zp.kinematically_forbidden & (zp.g_inv_nm > 0))
    toward = tuple(int(v) for v in zp.hkl[rng.choice(low)]) if len(low) else None
    pat, _ = synthetic_image(phase, uvw, scale_inv_nm_per_px=SCALE, in_plane_rotation_deg=phi,
                             tilt_deg=float(rng.uniform(0.1, 0.5)) if toward else 0.0, tilt_toward_hkl=toward,
                             image_shape=(512, 512), max_g_inv_nm=13.0, rng=rng)
    return pat.image


def _solve_series(images, readings, axis, tables):
    from saed.calibration import Calibration
    from saed.image.measure import measure_pattern
    from saed.index import index_pattern
    from saed.index.grain import GrainPattern, solve_grain

    cal = Calibration(SCALE, 200.0, alpha_axis_deg=axis)
    pats = []
    for k, (img, r) in enumerate(zip(images, readings)):
        res = index_pattern(measure_pattern(img, cal), tables, top=10, lookalikes=False)
        pats.append(GrainPattern(f"p{k + 1}", r, res, axis))
    return solve_grain(pats, tables)


def accuracy_report(*, seed: int = 10, per_scenario: int = 5) -> dict:
    """Run every generated series; phase right, misorientation, per-scenario counts."""
    from saed.crystal import builtin_phase
    from saed.index import prepare_phases
    from saed.index.orientation import misorientation_deg, proper_symmetry_cartesian

    tables_cache = {}
    rows = []
    for name, true, cand, u0, pats, axis, rng in series_cases(seed=seed, per_scenario=per_scenario):
        if cand not in tables_cache:
            tables_cache[cand] = prepare_phases([builtin_phase(c) for c in cand], max_g_inv_nm=14.0)
        tables = tables_cache[cand]
        ph = builtin_phase(true)
        images = [_render(ph, z, _holder(axis, a, b) @ u0, rng) for z, a, b in pats]
        readings = [(a + float(rng.uniform(-READING_NOISE_DEG, READING_NOISE_DEG)),
                     b + float(rng.uniform(-READING_NOISE_DEG, READING_NOISE_DEG))) for _, a, b in pats]
        res = _solve_series(images, readings, axis, tables)
        best = next((s for s in res.solutions if not s.missing), None)
        phase_ok = best is not None and best.phase_name == true
        mis = (misorientation_deg(np.asarray(best.orientation_matrix), u0, proper_symmetry_cartesian(ph))[0]
               if phase_ok else float("nan"))
        undecided = [lk.phase_name for lk in res.lookalikes if lk.relation == "undecided"]
        rows.append({"scenario": name, "true": true, "found": best.phase_name if best else None,
                     "phase_ok": phase_ok, "misorientation_deg": mis, "zones": [z for z, _, _ in pats],
                     "undecided": undecided, "third": res.third_pattern.text if res.third_pattern else ""})
    n = len(rows)
    ok_phase = sum(r["phase_ok"] for r in rows)
    mis = [r["misorientation_deg"] for r in rows if r["phase_ok"]]
    within = sum(m <= 2.0 for m in mis)
    edges = (0.25, 0.5, 1.0, 2.0, 5.0)
    hist, lo = [], 0.0
    for e in edges:
        hist.append(f"{lo:g}-{e:g} deg: {sum(lo <= m < e for m in mis)}")
        lo = e
    hist.append(f">= {edges[-1]:g} deg: {sum(m >= edges[-1] for m in mis)}")
    per = {}
    for r in rows:
        d = per.setdefault(r["scenario"], [0, 0, 0])
        d[0] += 1
        d[1] += r["phase_ok"]
        d[2] += r["phase_ok"] and r["misorientation_deg"] <= 2.0
    return {
        "series": n,
        "phase right": f"{ok_phase}/{n} ({100.0 * ok_phase / max(n, 1):.1f} %)",
        "orientation within 2 deg": f"{within}/{n} ({100.0 * within / max(n, 1):.1f} %)",
        "misorientation median / 90th percentile / max (deg)": (
            f"{statistics.median(mis):.2f} / {float(np.percentile(mis, 90)):.2f} / {max(mis):.2f}" if mis else "-"),
        "misorientation distribution": "; ".join(hist),
        "left undecided (a third pattern named)": sum(bool(r["undecided"]) for r in rows),
        "per scenario (series, phase right, within 2 deg)": "; ".join(f"{k}: {v[0]}/{v[1]}/{v[2]}" for k, v in per.items()),
        "rows": rows,
    }


# ---------------------------------------------------------------------- speed
TEN_PHASES = ("Co-fcc", "Co-hcp", "Cr", "Ni", "Ni3Al", "NiAl", "Fe-bcc", "Al", "Si", "Ti-hcp")


def _speed_setup():
    import tifffile

    from saed.calibration import Calibration
    from saed.crystal import builtin_phase
    from saed.index import prepare_phases
    from saed.synth.kinematic import synthetic_image
    from saed.simulate.geometry import orientation_matrix

    size = 2048
    scale = 13.0 / (0.46 * size)
    ph = builtin_phase("Co-fcc")
    rng = np.random.default_rng(3)
    axis = 20.0
    u1 = orientation_matrix(ph.lattice, (1, 1, 2), 40.0)
    u0 = u1  # first pattern at readings (0, 0)
    r2 = ph.lattice.r_cartesian_nm((0, 1, 1))
    d = u0 @ (r2 / np.linalg.norm(r2))
    a2, b2 = _readings_for(d, axis)
    tmp = tempfile.TemporaryDirectory()
    paths = []
    for k, (z, u) in enumerate((((1, 1, 2), u1), ((0, 1, 1), _holder(axis, a2, b2) @ u0))):
        phi, cz = _in_plane(u, ph, z)
        if cz < 0:
            z = tuple(-v for v in z)
            phi, _ = _in_plane(u, ph, z)
        pat, _ = synthetic_image(ph, z, scale_inv_nm_per_px=scale, in_plane_rotation_deg=phi, tilt_deg=0.3,
                                 tilt_toward_hkl=(1, 1, -1) if k == 0 else (2, 0, 0), image_shape=(size, size),
                                 max_g_inv_nm=13.0, rng=rng)
        p = Path(tmp.name) / f"p{k}.tif"
        tifffile.imwrite(p, pat.image)
        paths.append(p)
    tables = prepare_phases([builtin_phase(n) for n in TEN_PHASES], max_g_inv_nm=16.0)
    return tmp, paths, [(0.0, 0.0), (a2, b2)], tables, Calibration(scale, 200.0, alpha_axis_deg=axis)


def _speed_fn(state):
    from saed.image.measure import measure_file
    from saed.index import index_pattern
    from saed.index.grain import GrainPattern, solve_grain

    _tmp, paths, readings, tables, cal = state
    pats = [GrainPattern(str(p), r, index_pattern(measure_file(p, cal), tables, top=10, lookalikes=False),
                         cal.alpha_axis_deg) for p, r in zip(paths, readings)]
    res = solve_grain(pats, tables)
    b = res.best
    return {"best": f"{b.phase_name}, misfits {[round(p.misfit_deg, 2) for p in b.patterns]}" if b else res.message}


def _accuracy_fn(_):
    rep = accuracy_report()
    return {k: v for k, v in rep.items() if k != "rows"}


def cases():
    return [
        Case("grain: two 2048x2048 TIFFs -> joint orientation, 10 phases", _speed_setup, _speed_fn, target_s=2.0,
             repeat=5),
        Case("grain: accuracy on 55 generated tilt series (512x512 frames)", lambda: None, _accuracy_fn, repeat=1,
             warmup=0, note="time = one pass over all series"),
    ]


def main() -> None:  # pragma: no cover - a report for people
    rep = accuracy_report()
    for r in rep["rows"]:
        print(f"{r['scenario']:<26} true {r['true']:<7} found {str(r['found']):<7} "
              f"mis {r['misorientation_deg']:6.2f}  zones {r['zones']}  undecided {r['undecided']}  {r['third']}")
    for k, v in rep.items():
        if k != "rows":
            print(f"{k}: {v}")


if __name__ == "__main__":  # pragma: no cover
    main()
