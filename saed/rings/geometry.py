"""Centre and elliptical distortion of a ring pattern, fitted from the rings themselves.

1. A first centre from the pattern's inversion symmetry: a diffraction pattern is centrosymmetric
   about the direct beam (Friedel's law), so the self-convolution of the high-pass filtered image
   peaks at twice the centre.
2. Each ring is then traced around the azimuth: in every sector the ring's radius is found by a
   least-squares fit of a Gaussian on a straight background (grid search on the position, linear in
   the rest, refined by a parabola), all sectors at once.
3. Centre (x0, y0), ellipse and the true radius R_k of every ring are fitted jointly to all traced
   points: the corrected radius sqrt(d^T M d) of each point d = p - p0 must equal R_k, with
   M = exp(S), S symmetric and traceless (det M = 1: the area-preserving convention of
   :meth:`saed.calibration.Ellipse.corrected_px`), robust (soft-L1) loss. Steps 2-3 are iterated.

References
----------
W. Friedel, "Sur les symetries cristallines que peut reveler la diffraction des rayons Rontgen",
C. R. Acad. Sci. Paris 157 (1913) 1533-1536 (the centrosymmetry used in step 1).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy import fft, ndimage, optimize

from saed.calibration import Ellipse
from saed.errors import ImageError
from saed.rings.profile import sector_profiles
from saed.simulate.rings import polar_coordinates

__all__ = ["RingGeometry", "inversion_centre", "trace_rings", "fit_ring_geometry", "ellipse_from_s"]

logger = logging.getLogger(__name__)

#: Largest projector ellipse fitted (axis ratio); real projectors stay well below (0.5-2 %, common practice).
MAX_AXIS_RATIO = 1.15


@dataclass(frozen=True, eq=False)
class RingGeometry:
    """Fitted centre, ellipse and ring radii.

    radius_px : (k,) corrected radius of each traced ring; residual_px : RMS distance of the traced
    points from their fitted rings; n_points : points used; coverage : (k,) fraction of the azimuth
    sectors (with data) in which each ring was seen; center_sigma_px, axis_ratio_sigma : 1-sigma.
    """

    center_px: tuple[float, float]
    ellipse: Ellipse
    radius_px: np.ndarray
    coverage: np.ndarray
    residual_px: float
    n_points: int
    center_sigma_px: float = 0.0
    axis_ratio_sigma: float = 0.0


def ellipse_from_s(a: float, b: float) -> Ellipse:
    """Ellipse for the traceless symmetric S = [[a, b], [b, -a]] of M = exp(S) (see module notes).

    >>> e = ellipse_from_s(-math.log(1.02), 0.0)
    >>> round(e.axis_ratio, 6), e.major_axis_angle_deg
    (1.02, 0.0)
    """
    kappa = math.hypot(a, b)
    if kappa < 1e-12:
        return Ellipse(1.0, 0.0)
    # S has eigenvalue +kappa along psi = atan2(b, a) / 2; M's smallest eigenvalue (the long axis of
    # the ring on the detector) lies along psi + 90 deg.
    psi = 0.5 * math.degrees(math.atan2(b, a))
    return Ellipse(math.exp(kappa), (psi + 90.0) % 180.0)


def _s_from_ellipse(e: Ellipse) -> tuple[float, float]:
    kappa = math.log(e.axis_ratio)
    psi = math.radians(e.major_axis_angle_deg - 90.0)
    return kappa * math.cos(2 * psi), kappa * math.sin(2 * psi)


def inversion_centre(image, *, mask=None, hint_px=None, search_px: float | None = None) -> tuple[float, float]:
    """Centre of inversion symmetry of `image` (x, y), pixels.

    The image is high-pass filtered (difference of Gaussians by normalised convolution, so masked pixels
    leave no edges), clipped at three robust sigmas (so that many faint ring pixels rather than a few
    sharp edges decide), and convolved with itself by FFT; the peak is at twice the centre. `hint_px` with `search_px` limits
    the search to a window around a hint.
    """
    img = np.asarray(image, dtype=np.float32)
    ny, nx = img.shape
    step = max(1, int(max(ny, nx) // 512))
    work = img[::step, ::step].astype(np.float64)
    valid = np.isfinite(work)
    if mask is not None:
        valid &= ~np.asarray(mask, bool)[::step, ::step]
    work = np.where(valid, work, np.nanmedian(work[valid]) if valid.any() else 0.0)
    work = np.log1p(np.clip(work - np.percentile(work[valid], 1), 0, None))
    # Difference of Gaussians by normalised convolution, so masked areas (beam stop) leave no edges.
    wv = valid.astype(np.float64)

    def blur(sigma):
        return ndimage.gaussian_filter(work * wv, sigma) / np.maximum(ndimage.gaussian_filter(wv, sigma), 1e-3)

    hp = blur(1.0) - blur(6.0)
    hp = ndimage.binary_erosion(valid, iterations=2) * hp
    # Clip at 3 robust sigmas: many faint ring pixels, not a few sharp edges (beam-stop disc), decide.
    v = hp[valid]
    sig = 1.4826 * float(np.median(np.abs(v - np.median(v)))) if v.size else 0.0
    if sig > 0:
        hp = np.clip(hp, -3 * sig, 3 * sig)
    h, w = hp.shape
    shape = (fft.next_fast_len(2 * h), fft.next_fast_len(2 * w))
    spec = fft.rfft2(hp, shape)
    conv = fft.irfft2(spec * spec, shape)[: 2 * h - 1, : 2 * w - 1]
    if hint_px is not None and search_px is not None:
        hx, hy = hint_px[0] / step, hint_px[1] / step
        rad = search_px / step
        yy, xx = np.mgrid[: conv.shape[0], : conv.shape[1]]
        conv = np.where(np.hypot(xx - 2 * hx, yy - 2 * hy) <= 2 * rad, conv, -np.inf)
    else:
        # The centre lies well inside the image: ignore the outer quarter of shifts.
        yy, xx = np.mgrid[: conv.shape[0], : conv.shape[1]]
        inside = (xx > 0.5 * w) & (xx < 1.5 * w) & (yy > 0.5 * h) & (yy < 1.5 * h)
        conv = np.where(inside, conv, -np.inf)
    k = np.unravel_index(int(np.argmax(conv)), conv.shape)
    if not np.isfinite(conv[k]):
        raise ImageError("could not find the pattern centre (no symmetric structure in the image)")
    sub = []
    for axis in (0, 1):
        i = k[axis]
        if 0 < i < conv.shape[axis] - 1:
            lo = conv[(i - 1, k[1])] if axis == 0 else conv[(k[0], i - 1)]
            hi = conv[(i + 1, k[1])] if axis == 0 else conv[(k[0], i + 1)]
            den = lo - 2 * conv[k] + hi
            sub.append(i + (0.5 * (lo - hi) / den if np.isfinite(den) and den < 0 else 0.0))
        else:
            sub.append(float(i))
    cy, cx = sub[0] / 2.0, sub[1] / 2.0
    return (cx * step + (step - 1) / 2.0, cy * step + (step - 1) / 2.0)


def _grid_fit(x, y, w, grid, sigma_px):
    """Weighted least-squares A*gauss(x; mu, sigma) + c0 + c1 (x - mean x) for every mu of `grid`.

    x (B,), y and w (S, B), grid (S, M) positions per sector. Returns (chi2 (S, M), amplitude (S, M)).
    """
    xc = x - x.mean()
    g = np.exp(-0.5 * ((x[None, None, :] - grid[:, :, None]) / sigma_px) ** 2)  # (S, M, B)
    ones = np.ones_like(x)
    # Normal equations of the three basis functions (g, 1, xc), written out.
    wg = w[:, None, :] * g
    s_gg = (wg * g).sum(-1)
    s_g1 = wg.sum(-1)
    s_gx = (wg * xc).sum(-1)
    s_11 = np.broadcast_to((w * ones).sum(-1)[:, None], s_gg.shape)
    s_1x = np.broadcast_to((w * xc).sum(-1)[:, None], s_gg.shape)
    s_xx = np.broadcast_to((w * xc * xc).sum(-1)[:, None], s_gg.shape)
    ata = np.stack([np.stack([s_gg, s_g1, s_gx], -1), np.stack([s_g1, s_11, s_1x], -1),
                    np.stack([s_gx, s_1x, s_xx], -1)], -2) + 1e-9 * np.eye(3)
    wy = w * y
    aty = np.stack([(wy[:, None, :] * g).sum(-1), np.broadcast_to(wy.sum(-1)[:, None], s_gg.shape),
                    np.broadcast_to((wy * xc).sum(-1)[:, None], s_gg.shape)], -1)
    coef = np.linalg.solve(ata, aty[..., None])[..., 0]
    yy = (wy * y).sum(-1)[:, None]
    chi = yy - np.einsum("smi,smi->sm", coef, aty)  # at the optimum, c^T A^T W A c = c^T A^T W y
    return chi, coef[..., 0]


def _best_on_grid(chi, grid):
    """Grid minimum per sector refined by a parabola through its neighbours; (mu, index, inner)."""
    n_s, m = chi.shape
    best = np.argmin(chi, axis=1)
    i = np.arange(n_s)
    inner = (best > 0) & (best < m - 1)
    lo = chi[i, np.clip(best - 1, 0, None)]
    hi = chi[i, np.clip(best + 1, None, m - 1)]
    mid = chi[i, best]
    den = lo - 2 * mid + hi
    step = grid[:, 1] - grid[:, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(inner & (den > 0), 0.5 * (lo - hi) / den, 0.0)
    return grid[i, best] + np.clip(shift, -1, 1) * step, best, inner


def _sector_peaks(mean, count, radii, r0, half_px, sigma_px):
    """Radius of a Gaussian ring (fixed sigma) in every sector row of mean/count within r0 +- half_px.

    A coarse grid of positions (sigma/3 apart) shared by all sectors, then a fine one (sigma/24 apart)
    around each sector's best, each refined by a parabola. Returns (mu, amplitude, snr) per sector
    (NaN where no fit).
    """
    sel = np.abs(radii - r0) <= half_px
    x = radii[sel]
    y = mean[:, sel]
    w = count[:, sel].astype(np.float64)
    y = np.where(w > 0, y, 0.0)
    n_s = y.shape[0]
    nan = np.full(n_s, np.nan)
    if len(x) < 6:
        return nan, nan, nan
    coarse = np.arange(r0 - half_px + sigma_px, r0 + half_px - sigma_px + 1e-9, sigma_px / 3)
    if len(coarse) < 3:
        coarse = np.linspace(r0 - 0.5 * half_px, r0 + 0.5 * half_px, 7)
    chi1, _ = _grid_fit(x, y, w, np.broadcast_to(coarse, (n_s, len(coarse))), sigma_px)
    mu1, _, inner = _best_on_grid(chi1, np.broadcast_to(coarse, (n_s, len(coarse))))
    fine_step = sigma_px / 24
    fine = mu1[:, None] + fine_step * np.arange(-6, 7)[None, :]
    chi2, amp2 = _grid_fit(x, y, w, fine, sigma_px)
    mu, best, _ = _best_on_grid(chi2, fine)
    i = np.arange(n_s)
    amp = amp2[i, best]
    mid = chi2[i, best]
    n_eff = np.maximum((w > 0).sum(axis=1) - 4, 1)
    resid_sd = np.sqrt(np.clip(mid, 0, None) / np.maximum(w.sum(axis=1), 1e-12) * (w > 0).sum(axis=1) / n_eff)
    # Noise of the amplitude ~ residual sd / sqrt(bins under the peak).
    snr = amp / np.maximum(resid_sd / np.sqrt(max(2.5 * sigma_px / (x[1] - x[0]), 1.0)), 1e-12)
    ok = inner & (amp > 0) & ((w > 0).sum(axis=1) >= 0.6 * len(x))
    return np.where(ok, mu, np.nan), np.where(ok, amp, np.nan), np.where(ok, snr, np.nan)


def trace_rings(image, *, center_px, ellipse: Ellipse, radii_px, widths_px, mask=None, n_sectors: int = 72,
                snr_min: float = 4.0, _coords=None):
    """Trace rings around the azimuth; returns (points_xy (n, 2) raw px, ring_index (n,), coverage (k,)).

    Each point is where ring k crosses the middle of one azimuth sector on the detector.
    """
    radii = np.asarray(radii_px, float)
    widths = np.asarray(widths_px, float)
    order = np.argsort(radii)
    radii, widths = radii[order], widths[order]
    half = np.empty_like(radii)
    for k in range(len(radii)):
        gap_lo = radii[k] - radii[k - 1] if k > 0 else np.inf
        gap_hi = radii[k + 1] - radii[k] if k + 1 < len(radii) else np.inf
        half[k] = max(min(5.0 * widths[k], 0.5 * min(gap_lo, gap_hi)), 2.5 * widths[k])
    r_lo = float(max(radii[0] - half[0] - 1, 0))
    r_hi = float(radii[-1] + half[-1] + 1)
    sp = sector_profiles(image, center_px=center_px, ellipse=ellipse, mask=mask, n_sectors=n_sectors,
                         r_min_px=r_lo, r_max_px=r_hi, bin_px=0.25 if widths.min() < 2 else 0.5, _coords=_coords)
    cx, cy = center_px
    phi = np.radians(sp.sector_deg)
    ux, uy = np.cos(phi), np.sin(phi)
    cux, cuy = ellipse.corrected_px(ux, uy)
    f = np.hypot(cux, cuy)  # corrected radius of a unit raw offset in each sector direction
    pts, idx, cov = [], [], np.zeros(len(radii))
    has_data = (sp.count.sum(axis=1) > 0)
    for k in range(len(radii)):
        mu, amp, snr = _sector_peaks(sp.mean, sp.count, sp.radius_px, radii[k], half[k], widths[k])
        good = np.isfinite(mu) & (snr >= snr_min)
        denom = max(int(has_data.sum()), 1)
        cov[k] = good.sum() / denom
        r_raw = mu[good] / f[good]
        pts.append(np.stack([cx + r_raw * ux[good], cy + r_raw * uy[good]], axis=-1))
        idx.append(np.full(int(good.sum()), order[k]))
    back = np.empty_like(cov)
    back[order] = cov
    if pts:
        return np.concatenate(pts), np.concatenate(idx).astype(np.int64), back
    return np.zeros((0, 2)), np.zeros(0, np.int64), back


def _fit_points(points, ring_idx, n_rings, center_px, ellipse, radii, fit_ellipse, fit_center):
    a0, b0 = _s_from_ellipse(ellipse)
    p0 = np.concatenate([[center_px[0], center_px[1], a0, b0], radii])
    free = np.array([fit_center, fit_center, fit_ellipse, fit_ellipse] + [True] * n_rings)

    def unpack(q):
        p = p0.copy()
        p[free] = q
        return p

    def resid(q):
        p = unpack(q)
        a, b = p[2], p[3]
        kappa = math.hypot(a, b)
        if kappa < 1e-12:
            m = np.eye(2)
        else:
            s = np.array([[a, b], [b, -a]])
            m = math.cosh(kappa) * np.eye(2) + math.sinh(kappa) / kappa * s
        d = points - p[:2]
        rho = np.sqrt(np.einsum("ni,ij,nj->n", d, m, d))
        return rho - p[4 + ring_idx]

    k_max = math.log(MAX_AXIS_RATIO)
    lo = np.concatenate([[-np.inf, -np.inf, -k_max, -k_max], np.full(n_rings, 1.0)])[free]
    hi = np.concatenate([[np.inf, np.inf, k_max, k_max], np.full(n_rings, np.inf)])[free]
    start = np.clip(p0[free], lo + 1e-9, hi - 1e-9)
    res = optimize.least_squares(resid, start, bounds=(lo, hi), loss="soft_l1", f_scale=0.3, x_scale="jac")
    p = unpack(res.x)
    r = res.fun
    try:
        cov = np.linalg.pinv(res.jac.T @ res.jac) * float(np.median(r**2) / 0.455 + 1e-12)
        err = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        err = np.zeros(len(res.x))
    full_err = np.zeros(len(p0))
    full_err[free] = err
    return p, r, full_err


def fit_ring_geometry(image, *, center_px, radii_px, widths_px, ellipse: Ellipse | None = None, mask=None,
                      fit_ellipse: bool = True, fit_center: bool = True, n_sectors: int = 72,
                      n_iter: int = 4) -> RingGeometry:
    """Fit centre and ellipse from traced rings (module notes), starting from `center_px`, `ellipse`.

    Parameters
    ----------
    image : (ny, nx) array
    center_px : starting centre (x, y)
    radii_px, widths_px : approximate corrected radius and Gaussian sigma of the rings to trace
    ellipse : starting ellipse (default circular)
    mask : True = pixel ignored
    fit_ellipse, fit_center : which to refine (the ring radii are always fitted)
    n_sectors : azimuth sectors per ring
    n_iter : trace-and-fit rounds

    Raises
    ------
    ImageError
        when fewer than 12 points could be traced.
    """
    ell = ellipse or Ellipse()
    cen = (float(center_px[0]), float(center_px[1]))
    radii = np.asarray(radii_px, float).copy()
    widths = np.asarray(widths_px, float)
    n = len(radii)
    if n == 0:
        raise ImageError("no rings to fit the pattern centre and ellipse to")
    cov = np.zeros(n)
    resid = np.zeros(0)
    err = np.zeros(4 + n)
    for it in range(n_iter):
        coords = polar_coordinates(np.shape(image), cen, ell)
        pts, idx, cov = trace_rings(image, center_px=cen, ellipse=ell, radii_px=radii, widths_px=widths, mask=mask,
                                    n_sectors=n_sectors, _coords=coords)
        if len(pts) < 12:
            raise ImageError(f"only {len(pts)} ring points could be traced around the azimuth: "
                             "the rings are too weak or the centre is far off (give --centre X Y)")
        used = np.unique(idx)
        p, resid, err = _fit_points(pts, idx, n, cen, ell, radii, fit_ellipse and len(used) >= 1, fit_center)
        new_c = (float(p[0]), float(p[1]))
        new_e = ellipse_from_s(p[2], p[3]) if fit_ellipse else ell
        new_r = np.where(np.isin(np.arange(n), used), p[4:], radii)
        shift = math.hypot(new_c[0] - cen[0], new_c[1] - cen[1])
        dq = abs(new_e.axis_ratio - ell.axis_ratio)
        cen, ell, radii = new_c, new_e, new_r
        logger.debug("geometry round %d: centre (%.3f, %.3f), q %.5f at %.1f deg, shift %.3f px",
                     it, cen[0], cen[1], ell.axis_ratio, ell.major_axis_angle_deg, shift)
        if it >= 1 and shift < 0.005 and dq < 2e-5:
            break
    rms = float(np.sqrt(np.median(resid**2))) if len(resid) else float("nan")
    q_sigma = float(ell.axis_ratio * math.hypot(err[2], err[3]))
    return RingGeometry(cen, ell, radii, cov, rms, int(len(resid)), float(math.hypot(err[0], err[1])), q_sigma)
