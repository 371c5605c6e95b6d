"""Indexing benchmarks: accuracy on a generated set with known truth, and speed on 2048 x 2048 frames.

Accuracy set (:func:`accuracy_cases`): for one or two phases of every built-in structure type,
zone axes up to index 5 (cubic) and comparable ones for hexagonal and tetragonal cells, each
rendered as a 512 x 512 detector frame by :func:`saed.synth.kinematic.synthetic_image` with a
random in-plane rotation, a mistilt up to 1.5 deg toward a random reflection, log-normal
("dynamical-like") intensity disorder, weak double-diffraction spots, a beam stop in half of the
frames and one of three elliptical distortions (axis ratio 1, 1.01, 1.025). Two frames in three
are calibrated (the calibration carries the ellipse, as after ``saed calibrate``); the others
are indexed by ratios alone. Each frame is measured by the image stage and indexed against its
true phase, the look-alikes listed in :data:`LOOKALIKES` and two random phases. Twins that no
SAED pattern can separate are left out of the candidate lists (same structure type and a cell
within 1.5 % when calibrated; the same structure type with the same axial ratio when not) and
counted in the report. Zones whose pattern has fewer than two non-parallel rows or six spots on
the detector are not indexable and are skipped (also counted).

Reported: top-1 (phase and zone up to the Laue group) and top-3, overall and for calibrated and
uncalibrated frames apart; top-1 or the truth named as an ambiguous / identical-geometry
look-alike of a solution ranked above it; mean d-spacing and angle errors of the true solution on
the calibrated frames; the implied-scale error on the uncalibrated ones; the confusion pairs.

``python -m saed.bench.bench_index`` prints the full accuracy report.
"""

from __future__ import annotations

import math
import statistics
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np

from saed.bench import Case

__all__ = ["LOOKALIKES", "accuracy_cases", "accuracy_report", "cases"]

#: The true phases of the accuracy set and the look-alikes put beside them in the candidate list.
LOOKALIKES = {
    "Co-fcc": ("Co-hcp", "Ni3Al", "Cr"),
    "Co-hcp": ("Co-fcc", "Ti-hcp", "Zn"),
    "Al": ("Si", "MgO", "TiAl"),
    "Ni": ("Ni3Al", "Co-hcp"),
    "Fe-bcc": ("NiAl", "Al"),
    "Mg": ("Co-fcc", "Zn", "Ti-hcp"),
    "Si": ("GaAs", "Al", "CaF2"),
    "GaAs": ("Ge", "InP", "NaCl"),
    "MgO": ("Al", "Ni3Al", "Cu"),
    "NiAl": ("Cr", "Fe-bcc"),
    "CaF2": ("Si", "NaCl"),
    "SrTiO3": ("Pt", "ReO3"),
    "ReO3": ("SrTiO3", "Ni3Al"),
    "Ni3Al": ("Ni", "Co-fcc", "Cu"),
    "Po": ("Fe-bcc", "Ag"),
    "TiO2-rutile": ("TiAl", "Al2O3"),
    "Al2O3": ("TiO2-rutile", "Zn"),
    "TiAl": ("Al", "Ni3Al"),
}

CUBIC_ZONES = ((0, 0, 1), (0, 1, 1), (1, 1, 1), (0, 1, 2), (1, 1, 2), (0, 1, 3), (1, 2, 2), (1, 2, 3), (1, 1, 4),
               (1, 3, 3), (0, 1, 5), (2, 3, 3), (1, 2, 5), (1, 3, 4), (0, 3, 5), (1, 4, 5))
HEX_ZONES = ((0, 0, 1), (1, 0, 0), (1, 2, 0), (1, 0, 1), (1, 1, 1), (1, 0, 2), (1, 2, 1), (2, 0, 1), (1, 1, 2),
             (1, 0, 3), (2, 2, 1), (1, 2, 2))
TETRA_ZONES = ((0, 0, 1), (1, 0, 0), (1, 1, 0), (1, 0, 1), (1, 1, 1), (1, 0, 2), (1, 1, 2), (2, 0, 1), (2, 1, 0),
               (1, 2, 1))

#: Axis ratios of the three distortion levels.
DISTORTIONS = (1.0, 1.01, 1.025)

SIZE = 512
ZONES_PER_PHASE = 5


def _twins(true, other, *, calibrated: bool) -> bool:
    """Pairs no SAED pattern can separate: same structure type and cell (calibrated) or axial ratio (not)."""
    if true.structure_type != other.structure_type:
        return False
    la, lb = true.lattice, other.lattice
    ca, cb = la.c_nm / la.a_nm, lb.c_nm / lb.a_nm
    if abs(ca / cb - 1) > 0.01:
        return False
    return (not calibrated) or abs(la.a_nm / lb.a_nm - 1) < 0.015


def _zones_for(phase):
    if phase.is_hexagonal:
        return HEX_ZONES
    if phase.lattice.crystal_system == "tetragonal":
        return TETRA_ZONES
    return CUBIC_ZONES


def accuracy_cases(*, seed: int = 2024, per_phase: int = ZONES_PER_PHASE):
    """The generated frames: a list of dicts (truth, image, calibration, candidate phase names)."""
    from saed.calibration import Calibration, Ellipse
    from saed.crystal import builtin_names, builtin_phase
    from saed.synth.kinematic import synthetic_image, zone_spots
    from saed.simulate.zone import zone_pattern
    from saed.synth.detector import BeamStop

    rng = np.random.default_rng(seed)
    names = builtin_names()
    out, skipped, twins_left_out = [], [], []
    k = 0
    for true_name, looks in LOOKALIKES.items():
        ph = builtin_phase(true_name)
        zones = list(_zones_for(ph))
        order = rng.permutation(len(zones))
        taken = 0
        for zi in order:
            if taken >= per_phase:
                break
            zone = zones[zi]
            scale = 13.0 / (SIZE / 2)
            v, inten, hkl, _, _ = zone_spots(ph, zone, scale_inv_nm_per_px=scale, max_g_inv_nm=13.0)
            r = np.hypot(v[:, 0], v[:, 1])
            inside = r < 0.47 * SIZE
            if not _indexable(v[inside & (inten >= 0.005)]):
                skipped.append(f"{true_name} {list(zone)}")
                continue
            taken += 1
            k += 1
            calibrated = k % 3 != 0
            level = DISTORTIONS[k % 3 if calibrated else (k // 3) % 3]
            ell = Ellipse(level, float(rng.uniform(0, 180))) if level > 1 else None
            zp = zone_pattern(ph, zone, max_g_inv_nm=13.0)
            allowed = np.flatnonzero((zp.laue_zone == 0) & ~zp.kinematically_forbidden)
            tilt = float(rng.uniform(0.0, 1.5))
            toward = zp.hkl[allowed[rng.integers(len(allowed))]] if len(allowed) else None
            stop = BeamStop(angle_deg=float(rng.uniform(0, 360)), width_px=14.0, transmission=0.0) if k % 2 else None
            scale = scale * float(rng.uniform(0.9, 1.1))
            pat, truth = synthetic_image(ph, zone, scale_inv_nm_per_px=scale, in_plane_rotation_deg=float(rng.uniform(0, 360)),
                                         tilt_deg=tilt if toward is not None else 0.0, tilt_toward_hkl=toward,
                                         image_shape=(SIZE, SIZE), max_g_inv_nm=13.0,
                                         intensity_noise=float(rng.uniform(0.2, 0.5)), double_diffraction=0.005,
                                         ellipse=ell, beam_stop=stop, electrons_max=5e4, rng=int(rng.integers(1 << 30)))
            cands = [true_name] + [n for n in looks if not _twins(ph, builtin_phase(n), calibrated=calibrated)]
            twins_left_out += [f"{true_name}~{n}" for n in looks if _twins(ph, builtin_phase(n), calibrated=calibrated)]
            pool = [n for n in names if n not in cands and not _twins(ph, builtin_phase(n), calibrated=calibrated)]
            cands += [pool[i] for i in rng.choice(len(pool), 2, replace=False)]
            cal = Calibration(scale if calibrated else None, 200.0, ellipse=ell if calibrated else None)
            out.append(dict(name=f"{true_name} {list(zone)}", truth=truth, image=pat.image, calibration=cal,
                            candidates=tuple(cands), calibrated=calibrated, tilt_deg=truth.tilt_deg,
                            distortion=level, beam_stop=stop is not None))
    return out, skipped, twins_left_out


def _indexable(v: np.ndarray) -> bool:
    from saed.vectors2d import spans_plane

    return len(v) >= 6 and spans_plane(v)  # the matcher's own test of a second row


def _is_truth(sol, truth, tables) -> bool:
    if sol.phase_name != truth.phase_name:
        return False
    pt = tables.table(sol.phase_name)
    return pt.canonical_zone(sol.zone_axis) == pt.canonical_zone(truth.zone_axis)


def accuracy_report(*, seed: int = 2024, per_phase: int = ZONES_PER_PHASE, progress=None) -> dict:
    """Measure and index every generated frame; pooled numbers, confusions and per-case rows."""
    from saed.crystal import builtin_phase
    from saed.image.measure import measure_pattern
    from saed.index import index_pattern, prepare_phases

    frames, skipped, twins = accuracy_cases(seed=seed, per_phase=per_phase)
    tables_cache = {}
    tally = {True: Counter(), False: Counter()}
    d_err, a_err, s_err = [], [], []
    confusions = Counter()
    rows = []
    for i, f in enumerate(frames):
        if progress:
            progress(i, len(frames), f["name"])
        key = f["candidates"]
        if key not in tables_cache:
            tables_cache[key] = prepare_phases([builtin_phase(n) for n in key])
        tables = tables_cache[key]
        measured = measure_pattern(f["image"], f["calibration"])
        res = index_pattern(measured, tables, top=5)
        truth = f["truth"]
        rank = next((j + 1 for j, s in enumerate(res.solutions) if _is_truth(s, truth, tables)), None)
        best = res.best
        # named: the truth is listed as an ambiguous or identical-geometry look-alike of a solution above it
        above = res.solutions[: (rank - 1) if rank else len(res.solutions)]
        named = rank != 1 and any(lk.relation in ("ambiguous", "identical geometry") and lk.phase_name == truth.phase_name
                                  for s in above for lk in s.lookalikes)
        t = tally[f["calibrated"]]
        t["n"] += 1
        t["top1"] += rank == 1
        t["top3"] += rank is not None and rank <= 3
        t["top1_or_named"] += rank == 1 or named
        if rank is not None:
            sol = res.solutions[rank - 1]
            if f["calibrated"]:
                d_err.append(sol.mean_d_error_pct)
                a_err.append(sol.mean_angle_error_deg)
            else:
                s_err.append(100.0 * abs(sol.scale_inv_nm_per_px / truth.scale_inv_nm_per_px - 1.0))
        if rank != 1:
            found = f"{best.phase_name} {list(best.zone_axis)}" if best is not None else "nothing"
            confusions[(f["name"] + (" (uncal)" if not f["calibrated"] else ""), found)] += 1
        rows.append(f"{f['name']:<22} {'cal' if f['calibrated'] else 'uncal':<5} tilt {f['tilt_deg']:.2f} "
                    f"ellipse {f['distortion']:.3f} stop {'y' if f['beam_stop'] else 'n'} spots {len(measured.spots):3d} "
                    f"rank {rank if rank else '-'}" + (" (named as ambiguous)" if named else "")
                    + ("" if rank == 1 else f" best {best.phase_name + ' ' + str(list(best.zone_axis)) if best else res.message}"))
    n = len(frames)
    if progress:
        progress(n, n, "done")
    cal, unc = tally[True], tally[False]
    both = cal + unc

    def frac(c, k):
        return c[k] / c["n"] if c["n"] else float("nan")

    return {
        "n_patterns": n,
        "n_calibrated": cal["n"],
        "top1": frac(both, "top1"),
        "top3": frac(both, "top3"),
        "top1_calibrated": frac(cal, "top1"),
        "top3_calibrated": frac(cal, "top3"),
        "top1_uncalibrated": frac(unc, "top1"),
        "top3_uncalibrated": frac(unc, "top3"),
        "top1_or_named_ambiguous": frac(both, "top1_or_named"),
        "mean_d_error_pct": float(np.mean(d_err)) if d_err else float("nan"),
        "max_d_error_pct": float(np.max(d_err)) if d_err else float("nan"),
        "mean_angle_error_deg": float(np.mean(a_err)) if a_err else float("nan"),
        "max_angle_error_deg": float(np.max(a_err)) if a_err else float("nan"),
        "median_scale_error_pct_uncal": float(statistics.median(s_err)) if s_err else float("nan"),
        "max_scale_error_pct_uncal": float(np.max(s_err)) if s_err else float("nan"),
        "uncal_scale_within_1pct": float(np.mean(np.array(s_err) <= 1.0)) if s_err else float("nan"),
        "confusions": dict(confusions),
        "skipped_not_indexable": skipped,
        "twins_left_out": sorted(set(twins)),
        "rows": rows,
    }


def _accuracy_fn(_state):
    rep = accuracy_report()
    return {k: (round(v, 4) if isinstance(v, float) else v) for k, v in rep.items()
            if k not in ("rows", "skipped_not_indexable", "twins_left_out")} | {
        "skipped_not_indexable": len(rep["skipped_not_indexable"]), "twins_left_out": ", ".join(rep["twins_left_out"])}


# ---------------------------------------------------------------------- speed
def _speed_setup(phase_names):
    import tifffile

    from saed.calibration import Calibration
    from saed.crystal import builtin_names, builtin_phase
    from saed.index import prepare_phases

    names = builtin_names() if phase_names is None else phase_names
    tmp, path, scale = speed_pattern_file()
    tables = prepare_phases([builtin_phase(n) for n in names], max_g_inv_nm=16.0)
    return tmp, path, tables, Calibration(scale, 200.0)


def speed_pattern_file():
    """(TemporaryDirectory, path, scale): the 2048 x 2048 16-bit TIFF of the speed cases (Co-hcp [2-1-10], beam stop)."""
    import tifffile

    from saed.crystal import builtin_phase
    from saed.synth.kinematic import synthetic_image
    from saed.synth.detector import BeamStop

    size = 2048
    scale = 13.0 / (0.46 * size)
    pat, _ = synthetic_image(builtin_phase("Co-hcp"), [2, -1, -1, 0], scale_inv_nm_per_px=scale, in_plane_rotation_deg=23.0,
                             tilt_deg=0.4, tilt_toward_hkl=[0, 1, 1], image_shape=(size, size), max_g_inv_nm=13.0,
                             double_diffraction=0.004, beam_stop=BeamStop(angle_deg=225, width_px=40), rng=5)
    tmp = tempfile.TemporaryDirectory()
    path = Path(tmp.name) / "pattern.tif"
    tifffile.imwrite(path, pat.image)
    return tmp, path, scale


def _speed_fn(state):
    from saed.image.measure import measure_file
    from saed.index import index_pattern

    _tmp, path, tables, cal = state
    res = index_pattern(measure_file(path, cal), tables)
    b = res.best
    return {"best": f"{b.phase_name} {list(b.zone_axis_4 or b.zone_axis)}" if b else res.message,
            "phases": len(tables)}


def _match_setup(uncalibrated: bool):
    from saed.calibration import Calibration
    from saed.image.measure import measure_file

    tmp, path, tables, cal = _speed_setup(None)
    measured = measure_file(path, Calibration(None, 200.0) if uncalibrated else cal)
    return tmp, measured, tables


def _match_fn(state):
    from saed.index import index_pattern

    _tmp, measured, tables = state
    res = index_pattern(measured, tables)
    return {"candidates": res.n_candidates}


TEN_PHASES = ("Co-fcc", "Co-hcp", "Cr", "Ni", "Ni3Al", "NiAl", "Fe-bcc", "Al", "Si", "Ti-hcp")


def cases():
    return [
        Case("index: 2048x2048 TIFF -> solutions, 10 phases", lambda: _speed_setup(TEN_PHASES), _speed_fn,
             target_s=0.5, repeat=7),
        Case("index: 2048x2048 TIFF -> solutions, whole library (45)", lambda: _speed_setup(None), _speed_fn,
             target_s=1.5, repeat=5),
        Case("index: matcher only, whole library, calibrated", lambda: _match_setup(False), _match_fn, repeat=7),
        Case("index: matcher only, whole library, uncalibrated", lambda: _match_setup(True), _match_fn, repeat=5),
        Case("index: accuracy on the generated set (512x512 frames)", lambda: None, _accuracy_fn, repeat=1, warmup=0,
             note="time = one pass over all frames"),
    ]


def main() -> None:  # pragma: no cover - a report for people
    rep = accuracy_report()
    for r in rep["rows"]:
        print(r)
    print()
    for k, v in rep.items():
        if k in ("rows",):
            continue
        if k == "confusions":
            print("confusions:")
            for (a, b), c in sorted(v.items()):
                print(f"  {a:<24} -> {b}  x{c}")
            continue
        print(f"{k}: {v if not isinstance(v, float) else round(v, 4)}")


if __name__ == "__main__":  # pragma: no cover
    main()
