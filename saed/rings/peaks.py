"""Rings in a radial profile: background model, detection and sub-pixel radii.

The background under the rings (inelastic and thermal diffuse scattering, the amorphous support,
the direct-beam tail) is estimated with the SNIP peak-clipping algorithm [1]_ applied to the
log-log-sqrt transformed profile, with the clipping window decreasing as in [2]_. Peaks of the
background-subtracted profile above ``snr_min`` times the local noise are then fitted, overlapping
ones jointly, with Gaussians on a straight residual background (``scipy.optimize.least_squares``);
the fit gives each ring's radius to a fraction of a pixel with its 1-sigma uncertainty.

References
----------
.. [1] C. G. Ryan, E. Clayton, W. L. Griffin, S. H. Sie, D. R. Cousens, "SNIP, a statistics-sensitive
   background treatment for the quantitative analysis of PIXE spectra in geoscience applications",
   Nucl. Instrum. Methods B 34 (1988) 396-402. :DOI:`10.1016/0168-583X(88)90063-8`
.. [2] M. Morhac, J. Kliman, V. Matousek, M. Veselsky, I. Turzo, "Background elimination methods for
   multidimensional coincidence gamma-ray spectra", Nucl. Instrum. Methods A 401 (1997) 113-132.
   :DOI:`10.1016/S0168-9002(97)01023-1`
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from scipy import ndimage, optimize, signal

from saed.errors import InputError
from saed.readonly import frozen_array
from saed.rings.profile import RadialProfile

__all__ = ["ProfileRings", "snip_background", "find_profile_rings"]

logger = logging.getLogger(__name__)

#: Largest ring Gaussian sigma accepted (px); broader bumps are halos or background residue.
MAX_RING_SIGMA_PX = 12.0


@dataclass(frozen=True, eq=False)
class ProfileRings:
    """Rings found in a radial profile, sorted by radius (arrays read-only).

    radius_px : fitted centre of each ring (corrected radius, px); radius_sigma_px : its 1-sigma
    uncertainty; width_px : Gaussian sigma of the ring; amplitude : peak height above background
    (mean counts per pixel); area : amplitude * width * sqrt(2 pi) (counts px), the ring's intensity
    in the azimuthal average; snr : amplitude over the local noise of the profile.
    background : (n_bins,) the background model on the profile's bins; noise : (n_bins,) local noise;
    r_min_px, r_max_px : the radius range searched.
    """

    radius_px: np.ndarray
    radius_sigma_px: np.ndarray
    width_px: np.ndarray
    amplitude: np.ndarray
    area: np.ndarray
    snr: np.ndarray
    background: np.ndarray
    noise: np.ndarray
    r_min_px: float
    r_max_px: float

    def __post_init__(self):
        for name in ("radius_px", "radius_sigma_px", "width_px", "amplitude", "area", "snr", "background", "noise"):
            object.__setattr__(self, name, frozen_array(getattr(self, name), np.float64))

    def __len__(self) -> int:
        return len(self.radius_px)

    @property
    def relative_intensity(self) -> np.ndarray:
        """Ring areas normalised to the strongest = 1."""
        a = self.area
        return a / a.max() if len(a) and a.max() > 0 else a


def snip_background(y, *, window_bins: int) -> np.ndarray:
    """SNIP background [1]_ of a 1-D profile `y` (>= 0 after an offset), decreasing window [2]_.

    Examples
    --------
    >>> x = np.arange(200.0)
    >>> y = 100 * np.exp(-x / 80) + 50 * np.exp(-0.5 * ((x - 100) / 2) ** 2)
    >>> b = snip_background(y, window_bins=12)
    >>> bool(abs(b[100] - 100 * np.exp(-100 / 80)) < 1.0), bool(abs(b[20] - y[20]) < 0.5)
    (True, True)
    """
    y = np.asarray(y, dtype=np.float64)
    offset = min(float(np.nanmin(y)), 0.0)
    v = np.log(np.log(np.sqrt(y - offset + 1.0) + 1.0) + 1.0)
    n = len(v)
    w = int(max(1, window_bins))
    for p in range(w, 0, -1):
        if 2 * p >= n:
            continue
        mid = v[p:n - p]
        avg = 0.5 * (v[:n - 2 * p] + v[2 * p:])
        v[p:n - p] = np.minimum(mid, avg)
    back = (np.exp(np.exp(v) - 1.0) - 1.0) ** 2 - 1.0 + offset
    return back


def _fill_nan(y: np.ndarray) -> np.ndarray:
    y = np.array(y, dtype=np.float64)
    bad = ~np.isfinite(y)
    if bad.all():
        return np.zeros_like(y)
    if bad.any():
        idx = np.arange(len(y))
        y[bad] = np.interp(idx[bad], idx[~bad], y[~bad])
    return y


def _gauss_sum(params: np.ndarray, x: np.ndarray, n: int) -> np.ndarray:
    out = params[3 * n] + params[3 * n + 1] * (x - x.mean())
    for k in range(n):
        a, mu, sig = params[3 * k:3 * k + 3]
        out = out + a * np.exp(-0.5 * ((x - mu) / sig) ** 2)
    return out


def _fit_group(x, y, w, guesses, sigma0, bin_px):
    """Joint least-squares fit of Gaussians (a, mu, sigma) + straight line to one group of peaks."""
    n = len(guesses)
    p0, lo, hi = [], [], []
    for a, mu in guesses:
        p0 += [max(a, 1e-9), mu, sigma0]
        lo += [0.0, mu - 3 * sigma0, 0.3 * bin_px]
        hi += [np.inf, mu + 3 * sigma0, 3 * MAX_RING_SIGMA_PX]
    p0 += [0.0, 0.0]
    lo += [-np.inf, -np.inf]
    hi += [np.inf, np.inf]
    p0 = np.clip(p0, np.array(lo) + 1e-12, np.array(hi) - 1e-12)

    def resid(p):
        return (_gauss_sum(p, x, n) - y) * w

    res = optimize.least_squares(resid, p0, bounds=(lo, hi), x_scale="jac", max_nfev=200 * (n + 1))
    dof = max(len(x) - len(p0), 1)
    chi2 = float(np.sum(res.fun**2)) / dof
    try:
        cov = np.linalg.pinv(res.jac.T @ res.jac) * max(chi2, 1.0)
        err = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        err = np.full(len(p0), np.nan)
    return res.x, err


def find_profile_rings(profile: RadialProfile, *, r_min_px: float, r_max_px: float | None = None,
                       snr_min: float = 5.0, width_guess_px: float | None = None) -> ProfileRings:
    """Detect and fit the rings of a radial profile between `r_min_px` and `r_max_px`.

    Parameters
    ----------
    profile : from :func:`saed.rings.profile.radial_profile`
    r_min_px, r_max_px : corrected-radius range searched (inside r_min: beam stop, direct beam)
    snr_min : a ring's peak must stand this many local-noise sigmas above the background
    width_guess_px : expected ring sigma (default: measured from the strongest peak)

    Returns
    -------
    ProfileRings (possibly empty)
    """
    r = profile.radius_px
    if r_max_px is None:
        r_max_px = float(r[-1])
    if not r_max_px > r_min_px:
        raise InputError(f"ring search range {r_min_px:.1f}..{r_max_px:.1f} px is empty")
    sel = (r >= r_min_px) & (r <= r_max_px) & (profile.count > 0)
    idx = np.nonzero(sel)[0]
    n_bins = len(r)
    empty = ProfileRings(*(np.zeros(0),) * 6, np.full(n_bins, np.nan), np.full(n_bins, np.nan),
                         float(r_min_px), float(r_max_px))
    if len(idx) < 16:
        return empty
    i0, i1 = idx[0], idx[-1] + 1
    x = r[i0:i1]
    y = _fill_nan(profile.mean[i0:i1])
    sem = _fill_nan(profile.sem[i0:i1])
    bin_px = profile.bin_px
    # Local noise: running median of the standard errors (robust to the ring bins themselves).
    noise = ndimage.median_filter(sem, size=max(5, int(round(15.0 / bin_px))), mode="nearest")
    noise = np.maximum(noise, 1e-6 * max(float(np.abs(y).max()), 1.0))

    def detect(window_bins):
        bg = snip_background(y, window_bins=window_bins)
        net = y - bg
        sm = ndimage.gaussian_filter1d(net, 1.0)
        peaks, _ = signal.find_peaks(sm, height=snr_min * noise, distance=max(2, int(round(1.5 / bin_px))),
                                     prominence=0.5 * snr_min * noise)
        return bg, net, peaks

    sigma0 = width_guess_px
    window = int(round(8.0 / bin_px)) if sigma0 is None else int(round(4.0 * sigma0 / bin_px))
    bg, net, peaks = detect(window)
    if len(peaks) and sigma0 is None:
        # Width from the strongest peak: half width at half maximum of the net profile.
        k = peaks[np.argmax(net[peaks])]
        half = 0.5 * net[k]
        lo = k
        while lo > 0 and net[lo] > half:
            lo -= 1
        hi = k
        while hi < len(net) - 1 and net[hi] > half:
            hi += 1
        sigma0 = float(np.clip((hi - lo) * bin_px / 2.355, 0.5, MAX_RING_SIGMA_PX))
        bg, net, peaks = detect(max(int(round(4.0 * sigma0 / bin_px)), 4))
    if not len(peaks):
        full_bg = np.full(n_bins, np.nan)
        full_bg[i0:i1] = bg
        full_noise = np.full(n_bins, np.nan)
        full_noise[i0:i1] = noise
        return ProfileRings(*(np.zeros(0),) * 6, full_bg, full_noise, float(r_min_px), float(r_max_px))
    sigma0 = float(sigma0 or 1.5)

    # Group peaks closer than 5 sigma and fit each group jointly.
    groups, cur = [], [peaks[0]]
    for p in peaks[1:]:
        if (p - cur[-1]) * bin_px < 5.0 * sigma0:
            cur.append(p)
        else:
            groups.append(cur)
            cur = [p]
    groups.append(cur)
    out = []
    half_w = int(round(4.0 * sigma0 / bin_px)) + 2
    for grp in groups:
        a, b = max(grp[0] - half_w, 0), min(grp[-1] + half_w + 1, len(x))
        xs, ys = x[a:b], net[a:b]
        ws = 1.0 / np.maximum(sem[a:b], noise[a:b] * 0.5)
        guesses = [(float(net[p]), float(x[p])) for p in grp]
        params, err = _fit_group(xs, ys, ws, guesses, sigma0, bin_px)
        for k in range(len(grp)):
            amp, mu, sig = params[3 * k:3 * k + 3]
            e_mu = err[3 * k + 1]
            j = int(np.clip(np.searchsorted(x, mu), 0, len(x) - 1))
            snr = amp / noise[j]
            edge = mu - 2.5 * sig < x[0] or mu + 2.5 * sig > x[-1]  # cut by the search range: SNIP edge effect
            too_narrow = sig < 0.6 * bin_px  # narrower than a bin: a step or a hot pixel, not a ring
            if not (xs[0] <= mu <= xs[-1]) or edge or too_narrow or sig > MAX_RING_SIGMA_PX or snr < 0.6 * snr_min:
                continue
            out.append((mu, e_mu if np.isfinite(e_mu) else sig, sig, amp, amp * sig * np.sqrt(2 * np.pi), snr))
    out.sort()
    cols = np.array(out, dtype=np.float64).reshape(-1, 6).T
    full_bg = np.full(n_bins, np.nan)
    full_bg[i0:i1] = bg
    full_noise = np.full(n_bins, np.nan)
    full_noise[i0:i1] = noise
    logger.debug("profile rings: %d found between %.1f and %.1f px", cols.shape[1], r_min_px, r_max_px)
    return ProfileRings(*cols, full_bg, full_noise, float(r_min_px), float(r_max_px))
