"""Calibration from a single-crystal zone-axis pattern of a known standard (e.g. Si [011]).

The image stage measures the spots and their reduced 2-D lattice basis g1, g2 in pixels
(:func:`saed.image.measure.measure_pattern`); the simulated zone pattern of the standard
(:func:`saed.simulate.zone.zone_pattern`) gives the reciprocal lattice of the zone in 1/nm: every
zero-order reflection that is allowed or excited by double diffraction (Si 200 in [011]). A basis
(h1, h2) of that lattice is matched to (g1, g2) by the ratio |g2|/|g1| and the angle; the
correspondence that needs the least distortion wins. Then the linear map A with h = A p is fitted
by least squares to every lattice spot p (px from the centre). Its polar decomposition A = R S
gives the scale sqrt(det S) (area-preserving convention of :class:`saed.calibration.Ellipse`) and
the projector ellipse (axis ratio = ratio of the eigenvalues of S; the long axis of a ring on the
detector along the eigenvector of the smaller one). The decomposition is :func:`scipy.linalg.polar`.

Fractions are named ``_frac`` (0.01 = 1 %) and percentages ``_pct``; the public ``tol_rel`` and
``scale_sigma_rel`` are fractions too (the name the ring calibration shares).
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass, field

import numpy as np

from scipy.linalg import polar

from saed import physics
from saed.calibration import Calibration, Ellipse
from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.units import percent, percent_off

__all__ = ["ZoneCalibration", "calibrate_from_zone", "zone_lattice_basis"]

#: Largest misfit of |g2|/|g1| (relative) and of the angle (deg) between the measured and the zone's basis.
RATIO_TOL_FRAC = 0.03
ANGLE_TOL_DEG = 3.0
#: Reach of the standard's simulated zone, 1/nm: the lattice spots of a calibration pattern lie within it.
ZONE_MAX_G_INV_NM = 20.0
#: Shortest reflections of the zone tried as basis vectors (pairs of them are the candidate bases).
N_SHORT_REFLECTIONS = 24
#: A candidate basis must span a whole number of the zone's primitive cells, to this fraction.
CELL_AREA_TOL_FRAC = 0.02
#: Largest axis ratio accepted for the projector ellipse: beyond it the standard or zone is wrong.
MAX_AXIS_RATIO = 1.5
#: Median fraction of the circle each ring covers above which the image is a ring pattern.
RING_PATTERN_COVERAGE_FRAC = 0.7


@dataclass(frozen=True)
class ZoneCalibration:
    """A calibration from a zone pattern: ``ring_rows`` are the lattice spots used
    (radius_px, hkl, d_nm standard, d_nm measured, misfit %), as for ring calibrations."""

    calibration: Calibration
    measured: object
    zone_axis: tuple[int, ...]
    basis_hkl: tuple[tuple[int, ...], tuple[int, ...]]
    residual_pct: float
    scale_sigma_rel: float
    ring_rows: tuple[tuple, ...]
    notes: tuple[str, ...] = field(default=())


def zone_lattice_basis(zp) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Visible zero-order reflections of `zp` (allowed or double diffraction): (xy_inv_nm (n, 2), hkl (n, 3),
    index of h1, index of h2) with (h1, h2) a reduced basis of their lattice (h1 shortest)."""
    vis = zp.zolz & (zp.allowed | zp.double_diffraction)
    xy = zp.xy_inv_nm[vis]
    hkl = zp.hkl[vis]
    g = np.hypot(xy[:, 0], xy[:, 1])
    keep = g > 1e-9
    xy, hkl, g = xy[keep], hkl[keep], g[keep]
    if len(g) < 2:
        raise InputError(f"{zp.phase.name} [{' '.join(str(int(v)) for v in zp.zone_axis)}]: fewer than two "
                         "reflections within reach; no 2-D lattice to calibrate with")
    order = np.argsort(g, kind="stable")
    i1 = int(order[0])
    for j in order[1:]:
        cross = abs(xy[i1, 0] * xy[j, 1] - xy[i1, 1] * xy[j, 0])
        if cross > 1e-6 * g[i1] * g[j]:
            i2 = int(j)
            break
    else:
        raise InputError(f"{zp.phase.name}: the reflections of this zone are all on one line")
    if xy[i1] @ xy[i2] < 0:
        xy_flip = -xy[i2]
        match = np.nonzero(np.all(np.abs(xy - xy_flip) < 1e-9, axis=1))[0]
        if len(match):
            i2 = int(match[0])
    return xy, hkl, i1, i2


def _refuse_ring_pattern(image, mask) -> None:
    """InputError if `image` is a ring pattern (rings all round the circle): --zone is then wrong."""
    from saed.errors import SaedError
    from saed.rings.measure import measure_rings

    try:
        m = measure_rings(image, mask=mask)
    except SaedError:
        return
    cov = m.coverage[np.isfinite(m.coverage)]
    if len(cov) and float(np.median(cov)) > RING_PATTERN_COVERAGE_FRAC:
        raise InputError(f"this is a ring pattern ({len(m.rings)} rings, each seen all round): drop --zone to "
                         "calibrate from the rings")


def _ratio_angle(a, b) -> tuple[float, float]:
    na, nb = math.hypot(*a), math.hypot(*b)
    ang = math.degrees(math.atan2(abs(a[0] * b[1] - a[1] * b[0]), a[0] * b[0] + a[1] * b[1]))
    return nb / na, ang


def calibrate_from_zone(image, standard: Phase, zone_axis, *, voltage_kv: float = 200.0,
                        pixel_pitch_um: float | None = None, mask=None, center_px=None, tol_rel: float = 0.01,
                        date: str | None = None) -> ZoneCalibration:
    """Calibrate the detector from a zone-axis pattern of `standard` (module notes).

    Raises
    ------
    ImageError, InputError
        no 2-D lattice in the image, or one that does not match the standard's zone.
    """
    from saed.image.measure import measure_pattern
    from saed.simulate.zone import zone_pattern

    v = physics.check_voltage_kv(voltage_kv)
    hint = Calibration(voltage_kv=v, center_px=tuple(center_px) if center_px is not None else None)
    mp = measure_pattern(np.asarray(image, dtype=np.float32), hint, mask=mask)
    if mp.basis is None:
        _refuse_ring_pattern(image, mask)
        raise InputError(f"found {len(mp.spots)} spots but no 2-D lattice: a zone calibration needs a single-crystal "
                         "pattern with at least two independent reflections (a ring pattern? drop --zone)")
    g1, g2 = np.asarray(mp.basis.g1_px, float), np.asarray(mp.basis.g2_px, float)
    ratio_m, angle_m = _ratio_angle(g1, g2)
    zp = zone_pattern(standard, zone_axis, voltage_kv=v, max_g_inv_nm=ZONE_MAX_G_INV_NM, include_holz=False)
    xy, hkl, i1, i2 = zone_lattice_basis(zp)
    zone_str = " ".join(str(int(u)) for u in zp.zone_axis)
    # Candidate bases of the zone lattice: short vectors pairs with the measured ratio and angle.
    g = np.hypot(xy[:, 0], xy[:, 1])
    short = np.argsort(g)[: min(len(g), N_SHORT_REFLECTIONS)]
    cands = []
    for a in short:
        for b in short:
            if a == b:
                continue
            r, ang = _ratio_angle(xy[a], xy[b])
            if abs(r / ratio_m - 1) <= RATIO_TOL_FRAC and abs(ang - angle_m) <= ANGLE_TOL_DEG:
                cands.append((a, b))
    if not cands:
        _refuse_ring_pattern(image, mask)
        r0, a0 = _ratio_angle(xy[i1], xy[i2])
        raise InputError(
            f"the pattern's lattice (|g2|/|g1| = {ratio_m:.3f}, angle {angle_m:.1f} deg) does not match {standard.name} "
            f"[{zone_str}] ({''.join(str(int(v)) for v in hkl[i1])} / {''.join(str(int(v)) for v in hkl[i2])}: "
            f"ratio {r0:.3f}, angle {a0:.1f} deg); check --standard and --zone"
        )
    on = np.asarray(mp.basis.on_lattice, bool)
    idx = np.asarray(mp.basis.indices)[on]
    p = mp.spot_vectors_px()[on]
    if len(p) < 2:
        raise InputError("fewer than two spots on the pattern's lattice: cannot calibrate")
    # The measured basis is a primitive basis of the spots found: prefer zone bases of the smallest cell
    # (a basis of a similar sub-lattice, e.g. 4-22 / 42-2 for 11-1 / 1-11, fits as well, scaled).
    cell = abs(xy[i1, 0] * xy[i2, 1] - xy[i1, 1] * xy[i2, 0])
    best = None
    for a, b in cands:
        area = abs(xy[a, 0] * xy[b, 1] - xy[a, 1] * xy[b, 0]) / cell
        if abs(area - round(area)) > CELL_AREA_TOL_FRAC * area:
            continue
        h = idx[:, :1] * xy[a][None, :] + idx[:, 1:] * xy[b][None, :]
        a_map, *_ = np.linalg.lstsq(p, h, rcond=None)  # h = p @ a_map, i.e. A = a_map.T
        a_mat = a_map.T
        if np.linalg.det(a_mat) <= 0:
            continue
        s_vals = np.linalg.svd(a_mat, compute_uv=False)
        distortion = s_vals[0] / s_vals[1]
        resid = np.linalg.norm(p @ a_map - h, axis=1) / np.maximum(np.linalg.norm(h, axis=1), 1e-12)
        key = (int(round(area)), round(distortion, 4), float(np.sqrt(np.mean(resid**2))))
        if best is None or key < best[0]:
            best = (key, a, b, a_mat, resid, h)
    if best is None:
        raise InputError(f"no basis of {standard.name} [{zone_str}] maps onto the pattern without a mirror: "
                         "is the image flipped?")
    _, a, b, a_mat, resid, h = best
    _, s_sym = polar(a_mat, side="right")  # A = R S, S symmetric positive-definite
    evals, evecs = np.linalg.eigh(s_sym)
    scale = float(math.sqrt(evals[0] * evals[1]))
    q = float(evals[1] / evals[0])
    major = evecs[:, 0]  # smallest eigenvalue: fewest 1/nm per px, the ring's long axis
    angle = math.degrees(math.atan2(major[1], major[0])) % 180.0
    notes = []
    if q > MAX_AXIS_RATIO:
        raise InputError(f"the pattern is distorted by {percent(q - 1):.0f} % against {standard.name} [{zone_str}]: "
                         "wrong standard or zone?")
    ellipse = Ellipse(q, angle)
    residual_frac = float(np.sqrt(np.mean(resid**2)))
    residual_pct = percent(residual_frac)
    if residual_frac > tol_rel:
        notes.append(f"spot misfit {residual_pct:.2f} % exceeds the tolerance {percent(tol_rel):.2f} %: a tilted or bent "
                     "crystal, or a poor centre")
    n = len(p)
    scale_sigma_frac = residual_frac / math.sqrt(n - 4) if n > 4 else residual_frac
    if n < 8:
        notes.append(f"only {n} lattice spots: the ellipse from a single crystal is uncertain")
    rows = []
    corr_vec = np.stack(ellipse.corrected_px(p[:, 0], p[:, 1]), axis=-1)
    r_corr = np.hypot(corr_vec[:, 0], corr_vec[:, 1])
    for k in np.argsort(r_corr):
        lab = idx[k, 0] * hkl[a] + idx[k, 1] * hkl[b]
        hk = "".join(str(int(v)) if v >= 0 else f"-{-int(v)}" for v in lab)
        d_std = 1.0 / float(np.hypot(*h[k]))
        d_meas = 1.0 / (r_corr[k] * scale)
        rows.append((float(r_corr[k]), hk, float(d_std), float(d_meas), float(percent_off(d_std, d_meas))))
    if date is None:
        date = _dt.datetime.now().astimezone().isoformat(timespec="seconds")
    cal = Calibration(scale_inv_nm_per_px=scale, voltage_kv=v, center_px=mp.center_px, ellipse=ellipse,
                      pixel_pitch_um=pixel_pitch_um, standard=standard.name, date=date, source="zone")
    basis = (tuple(int(x) for x in hkl[a]), tuple(int(x) for x in hkl[b]))
    return ZoneCalibration(cal, mp, tuple(int(u) for u in zp.zone_axis), basis, residual_pct, scale_sigma_frac,
                           tuple(rows), tuple(notes))
