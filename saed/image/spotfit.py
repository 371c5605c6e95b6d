"""Sub-pixel spot positions, sizes and integrated intensities: a 2-D Gaussian on a tilted plane, fitted to all spots at once.

Model, in a square window about each candidate (pixel offsets X, Y from the window centre)::

    m(X, Y) = b0 + bx X + by Y + A exp(-((X - xc)^2 + (Y - yc)^2) / (2 s^2))

fitted by weighted least squares with the Levenberg-Marquardt method [2]_ [3]_, every spot in one
batch of 7x7 normal equations. The weights are the inverse variance of the detector's noise model
(``variance = gain * m + offset``, :mod:`saed.image.background`) at the current model, which makes the
fit close to the maximum-likelihood estimate for Poisson counts, as in single-emitter localisation
[1]_. Masked pixels (saturated, beam stop, outside the image) get zero weight, so a saturated spot is
fitted on its unsaturated flanks. The start comes from the intensity-weighted centroid (first moment)
of the background-subtracted window.

The position uncertainty is the fit covariance ``(J^T W J)^-1``, scaled by the reduced chi-square when
it exceeds 1. The integrated intensity is the aperture sum (radius 3 s) of the data minus the fitted
plane, with the model standing in for masked pixels, divided by the fraction of a Gaussian inside the
aperture (0.989); its variance is the sum of the pixel variances plus (aperture area)^2 times the
variance of b0, scaled alike.

A disc (large convergence angle) is point-symmetric like a Gaussian, so the fitted centre of a disc is
unbiased too; its ``s`` is then only a size measure.

References
----------
.. [1] R. E. Thompson, D. R. Larson and W. W. Webb, "Precise nanometer localization analysis for
   individual fluorescent probes", Biophys. J. 82, 2775-2783 (2002),
   :doi:`10.1016/S0006-3495(02)75618-X`.
.. [2] K. Levenberg, "A method for the solution of certain non-linear problems in least squares",
   Q. Appl. Math. 2, 164-168 (1944).
.. [3] D. W. Marquardt, "An algorithm for least-squares estimation of nonlinear parameters",
   J. Soc. Ind. Appl. Math. 11, 431-441 (1963), :doi:`10.1137/0111030`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

__all__ = ["SpotFits", "fit_spots", "window_stack"]


@dataclass(frozen=True, eq=False)
class SpotFits:
    """Fit results, one row per candidate (arrays of equal length; pixels and counts).

    x_px, y_px : centre; sigma_xy_px : 1-sigma position uncertainty (mean of x and y);
    amplitude : A, counts above the plane at the peak; width_px : s; background : b0 at the centre;
    intensity, intensity_sigma : aperture sum above the plane and its 1 sigma; chi2_red : reduced
    chi-square; n_masked : masked pixels in the aperture; ok : the fit converged to a sensible spot.
    """

    x_px: np.ndarray
    y_px: np.ndarray
    sigma_xy_px: np.ndarray
    amplitude: np.ndarray
    width_px: np.ndarray
    background: np.ndarray
    intensity: np.ndarray
    intensity_sigma: np.ndarray
    chi2_red: np.ndarray
    n_masked: np.ndarray
    ok: np.ndarray

    def __len__(self) -> int:
        return len(self.x_px)


def window_stack(image: np.ndarray, valid: np.ndarray | None, ix, iy, half: int):
    """(n, w, w) windows of `image` centred on integer pixels (ix, iy), w = 2 half + 1, and their weight mask.

    Pixels outside the image or not `valid` have mask False (and value 0).
    """
    rows, cols = image.shape
    off = np.arange(-half, half + 1)
    rr = np.asarray(iy)[:, None, None] + off[None, :, None]
    cc = np.asarray(ix)[:, None, None] + off[None, None, :]
    inside = (rr >= 0) & (rr < rows) & (cc >= 0) & (cc < cols)
    rr_c, cc_c = np.clip(rr, 0, rows - 1), np.clip(cc, 0, cols - 1)
    data = image[rr_c, cc_c].astype(np.float64)
    mask = inside if valid is None else inside & valid[rr_c, cc_c]
    data[~mask] = 0.0
    return data, mask


def _row_nanmedian(values: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """``np.nanmedian(np.where(keep, values, np.nan), axis=1)`` of finite (n, m) `values`, bit for bit (no warnings).

    np.nanmedian sorts each row (masked arrays, or one np.median per row for long rows) and halves
    the sum of the two middle values (the middle one twice for an odd count); this sorts the kept
    values of all rows at once (left-out ones as +inf, last) and does the same sum and halving.
    All-left-out rows give NaN. Held to np.nanmedian by tests/test_image_same_bits.py.
    """
    n = values.shape[0]
    if n == 0:
        return np.zeros(0)
    srt = np.where(keep, values, np.inf)
    srt.sort(axis=1)
    cnt = keep.sum(axis=1)
    hi = cnt // 2
    lo = np.where(cnt % 2 == 1, hi, hi - 1)
    rows = np.arange(n)
    pair = np.stack([srt[rows, np.maximum(lo, 0)], srt[rows, np.minimum(hi, values.shape[1] - 1)]], axis=1)
    out = pair.sum(axis=1) / 2.0
    out[cnt == 0] = np.nan
    return out


def _solve_batch(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a[k] x = b[k] for every k; zero where a[k] is singular or not finite."""
    out = np.zeros_like(b)
    good = np.isfinite(a).all(axis=(1, 2)) & np.isfinite(b).all(axis=1)
    if not good.any():
        return out
    try:
        out[good] = np.linalg.solve(a[good], b[good][:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        for k in np.flatnonzero(good):
            try:
                out[k] = np.linalg.solve(a[k], b[k])
            except np.linalg.LinAlgError:
                pass
    return out


def _inv_batch(a: np.ndarray) -> np.ndarray:
    """Inverse of every a[k]; NaN where singular or not finite."""
    out = np.full_like(a, np.nan)
    good = np.isfinite(a).all(axis=(1, 2))
    if not good.any():
        return out
    try:
        out[good] = np.linalg.inv(a[good])
    except np.linalg.LinAlgError:
        for k in np.flatnonzero(good):
            try:
                out[k] = np.linalg.inv(a[k])
            except np.linalg.LinAlgError:
                pass
    # A nearly singular matrix inverts to +-inf entries whose sums would be inf - inf: treat as singular.
    out[~np.isfinite(out).all(axis=(1, 2))] = np.nan
    return out


def fit_spots(image: np.ndarray, valid: np.ndarray | None, x0, y0, *, sigma0_px: float, half_px: int,
              gain: float, offset_var: float, var_floor: float, max_iter: int = 25) -> SpotFits:
    """Fit every candidate (x0, y0) with a Gaussian on a plane (see the module notes).

    Parameters
    ----------
    image : (rows, cols) float32
    valid : (rows, cols) bool or None; False pixels carry no weight
    x0, y0 : (n,) start positions, pixels
    sigma0_px : start width s
    half_px : window half-width (window 2 half + 1 pixels)
    gain, offset_var, var_floor : noise model, variance = max(gain * level + offset_var, var_floor)
    max_iter : Levenberg-Marquardt iterations
    """
    x0 = np.asarray(x0, np.float64).ravel()
    y0 = np.asarray(y0, np.float64).ravel()
    n = len(x0)
    h = int(half_px)
    if n == 0:
        z = np.zeros(0)
        return SpotFits(z, z, z, z, z, z, z, z, z, np.zeros(0, int), np.zeros(0, bool))
    ix, iy = np.rint(x0).astype(np.int64), np.rint(y0).astype(np.int64)
    data, mask = window_stack(image, valid, ix, iy, h)
    off = np.arange(-h, h + 1, dtype=np.float64)
    X = np.broadcast_to(off[None, None, :], data.shape)
    Y = np.broadcast_to(off[None, :, None], data.shape)
    m = mask.astype(np.float64)
    nvalid = m.sum(axis=(1, 2))

    # Start: plane = median of the valid border pixels; centroid of what stands above it.
    border = np.zeros((2 * h + 1, 2 * h + 1), bool)
    border[0, :] = border[-1, :] = border[:, 0] = border[:, -1] = True
    # b0: the nanmedian of the valid border pixels (np.nanmedian over the window with NaN elsewhere)
    b0 = _row_nanmedian(data[:, border], mask[:, border])
    bad = ~np.isfinite(b0)
    if bad.any():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows (windows with no valid pixel)
            b0[bad] = np.nanmedian(np.where(mask[bad], data[bad], np.nan).reshape(int(bad.sum()), -1), axis=1)
    b0 = np.where(np.isfinite(b0), b0, 0.0)
    above = np.clip(data - b0[:, None, None], 0.0, None) * m
    r2_0 = X**2 + Y**2
    cw = above * (r2_0 <= (max(2.0 * sigma0_px, 2.0)) ** 2 + 0.5)
    tot = cw.sum(axis=(1, 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        xc = np.where(tot > 0, (cw * X).sum(axis=(1, 2)) / tot, 0.0) + (x0 - ix)
        yc = np.where(tot > 0, (cw * Y).sum(axis=(1, 2)) / tot, 0.0) + (y0 - iy)
    xc = np.clip(xc, -h / 2, h / 2)
    yc = np.clip(yc, -h / 2, h / 2)
    amp = np.maximum((above * (r2_0 <= 2.0)).max(axis=(1, 2)), 1e-3)
    p = np.stack([xc, yc, amp, np.full(n, float(sigma0_px)), b0, np.zeros(n), np.zeros(n)], axis=1)

    npx = data.shape[1] * data.shape[2]
    D = data.reshape(n, npx)
    M = m.reshape(n, npx)
    Xf = X.reshape(n, npx)[0]
    Yf = Y.reshape(n, npx)[0]

    def model(p):
        dx = Xf[None, :] - p[:, 0:1]
        dy = Yf[None, :] - p[:, 1:2]
        r2 = dx * dx + dy * dy
        e = np.exp(r2 * (-0.5 / (p[:, 3:4] ** 2)))
        mod = p[:, 4:5] + p[:, 5:6] * Xf[None, :] + p[:, 6:7] * Yf[None, :] + p[:, 2:3] * e
        return mod, e, dx, dy, r2

    def jacobian(p, e, dx, dy, r2):
        s2 = p[:, 3:4] ** 2
        g = p[:, 2:3] * e
        k = len(p)
        jac = np.empty((k, npx, 7))
        jac[:, :, 0] = g * dx / s2
        jac[:, :, 1] = g * dy / s2
        jac[:, :, 2] = e
        jac[:, :, 3] = g * r2 / (s2 * p[:, 3:4])
        jac[:, :, 4] = 1.0
        jac[:, :, 5] = Xf[None, :]
        jac[:, :, 6] = Yf[None, :]
        return jac

    def weights(mod, mk):
        return mk / np.maximum(gain * mod + offset_var, var_floor)

    mod, e, dx, dy, r2 = model(p)
    w = weights(mod, M)
    chi2 = (w * (D - mod) ** 2).sum(axis=1)
    lam = np.full(n, 1e-3)
    active = np.ones(n, bool)
    eye = np.eye(7)
    for _ in range(max_iter):
        act = np.flatnonzero(active)
        if len(act) == 0:
            break
        pa = p[act]
        jac = jacobian(pa, e[act], dx[act], dy[act], r2[act])
        jwt = (jac * w[act][:, :, None]).transpose(0, 2, 1)           # (k, 7, P)
        hess = jwt @ jac
        grad = (jwt @ (D[act] - mod[act])[:, :, None])[:, :, 0]
        diag = np.einsum("nii->ni", hess)
        a_mat = hess + (lam[act][:, None] * np.maximum(diag, 1e-12))[:, :, None] * eye[None]
        step = _solve_batch(a_mat, grad)
        trial = pa + step
        trial[:, 3] = np.clip(np.abs(trial[:, 3]), 0.2, 3.0 * h)
        trial[:, 0] = np.clip(trial[:, 0], -h, h)
        trial[:, 1] = np.clip(trial[:, 1], -h, h)
        tmod, te, tdx, tdy, tr2 = model(trial)
        chi2_t = (w[act] * (D[act] - tmod) ** 2).sum(axis=1)
        better = np.isfinite(chi2_t) & (chi2_t <= chi2[act])
        acc = act[better]
        p[acc] = trial[better]
        mod[acc], e[acc], dx[acc], dy[acc], r2[acc] = tmod[better], te[better], tdx[better], tdy[better], tr2[better]
        w[acc] = weights(mod[acc], M[acc])
        chi2[acc] = (w[acc] * (D[acc] - mod[acc]) ** 2).sum(axis=1)
        lam[act] = np.where(better, lam[act] * 0.3, lam[act] * 10.0)
        small = np.abs(step[:, :2]).max(axis=1) < 2e-4
        active[act[(better & small) | (lam[act] > 1e8)]] = False

    jac = jacobian(p, e, dx, dy, r2)
    jwt = (jac * w[:, :, None]).transpose(0, 2, 1)
    hess = jwt @ jac
    mod = mod.reshape(data.shape)
    dof = np.maximum(nvalid - 7, 1)
    chi2_red = chi2 / dof
    cov = _inv_batch(hess)
    scale = np.maximum(chi2_red, 1.0)
    sig_xy = np.sqrt(np.clip(0.5 * (cov[:, 0, 0] + cov[:, 1, 1]) * scale, 0.0, None))
    var_b = cov[:, 4, 4] * scale
    xc, yc, a, s, b, bx, by = (p[:, k] for k in range(7))
    # Aperture intensity above the fitted plane; model stands in for masked pixels.
    plane = b[:, None, None] + bx[:, None, None] * X + by[:, None, None] * Y
    r2 = (X - xc[:, None, None]) ** 2 + (Y - yc[:, None, None]) ** 2
    r_ap = np.minimum(3.0 * np.abs(s), float(h))
    ap = r2 <= (r_ap**2)[:, None, None]
    filled = np.where(mask, data, mod)
    inten = ((filled - plane) * ap).sum(axis=(1, 2))
    n_ap = ap.sum(axis=(1, 2))
    pix_var = np.maximum(gain * filled + offset_var, var_floor)
    inten_var = (pix_var * ap).sum(axis=(1, 2)) + n_ap**2 * np.where(np.isfinite(var_b), var_b, 0.0)
    # The aperture holds 1 - exp(-r^2 / 2 s^2) of a Gaussian spot (98.9 % at 3 s): report the whole spot.
    frac = np.clip(1.0 - np.exp(-(r_ap**2) / (2.0 * np.maximum(s, 1e-3) ** 2)), 0.5, 1.0)
    inten = inten / frac
    inten_var = inten_var / frac**2
    n_masked = (ap & ~mask).sum(axis=(1, 2))
    ok = (np.isfinite(p).all(axis=1) & np.isfinite(sig_xy) & (a > 0) & (np.abs(xc) < h) & (np.abs(yc) < h)
          & (s > 0.25) & (s < 2.0 * h) & (nvalid > 12))
    return SpotFits(x_px=xc + ix, y_px=yc + iy, sigma_xy_px=sig_xy, amplitude=a, width_px=np.abs(s), background=b,
                    intensity=inten, intensity_sigma=np.sqrt(np.maximum(inten_var, 0.0)), chi2_red=chi2_red,
                    n_masked=n_masked.astype(int), ok=ok)
