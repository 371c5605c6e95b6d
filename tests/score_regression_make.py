"""Write tests/data/score_regression.json.gz: what score_candidate returned before it was vectorised.

Why this file exists: issue 16 item 6 and issue 14 rewrote :func:`saed.index.score.score_candidate`
(named steps, no per-spot Python loop) under the rule that the answers must not change. This
script was run ONCE on the per-spot-loop version (main at f6ba33b, 2 Dec 2026) and its output is
the regression fixture of tests/test_score_regression.py. It is a record of behaviour, not a check
of correctness: the physics of the scorer is checked elsewhere (test_index.py against standard
patterns). Re-run it only to re-record after a deliberate change of the scorer's answers, and say
so in the commit.

The spot lists are built here from :func:`saed.simulate.zone.zone_pattern` with noise, an
unrecorded projector ellipse, a centre offset, extra unexplained spots and, for fcc [111], spots at
the 1/3{422} positions, so that every branch of the scorer (allowed, double diffraction, forbidden,
higher-order Laue-zone projections weak and strong, unindexed, fitted distortion, centre shift,
scale clamp) is exercised. The candidates come from :func:`saed.index.candidates.find_candidates`;
the fixture stores them, and the spot sets, as plain numbers, so the test depends on neither.

Run: PYTHONPATH=$PWD /work/venv/bin/python tests/score_regression_make.py
"""

from __future__ import annotations

import gzip
import json
import math
from pathlib import Path

import numpy as np

from saed.calibration import Calibration
from saed.crystal import builtin_phase
from saed.image.values import MeasuredPattern, Spots
from saed.index.candidates import find_candidates, spot_set
from saed.index.match import RATIO_TOL, REL_POS_TOL
from saed.index.score import score_candidate
from saed.index.tables import prepare_phases
from saed.simulate.zone import zone_pattern

OUT = Path(__file__).with_name("data") / "score_regression.json.gz"
PHASES = ("Co-fcc", "Co-hcp", "Cr", "Si", "TiO2-rutile")
SHAPE = (512, 512)

#: (phase, zone, scale 1/nm per px, rotation deg, calibrated, ellipse ratio, centre offset px, extra spots, holz)
CASES = (
    ("Co-fcc", (0, 0, 1), 0.060, 17.0, True, 1.0, (0.0, 0.0), 0, False),
    ("Co-fcc", (0, 1, 1), 0.055, 101.0, True, 1.02, (1.6, -0.8), 2, False),
    ("Co-fcc", (1, 1, 1), 0.050, 233.0, True, 1.0, (0.0, 0.0), 1, True),
    ("Co-fcc", (1, 1, 2), 0.045, 64.0, False, 1.0, (0.4, 0.3), 0, False),
    ("Co-hcp", (1, 0, 0), 0.055, 12.0, True, 1.0, (0.0, 0.0), 1, False),
    ("Co-hcp", (0, 0, 1), 0.050, 300.0, False, 1.015, (0.0, 0.0), 0, False),
    ("Co-hcp", (1, -1, 0), 0.060, 45.0, True, 1.0, (-1.2, 2.0), 3, False),
    ("Cr", (0, 0, 1), 0.050, 77.0, True, 1.0, (0.0, 0.0), 0, False),
    ("Cr", (1, 1, 1), 0.045, 150.0, False, 1.0, (0.0, 0.0), 2, False),
    ("Si", (0, 1, 1), 0.050, 200.0, True, 1.0, (0.0, 0.0), 0, False),
    ("TiO2-rutile", (0, 0, 1), 0.040, 33.0, True, 1.0, (0.5, 0.0), 1, False),
    ("TiO2-rutile", (1, 0, 0), 0.045, 280.0, False, 1.01, (0.0, 0.0), 0, False),
)


def _pattern(case, rng):
    name, zone, scale, rot_deg, calibrated, ratio, offset, n_extra, holz = case
    ph = builtin_phase(name)
    zp = zone_pattern(ph, zone, voltage_kv=200.0, max_g_inv_nm=12.0, include_holz=False, thickness_nm=50.0)
    # every reflection, forbidden ones included (weak): double diffraction and the "forbidden" kind
    keep = np.ones(len(zp.hkl), bool)
    xy = np.asarray(zp.xy_inv_nm)[keep]
    inten = np.where(zp.kinematically_forbidden[keep], 0.02, np.asarray(zp.f_abs)[keep] ** 2)
    c, s = math.cos(math.radians(rot_deg)), math.sin(math.radians(rot_deg))
    v = xy @ np.array([[c, -s], [s, c]]).T / scale
    if holz:  # fcc [111]: the 1/3{422} positions, one bright and the rest faint
        g = v[np.argsort(np.linalg.norm(v, axis=1))[:6]]
        g = g[np.argsort(np.arctan2(g[:, 1], g[:, 0]))]  # neighbours in angle: (g + g') / 3 is a 1/3{422}
        third = (g + np.roll(g, 1, axis=0)) / 3.0
        extra = third[:4]
        v = np.vstack([v, extra])
        inten = np.concatenate([inten, [inten.max() * 0.5] + [inten.max() * 0.003] * (len(extra) - 1)])
    if n_extra:
        v = np.vstack([v, rng.uniform(-200, 200, (n_extra, 2))])
        inten = np.concatenate([inten, rng.uniform(0.05, 0.3, n_extra) * inten.max()])
    if ratio != 1.0:  # an ellipse the calibration does not state (area-preserving, long axis at 30 deg)
        t = math.radians(30.0)
        rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
        v = v @ rot @ np.diag([math.sqrt(ratio), 1 / math.sqrt(ratio)]) @ rot.T
    v = v + rng.normal(0.0, 0.25, v.shape) + np.asarray(offset)[None, :]
    inten = inten * rng.uniform(0.7, 1.3, len(inten)) * 1e4
    r = np.linalg.norm(v, axis=1)
    centre = (255.3, 256.6)
    inside = (r > 4) & (np.abs(v[:, 0] + centre[0] - 256) < 250) & (np.abs(v[:, 1] + centre[1] - 256) < 250)
    v, inten = v[inside], inten[inside]
    sig = rng.uniform(0.15, 0.5, len(v))
    spots = Spots(v[:, 0] + centre[0], v[:, 1] + centre[1], inten, sigma_xy_px=sig)
    cal = Calibration(scale * (1.004 if calibrated else 1.0) if calibrated else None, 200.0)
    return MeasuredPattern(SHAPE, centre, spots, None, cal, center_sigma_px=0.4), ph


def _num(x):
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else repr(x)


def _record(sol, fit):
    spots = [[s.spot_index, str(s.kind), s.hkl, s.hkil, _num(s.d_nm_measured), _num(s.d_nm_calc), _num(s.residual_px),
              _num(s.intensity_calc), s.projected_hkl, s.projected_denominator, _num(s.x_px), _num(s.y_px),
              _num(s.intensity)] for s in sol.indexed]
    return dict(
        phase=sol.phase_name, zone=list(sol.zone_axis), zone4=sol.zone_axis_4, score=sol.score,
        rotation_deg=sol.in_plane_rotation_deg, scale=sol.scale_inv_nm_per_px,
        u=np.asarray(sol.orientation_matrix).tolist(), terms=[[k, _num(v)] for k, v in sol.terms],
        mean_d_error_pct=_num(sol.mean_d_error_pct), mean_angle_error_deg=_num(sol.mean_angle_error_deg),
        camera_length_mm=_num(sol.implied_camera_length_mm), scale_error_pct=_num(sol.scale_error_pct),
        notes=list(sol.notes), spots=spots, predicted_xy_px=np.asarray(sol.predicted_xy_px).tolist(),
        predicted_hkl=np.asarray(sol.predicted_hkl).tolist(),
        predicted_intensity=np.asarray(sol.predicted_intensity).tolist(),
        predicted_kind=[str(k) for k in sol.predicted_kind],
        fit_phi_deg=fit.phi_deg, fit_scale=fit.scale, fit_assigned=np.asarray(fit.assigned).tolist(),
        fit_kinds=[str(k) for k in fit.kinds], fit_predicted_px=np.asarray(fit.predicted_px).tolist(),
        fit_seen=np.asarray(fit.seen).tolist(), fit_in_region=np.asarray(fit.in_region).tolist(),
        fit_holz_hkl=np.asarray(fit.holz_hkl).tolist(), fit_holz_xy_inv_nm=np.asarray(fit.holz_xy_inv_nm).tolist(),
    )


def main() -> None:
    rng = np.random.default_rng(20261202)
    tables = prepare_phases([builtin_phase(n) for n in PHASES], voltage_kv=200.0, max_g_inv_nm=16.0)
    out = dict(phases=list(PHASES), voltage_kv=200.0, max_g_inv_nm=16.0, shape=list(SHAPE), cases=[])
    for case in CASES:
        measured, _ = _pattern(case, rng)
        spots = spot_set(measured)
        scale = measured.calibration.scale_inv_nm_per_px
        cands, _ = find_candidates(tables, spots, scale_inv_nm_per_px=scale, length_tol=0.03, ratio_tol=RATIO_TOL,
                                   angle_tol_deg=2.0, rel_pos_tol=REL_POS_TOL)
        rows = []
        for k, c in enumerate(cands[:4]):
            # options as index_pattern (every candidate), the look-alike probe (tight tolerance) and no distortion
            opts = [dict(length_tol=0.03, pixel_pitch_um=None, allow_distortion=True)]
            if k == 0:
                opts += [dict(length_tol=0.01, pixel_pitch_um=15.0, allow_distortion=True),
                         dict(length_tol=0.03, pixel_pitch_um=None, allow_distortion=False)]
            for o in opts:
                sol, fit = score_candidate(c, tables, spots, measured, calibrated_scale=scale, rel_pos_tol=REL_POS_TOL,
                                           **o)
                rows.append(dict(options=o, candidate=dict(
                    phase_index=c.phase_index, i1=c.i1, i2=c.i2, zone_axis=list(c.zone_axis),
                    canonical_zone=list(c.canonical_zone), u_matrix=np.asarray(c.u_matrix).tolist(),
                    scale=c.scale_inv_nm_per_px, quick=c.quick), expected=_record(sol, fit)))
        out["cases"].append(dict(
            name=f"{case[0]} {list(case[1])}", center_px=list(measured.center_px),
            center_sigma_px=measured.center_sigma_px, calibrated_scale=scale,
            spots=dict(x_px=measured.spots.x_px.tolist(), y_px=measured.spots.y_px.tolist(),
                       intensity=measured.spots.intensity.tolist(), sigma_xy_px=measured.spots.sigma_xy_px.tolist()),
            spot_set={k: np.asarray(getattr(spots, k)).tolist() for k in
                      ("v_px", "r_px", "intensity", "weight", "sigma_px", "strong", "v_seed_px", "on_lattice")},
            scored=rows))
        print(f"{case[0]} {case[1]}: {len(measured.spots)} spots, {len(cands)} candidates, "
              f"best {max((r['expected']['score'] for r in rows), default=0):.3f}")
    OUT.write_bytes(gzip.compress((json.dumps(out, separators=(",", ":")) + "\n").encode(), mtime=0))
    print(f"wrote {OUT} ({OUT.stat().st_size // 1024} KiB)")


if __name__ == "__main__":
    main()
