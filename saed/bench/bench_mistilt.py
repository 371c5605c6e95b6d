"""Mistilt benchmark: the Laue-circle fit on simulated tilted patterns with known beam tilt.

Each case is a kinematic pattern of :func:`saed.simulate.zone.zone_pattern` with the beam tilted
by a known angle toward a random zero-order reflection (thickness-averaged sinc^2 shape factor,
a random foil thickness 30-120 nm), rendered by :func:`saed.synth.zone.detector_image`
with Poisson noise, a log-normal intensity disorder of 0.3 on every reflection (dynamical-like
departures from the kinematic intensities) and a random in-plane rotation, then measured by the image stage and indexed
against the true phase. The estimate is compared with the truth: the
ratio estimate / true tilt, and the azimuth error of the Laue-circle centre.

This study is the calibration behind :data:`saed.index.mistilt.RELIABLE_TILT_RANGE_DEG` and the
uncertainty the estimate reports. ``python -m saed.bench.bench_mistilt`` prints the full table.
"""

from __future__ import annotations

import math
import statistics
from dataclasses import replace

import numpy as np

from saed.bench import Case

__all__ = ["study", "report", "cases", "ZONES", "TILTS_DEG"]

#: (phase, zone) pairs of the study: cubic and hexagonal, low and higher index.
ZONES = (("Co-fcc", (0, 1, 1)), ("Co-fcc", (0, 0, 1)), ("Co-fcc", (1, 1, 2)), ("Co-fcc", (1, 1, 1)),
         ("Co-hcp", (0, 0, 1)), ("Co-hcp", (1, 0, 0)), ("Co-hcp", (2, 1, 0)), ("Fe-bcc", (0, 0, 1)),
         ("Fe-bcc", (1, 1, 1)), ("Ni3Al", (0, 1, 1)))

#: True beam tilts of the study, degrees.
TILTS_DEG = (0.0, 0.2, 0.4, 0.6, 0.8, 1.0, 1.25, 1.5, 2.0, 2.5)


def _one(phase, zone, tilt_deg, rng, *, scale=0.02, size=1024, disorder=0.3):
    from saed.calibration import Calibration
    from saed.image.measure import measure_pattern
    from saed.index import index_pattern, prepare_phases
    from saed.synth.zone import detector_image
    from saed.simulate.zone import zone_pattern

    z0 = zone_pattern(phase, zone, max_g_inv_nm=9.0, include_holz=False)
    low = np.flatnonzero(~z0.kinematically_forbidden & (z0.g_inv_nm > 0) & (z0.g_inv_nm < 8.5))
    toward = tuple(int(v) for v in z0.hkl[rng.choice(low)])
    thickness = float(rng.uniform(30.0, 120.0))
    zp = zone_pattern(phase, zone, max_g_inv_nm=9.0, include_holz=False, thickness_nm=thickness,
                      tilt_deg=float(tilt_deg) if tilt_deg > 0 else 0.0,
                      tilt_toward_hkl=toward if tilt_deg > 0 else None)
    rot = float(rng.uniform(0, 360))
    if disorder > 0:  # dynamical-like departures from the kinematic intensities
        zp = replace(zp, intensity=np.asarray(zp.intensity) * np.exp(rng.normal(0.0, disorder, len(zp.intensity))))
    img = detector_image(zp, shape_px=(size, size), scale_inv_nm_per_px=scale, in_plane_rotation_deg=rot,
                         noise=True, rng=rng)
    tables = prepare_phases([phase], max_g_inv_nm=9.5)
    measured = measure_pattern(img.image, Calibration(scale, 200.0))
    res = index_pattern(measured, tables, lookalikes=False, top=1)
    if res.best is None or res.best.mistilt is None:
        return None
    mt = res.best.mistilt
    true_az = math.degrees(math.atan2(*(zp.laue_circle_center_xy_inv_nm[::-1]))) + rot if tilt_deg > 0 else 0.0
    return {"phase": phase.name, "zone": zone, "true_deg": float(tilt_deg), "est_deg": mt.tilt_deg,
            "sigma_deg": mt.tilt_sigma_deg, "reliable": mt.reliable,
            "az_err_deg": ((mt.laue_center_azimuth_deg - true_az + 180.0) % 360.0) - 180.0, "thickness_nm": thickness}


def study(*, seed: int = 7, zones=ZONES, tilts=TILTS_DEG) -> list[dict]:
    """Run the study: one record per (zone, tilt) with the truth and the estimate."""
    from saed.crystal import builtin_phase

    rng = np.random.default_rng(seed)
    out = []
    for name, zone in zones:
        ph = builtin_phase(name)
        for t in tilts:
            r = _one(ph, zone, t, rng)
            if r is not None:
                out.append(r)
    return out


def report(records: list[dict]) -> dict:
    """Summary numbers: per tilt band the share within 25 %, the median ratio, azimuth error, coverage."""
    out = {}
    bands = ((0.0, 0.1), (0.1, 0.35), (0.35, 0.7), (0.7, 1.3), (1.3, 2.6))
    for lo, hi in bands:
        sel = [r for r in records if lo <= r["true_deg"] < hi]
        if not sel:
            continue
        rel = [r for r in sel if r["reliable"]]
        if lo == 0.0:
            within = [abs(r["est_deg"]) <= 0.25 for r in rel]
            key = "on zone (true 0): est <= 0.25 deg"
        else:
            within = [abs(r["est_deg"] / r["true_deg"] - 1.0) <= 0.25 for r in rel]
            key = f"true {lo:g}-{hi:g} deg: within 25 %"
        cover = [abs(r["est_deg"] - r["true_deg"]) <= 2 * max(r["sigma_deg"], 1e-9) for r in sel]
        ratios = [r["est_deg"] / r["true_deg"] for r in sel if r["true_deg"] > 0]
        az = [abs(r["az_err_deg"]) for r in sel if r["true_deg"] > 0]
        out[key] = (f"{sum(within)}/{len(rel)} of those marked reliable ({len(sel)} in all); "
                    + (f"median ratio {statistics.median(ratios):.2f}, " if ratios else "")
                    + (f"median azimuth error {statistics.median(az):.0f} deg, " if az else "")
                    + f"truth within 2 sigma {sum(cover)}/{len(sel)}")
    return out


def _case_fn(_):
    recs = study(zones=ZONES[:4], tilts=(0.0, 0.5, 1.0, 2.0))
    return report(recs)


def cases() -> list[Case]:
    return [Case("mistilt accuracy: 16 simulated tilted 1024^2 patterns", lambda: None, _case_fn, repeat=1,
                 warmup=0, note="accuracy in the lines below; time is for all 16")]


if __name__ == "__main__":  # pragma: no cover
    recs = study()
    for r in recs:
        print(f"{r['phase']:8} {str(r['zone']):10} true {r['true_deg']:4.2f}  est {r['est_deg']:5.2f} "
              f"+- {r['sigma_deg']:4.2f}  az err {r['az_err_deg']:6.1f}  t {r['thickness_nm']:5.1f}  "
              f"{'reliable' if r['reliable'] else '-'}")
    for k, v in report(recs).items():
        print(f"{k}: {v}")
