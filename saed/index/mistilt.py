"""Beam tilt off the zone axis from the spot intensities: a Laue-circle fit.

With the beam tilted by theta from the zone axis, the Ewald sphere cuts the zero-order Laue
zone in a circle through 000 (the Laue circle); a zero-order reflection g (detector-plane
vector, 1/nm) has the excitation error

    s_g = (2 c . g - |g|^2) / (2 k),      |c| = k sin(theta),

where c is the centre of the Laue circle and k = 1/lambda (small-angle form of the exact
geometry in :mod:`saed.simulate.zone`). Spots near the circle are bright. The fit models the
intensities with the same rocking curve saed's simulator uses, the foil shape factor
sinc^2(pi t s) averaged over a thickness range t (1 +/- 0.5) (:func:`saed.simulate.zone.shape_factor`):

    log I_g = log A + log |F_g|^2 + log <sinc^2(pi t s_g)>,

with A, c and the thickness t free, and minimises the absolute log residuals (robust: dynamical
intensities differ from the kinematic ones), first on a grid of (tilt, azimuth, t) (0.1 deg, 10 deg,
seven thicknesses 12-300 nm), then locally (Levenberg-Marquardt on the soft-L1 loss,
:mod:`saed.index.robust_lsq`).
An earlier version used a Gaussian rocking curve, which is much narrower in its tails than the
thickness-averaged sinc^2 (a power law, ~1 / (pi s t)^2): it came back up to 50 % off.

The uncertainty is the least-squares one (from the Jacobian at the optimum, robust residual
scale), multiplied by :data:`SIGMA_CALIBRATION` and floored at :data:`SIGMA_FLOOR_DEG`, so that the
truth falls within two sigma in about 95 % of the simulated tilts of :mod:`saed.bench.bench_mistilt`. The estimate is
marked ``reliable`` only where that benchmark found it within 25 % of the truth: tilts in
:data:`RELIABLE_TILT_RANGE_DEG`, at least eight spots in more than one direction, and a
relative uncertainty of at most 20 %.

The correction is the rotation of the specimen by theta about the in-plane axis
perpendicular to c (right-handed about c x z), which moves the zone axis back onto the beam and
the Laue-circle centre back into 000.

References: Williams & Carter, *Transmission Electron Microscopy* (2009), ch. 12 and 17
(Laue circle, excitation error, the sinc^2 shape factor of a thin foil); Hirsch, Howie,
Nicholson, Pashley & Whelan, *Electron Microscopy of Thin Crystals* (1965), ch. 4; Edington,
vol. 2 (1975), ch. 2 (centring a zone from the intensity distribution).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from saed.index.robust_lsq import robust_least_squares
from saed.index.values import Mistilt, Solution
from saed.physics import electron_wavelength_nm
from saed.simulate.zone import shape_factor

__all__ = ["fit_laue_circle", "mistilt_of", "with_mistilt", "MAX_FIT_TILT_DEG", "RELIABLE_TILT_RANGE_DEG",
           "SIGMA_CALIBRATION"]

#: Largest tilt searched, degrees (beyond this the pattern no longer looks like a zone pattern).
MAX_FIT_TILT_DEG = 3.0

#: Below this tilt the pattern counts as on the zone (intensity fits cannot resolve less).
ON_ZONE_DEG = 0.15

#: Tilts (deg) for which the benchmark (saed/bench/bench_mistilt.py) found the estimate within 25 %.
RELIABLE_TILT_RANGE_DEG = (0.35, 2.6)

#: Factor on the least-squares uncertainty so that 2 sigma covers the truth in ~95 % of the benchmark.
SIGMA_CALIBRATION = 3.0

#: Floor of the uncertainty, deg + fraction of the tilt (the benchmark's scatter with intensity disorder).
SIGMA_FLOOR_DEG = (0.05, 0.07)

#: Range of the fitted foil thickness, log(nm) (5 to 600 nm).
LOG_T_RANGE = (math.log(5.0), math.log(600.0))

#: Thickness spread of the shape factor (as the simulator's default).
THICKNESS_SPREAD = 0.5


def _log_shape(s: np.ndarray, t_nm: float) -> np.ndarray:
    return np.log(np.maximum(shape_factor(s, t_nm, THICKNESS_SPREAD), 1e-12))


def fit_laue_circle(g_xy_inv_nm: np.ndarray, intensity: np.ndarray, kinematic: np.ndarray, *, voltage_kv: float):
    """Fit the Laue-circle centre c (1/nm, detector frame) to measured vs kinematic intensities.

    Parameters
    ----------
    g_xy_inv_nm : (n, 2) detector-plane positions of the indexed reflections (1/nm)
    intensity : (n,) measured intensities (> 0)
    kinematic : (n,) kinematic |F|^2 (any scale, > 0)
    voltage_kv : accelerating voltage

    Returns
    -------
    (c_xy_inv_nm, tilt_deg, gain, tilt_sigma_deg, thickness_nm) : the centre, the tilt angle, the
        fractional drop of the robust residual against an on-zone fit (0: no evidence of tilt,
        1: perfect), the calibrated one-sigma uncertainty of the tilt and the fitted thickness.
    """
    g = np.asarray(g_xy_inv_nm, float).reshape(-1, 2)
    y = np.log(np.asarray(intensity, float)) - np.log(np.asarray(kinematic, float))
    k = 1.0 / electron_wavelength_nm(voltage_kv)
    g2 = np.sum(g * g, axis=1)
    thick = np.geomspace(12.0, 300.0, 7)
    th = np.radians(np.linspace(0.0, MAX_FIT_TILT_DEG, 31))
    az = np.radians(np.arange(0.0, 360.0, 10.0))
    cr = (k * np.sin(th))[:, None] * np.ones_like(az)[None, :]
    cx = (cr * np.cos(az)[None, :]).ravel()
    cy = (cr * np.sin(az)[None, :]).ravel()
    s = (2.0 * (cx[:, None] * g[None, :, 0] + cy[:, None] * g[None, :, 1]) - g2[None, :]) / (2.0 * k)  # (m, n)

    def robust_cost(r):
        return np.sum(np.abs(r - np.median(r, axis=-1, keepdims=True)), axis=-1)

    best = (np.inf, 0, thick[0])
    for t in thick:
        c = robust_cost(y[None, :] - _log_shape(s, t))
        i = int(np.argmin(c))
        if c[i] < best[0]:
            best = (float(c[i]), i, t)

    def resid(p):
        c_vec, lt, la = p[:2], p[2], p[3]
        ss = (2.0 * (g @ c_vec) - g2) / (2.0 * k)
        return y - la - _log_shape(ss, math.exp(min(max(lt, LOG_T_RANGE[0]), LOG_T_RANGE[1])))

    def centred(p):  # residuals about their median: the offset that the robust cost ignores
        r = resid(p)
        return r - np.median(r)

    p0 = np.array([cx[best[1]], cy[best[1]], math.log(best[2]), 0.0])
    p0[3] = float(np.median(resid(p0)))
    x = robust_least_squares(resid, p0, f_scale=0.5, x_scale=np.array([0.5, 0.5, 0.3, 0.5]), max_iter=60)
    p = x if np.all(np.isfinite(x)) and robust_cost(centred(x)) <= best[0] + 1e-9 else p0
    c_vec = p[:2]
    tilt = math.degrees(math.asin(min(1.0, float(np.linalg.norm(c_vec)) / k)))
    if tilt > MAX_FIT_TILT_DEG * 1.2:
        p = p0
        c_vec = p0[:2]
        tilt = math.degrees(math.asin(min(1.0, float(np.linalg.norm(c_vec)) / k)))
    cost_fit = float(robust_cost(centred(p)))
    zero = np.zeros(len(g)) - g2 / (2.0 * k)
    cost0 = min(float(robust_cost(y - _log_shape(zero, t))) for t in thick)
    gain = 0.0 if cost0 <= 0 else max(0.0, 1.0 - cost_fit / cost0)
    sigma = _tilt_sigma_deg(resid, p, k)
    return c_vec, tilt, gain, sigma, float(math.exp(min(max(p[2], LOG_T_RANGE[0]), LOG_T_RANGE[1])))


def _tilt_sigma_deg(resid, p: np.ndarray, k: float) -> float:
    """Calibrated one-sigma uncertainty of the tilt from the Jacobian at the optimum (deg)."""
    r0 = resid(p)
    n = len(r0)
    if n <= len(p) + 1:
        return float("inf")
    m = len(p)
    jac = np.empty((n, m))
    for i in range(m):
        dp = np.zeros(m)
        h = 1e-4 * max(1.0, abs(p[i])) if i >= 2 else 1e-3
        dp[i] = h
        jac[:, i] = (resid(p + dp) - resid(p - dp)) / (2 * h)
    scale = 1.4826 * float(np.median(np.abs(r0 - np.median(r0))))  # robust sigma of the residuals
    try:
        cov = np.linalg.pinv(jac.T @ jac) * max(scale, 0.05) ** 2 * n / (n - m)
    except np.linalg.LinAlgError:
        return float("inf")
    c = p[:2]
    rad = float(np.linalg.norm(c))
    if rad > 1e-9:
        u = c / rad
        var_r = float(u @ cov[:2, :2] @ u)
    else:
        var_r = float(np.trace(cov[:2, :2]))
    sigma_c = math.sqrt(max(var_r, 0.0))
    tilt = math.degrees(math.asin(min(1.0, rad / k)))
    return max(SIGMA_CALIBRATION * math.degrees(sigma_c / k), SIGMA_FLOOR_DEG[0] + SIGMA_FLOOR_DEG[1] * tilt)


def mistilt_of(sol: Solution, *, voltage_kv: float, center_px, holder_alpha_axis_deg: float | None = None) -> Mistilt | None:
    """The beam tilt of a solution from its indexed spots, with the advice to the operator."""
    recs = [r for r in sol.indexed if r.kind == "allowed" and r.intensity_calc and r.intensity_calc > 1e-6
            and r.intensity > 0]
    if len(recs) < 6:
        return None
    cx, cy = center_px
    v = np.array([[r.x_px - cx, r.y_px - cy] for r in recs])
    ang = np.arctan2(v[:, 1], v[:, 0])
    spread = float(np.hypot(np.mean(np.cos(2 * ang)), np.mean(np.sin(2 * ang))))
    g = v * sol.scale_inv_nm_per_px
    c_vec, tilt, gain, sigma, _ = fit_laue_circle(g, np.array([r.intensity for r in recs]),
                                                  np.array([r.intensity_calc for r in recs]), voltage_kv=voltage_kv)
    lo, hi = RELIABLE_TILT_RANGE_DEG
    constrained = len(recs) >= 8 and spread < 0.9
    if tilt < ON_ZONE_DEG:
        reliable = constrained and sigma <= lo
    else:
        reliable = constrained and gain >= 0.15 and lo <= tilt <= hi and sigma <= 0.2 * tilt
    az = math.degrees(math.atan2(c_vec[1], c_vec[0])) % 360.0
    radius_px = float(np.linalg.norm(c_vec)) / sol.scale_inv_nm_per_px
    centre_px = (cx + c_vec[0] / sol.scale_inv_nm_per_px, cy + c_vec[1] / sol.scale_inv_nm_per_px)
    axis_az = (az - 90.0) % 360.0
    alpha = beta = None
    if holder_alpha_axis_deg is not None:
        a = math.radians(axis_az)
        omega = tilt * np.array([math.cos(a), math.sin(a)])
        ea = math.radians(float(holder_alpha_axis_deg))
        e_alpha = np.array([math.cos(ea), math.sin(ea)])
        e_beta = np.array([-math.sin(ea), math.cos(ea)])
        alpha, beta = float(omega @ e_alpha), float(omega @ e_beta)
    sig_txt = f"+/- {sigma:.1f}" if math.isfinite(sigma) and sigma < 10 else "uncertain"
    if tilt < ON_ZONE_DEG and reliable:
        advice = f"on the zone (beam tilt below {ON_ZONE_DEG:.2f} deg)"
    elif not reliable:
        why = ("too few or too symmetric spot intensities to fit the Laue circle" if not constrained else
               f"outside {lo:g}-{hi:g} deg, where the intensity fit is checked" if not lo <= tilt <= hi else
               "the spot intensities constrain it poorly")
        advice = f"beam tilt roughly {tilt:.1f} deg ({sig_txt} deg; not reliable: {why})"
    else:
        side = _compass(az)
        if alpha is not None:
            advice = (f"beam {tilt:.1f} {sig_txt} deg off the zone, brightest toward {side}: tilt alpha {alpha:+.1f} deg "
                      f"and beta {beta:+.1f} deg to centre the Laue circle (a right-handed turn of "
                      f"{tilt:.1f} deg about the in-plane axis at {axis_az:.0f} deg; check the holder's signs once)")
        else:
            advice = (f"beam {tilt:.1f} {sig_txt} deg off the zone, brightest toward {side} (azimuth {az:.0f} deg): tilt "
                      f"the specimen {tilt:.1f} deg about the in-plane axis at {axis_az:.0f} deg to centre the Laue "
                      "circle (give the holder's alpha-axis direction, --alpha-axis or in the calibration, for alpha/beta)")
    return Mistilt(tilt_deg=float(tilt), laue_center_azimuth_deg=float(az), laue_center_px=(float(centre_px[0]),
                   float(centre_px[1])), laue_radius_px=radius_px, correction_axis_deg=float(axis_az),
                   reliable=bool(reliable), advice=advice, alpha_deg=alpha, beta_deg=beta,
                   tilt_sigma_deg=float(sigma) if math.isfinite(sigma) else None)


def _compass(az_deg: float) -> str:
    """Screen direction of an azimuth measured from +x (right) toward +y (down)."""
    names = ["right", "lower right", "bottom", "lower left", "left", "upper left", "top", "upper right"]
    return names[int(((az_deg % 360.0) + 22.5) // 45.0) % 8]


def with_mistilt(sol: Solution, measured, tables, *, holder_alpha_axis_deg: float | None = None) -> Solution:
    """The solution with its :class:`Mistilt` filled in (unchanged when too few spots)."""
    mt = mistilt_of(sol, voltage_kv=tables.voltage_kv, center_px=measured.center_px,
                    holder_alpha_axis_deg=holder_alpha_axis_deg)
    if mt is None:
        return sol
    notes = sol.notes
    if mt.reliable and mt.tilt_deg >= ON_ZONE_DEG:
        notes = notes + (mt.advice,)
    return replace(sol, mistilt=mt, notes=notes)
