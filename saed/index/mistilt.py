"""Beam tilt off the zone axis from the spot intensities: a Laue-circle fit.

With the beam tilted by theta from the zone axis, the Ewald sphere cuts the zero-order Laue
zone in a circle through 000 (the Laue circle); a zero-order reflection g (detector-plane
vector, 1/nm) has the excitation error

    s_g = (2 c . g - |g|^2) / (2 k),      |c| = k sin(theta),

where c is the centre of the Laue circle and k = 1/lambda (small-angle form of the exact
geometry in :mod:`saed.simulate.zone`). Spots near the circle are bright. The fit models
log I_g = log A + log |F_g|^2 - (s_g / w)^2 (a Gaussian stand-in for the rocking curve of width
w) and minimises the absolute log residuals (robust: dynamical intensities differ from the
kinematic ones), first on a polar grid of c, then locally.

The correction is the rotation of the specimen by theta about the in-plane axis
perpendicular to c (right-handed about c x z), which moves the zone axis back onto the beam and
the Laue-circle centre back into 000.

References: Williams & Carter, *Transmission Electron Microscopy* (2009), ch. 12 and 17
(Laue circle, excitation error); Edington, vol. 2 (1975), ch. 2 (centring a zone from the
intensity distribution).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from saed.index.values import Mistilt, Solution
from saed.physics import electron_wavelength_nm

__all__ = ["fit_laue_circle", "mistilt_of", "with_mistilt", "MAX_FIT_TILT_DEG"]

#: Largest tilt searched, degrees (beyond this the pattern no longer looks like a zone pattern).
MAX_FIT_TILT_DEG = 3.0

#: Below this tilt the pattern counts as on the zone (intensity fits cannot resolve less).
ON_ZONE_DEG = 0.15


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
    (c_xy_inv_nm, tilt_deg, gain) : the centre, the tilt angle and the fractional drop of the
        robust residual against an on-zone fit (0: no evidence of tilt, 1: perfect).
    """
    g = np.asarray(g_xy_inv_nm, float).reshape(-1, 2)
    y = np.log(np.asarray(intensity, float)) - np.log(np.asarray(kinematic, float))
    k = 1.0 / electron_wavelength_nm(voltage_kv)
    g2 = np.sum(g * g, axis=1)
    widths = np.geomspace(0.004, 0.3, 9)
    th = np.radians(np.linspace(0.0, MAX_FIT_TILT_DEG, 31))
    az = np.radians(np.arange(0.0, 360.0, 6.0))
    cr = (k * np.sin(th))[:, None] * np.ones_like(az)[None, :]
    cx = (cr * np.cos(az)[None, :]).ravel()
    cy = (cr * np.sin(az)[None, :]).ravel()
    s = (2.0 * (cx[:, None] * g[None, :, 0] + cy[:, None] * g[None, :, 1]) - g2[None, :]) / (2.0 * k)  # (m, n)

    def cost_grid(w):  # least squares with a free offset (the robust fit follows)
        r = y[None, :] + (s / w) ** 2
        return np.sum((r - r.mean(axis=1, keepdims=True)) ** 2, axis=1)

    best = (np.inf, 0, widths[0])
    for w in widths:
        c = cost_grid(w)
        i = int(np.argmin(c))
        if c[i] < best[0]:
            best = (float(c[i]), i, w)

    def resid(p):
        c_vec, lw = p[:2], p[2]
        ss = (2.0 * (g @ c_vec) - g2) / (2.0 * k)
        pred = -(ss / math.exp(lw)) ** 2
        r = y - pred
        return r - np.median(r)

    p0 = np.array([cx[best[1]], cy[best[1]], math.log(best[2])])
    try:
        from scipy import optimize  # here, not at import: scipy.optimize costs a quarter second of start-up

        sol = optimize.least_squares(resid, p0, loss="soft_l1", f_scale=0.5, max_nfev=200)
        p = sol.x if np.all(np.isfinite(sol.x)) else p0
    except (ValueError, np.linalg.LinAlgError):
        p = p0
    c_vec = p[:2]
    tilt = math.degrees(math.asin(min(1.0, float(np.linalg.norm(c_vec)) / k)))
    if tilt > MAX_FIT_TILT_DEG * 1.2:
        c_vec = p0[:2]
        tilt = math.degrees(math.asin(min(1.0, float(np.linalg.norm(c_vec)) / k)))
    cost_fit = float(np.sum(np.abs(resid(np.array([c_vec[0], c_vec[1], p[2]])))))
    cost0 = min(float(np.sum(np.abs(resid(np.array([0.0, 0.0, math.log(w)]))))) for w in widths)
    gain = 0.0 if cost0 <= 0 else max(0.0, 1.0 - cost_fit / cost0)
    return c_vec, tilt, gain


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
    c_vec, tilt, gain = fit_laue_circle(g, np.array([r.intensity for r in recs]),
                                        np.array([r.intensity_calc for r in recs]), voltage_kv=voltage_kv)
    reliable = len(recs) >= 8 and spread < 0.9 and (gain >= 0.15 or tilt < ON_ZONE_DEG)
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
    if tilt < ON_ZONE_DEG and reliable:
        advice = f"on the zone (beam tilt below {ON_ZONE_DEG:.2f} deg)"
    elif not reliable:
        advice = (f"beam tilt roughly {tilt:.1f} deg (uncertain: too few or too symmetric spot intensities to fit "
                  "the Laue circle)")
    else:
        side = _compass(az)
        advice = (f"beam {tilt:.1f} deg off the zone, brightest toward {side} (azimuth {az:.0f} deg): tilt the "
                  f"specimen {tilt:.1f} deg about the in-plane axis at {axis_az:.0f} deg to centre the Laue circle")
        if alpha is not None:
            advice += f" (about alpha {alpha:+.1f} deg, beta {beta:+.1f} deg)"
    return Mistilt(tilt_deg=float(tilt), laue_center_azimuth_deg=float(az), laue_center_px=(float(centre_px[0]),
                   float(centre_px[1])), laue_radius_px=radius_px, correction_axis_deg=float(axis_az),
                   reliable=bool(reliable), advice=advice, alpha_deg=alpha, beta_deg=beta)


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
