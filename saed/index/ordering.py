"""One ordered crystal, or ordered precipitates in a disordered matrix of the same orientation?

An ordered superlattice (L1_2 Ni3Al on fcc Ni, B2 on bcc) in the orientation of its disordered
form shares every fundamental spot with it; only the superlattice spots are its own. Both
readings index every spot, so only intensities can tell them apart:

* one fully ordered crystal gives superlattice/fundamental intensity ratios equal to those of its
  kinematic structure factors, |F_s|^2 / |F_f|^2, times the shape factor of the foil;
* fully ordered precipitates filling an area share f of a disordered matrix add the matrix's
  fundamental intensity: the superlattice spots are about f x as strong, relative to the
  fundamental ones, as a single ordered crystal gives.

:func:`order_evidence` measures that factor rho: every indexed spot's measured intensity over the
kinematic intensity of the ordered phase along the solution's zone (structure factors and exact
excitation errors from :func:`saed.simulate.zone.zone_pattern`, |F|^2 exp(-(s/w)^2): the relrod
model of the pattern generator, :data:`RELROD_WIDTH_INV_NM`), fundamental spots
fitted as log ratio = a + b g^2 (the fall-off with |g| that excitation errors, absorption and the
Debye-Waller factor give, b <= 0), and the superlattice spots compared with that fit at their own
|g|. Its uncertainty comes from the measured scatter of both sets about the fit (the standard
error of the mean superlattice residual plus that of the fitted line where it is evaluated).

The fundamentals are *decisively* too strong for one fully ordered crystal when
ln rho + :data:`DECISIVE_Z` sigma < 0. Even then a partly ordered crystal (long-range order
parameter S, ratio S^2) gives the same pattern, and dynamical scattering in thick areas bends
intensity ratios by factors of several: the caller states both, and a dark-field image in a
superlattice spot decides (particles lit, or the whole area).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["OrderEvidence", "order_evidence", "order_evidence_photometric", "DECISIVE_Z", "RELROD_WIDTH_INV_NM"]

#: rho is decisively below 1 when ln rho + DECISIVE_Z * sigma < 0 (one-sided, about 97.7 % for a
#: normal error; common practice).
DECISIVE_Z = 2.0
#: Half-width of the Gaussian relrod of the kinematic reference, 1/nm: the thickness model of the
#: pattern generator (:mod:`saed.synth`, "a thin bent foil and a convergent beam", about 1/w = 10 nm
#: of effective thickness). The parallel-foil sinc^2 of ``saed simulate`` at 50 nm falls 30-fold
#: from the {100} to the {200} shell on a zone axis; generated single Ni3Al crystals then read
#: rho = 0.3-0.4 and 4 of 24 looked decisively like two crystals. Recorded zone-axis patterns fall
#: off far less steeply too (beam convergence and foil bending broaden the relrods; from memory).
RELROD_WIDTH_INV_NM = 0.1
#: Fundamental spots spanning less than this range of g^2 (1/nm^2) fix no fall-off slope.
MIN_G2_SPAN_INV_NM2 = 4.0


@dataclass(frozen=True)
class OrderEvidence:
    """Superlattice/fundamental intensity relative to one fully ordered crystal.

    ``ratio`` is rho (1 = one fully ordered crystal, f = precipitates filling an area share f);
    ``sigma_log`` the standard uncertainty of ln rho from the measured scatter; ``n_superlattice``
    / ``n_fundamental`` the spots behind it; ``scatter_log`` the scatter of one spot's ln intensity
    about the model.
    """

    ratio: float
    sigma_log: float
    n_superlattice: int
    n_fundamental: int
    scatter_log: float
    photometric: bool = False  # measured at every predicted position in the image (the superlattice probe)

    @property
    def decisively_weak(self) -> bool:
        """The fundamentals are decisively too strong for one fully ordered crystal."""
        return math.log(self.ratio) + DECISIVE_Z * self.sigma_log < 0.0

    @property
    def upper_ratio(self) -> float:
        """rho at ln rho + DECISIVE_Z sigma: the largest ratio the measurement allows."""
        return math.exp(min(math.log(self.ratio) + DECISIVE_Z * self.sigma_log, 700.0))

    @property
    def lower_ratio(self) -> float:
        return math.exp(max(math.log(self.ratio) - DECISIVE_Z * self.sigma_log, -700.0))


def _model_intensity(ordered_phase, zone_axis, hkl: np.ndarray, voltage_kv: float) -> np.ndarray:
    """Kinematic intensity |F|^2 exp(-(s/w)^2) of reflections `hkl` along `zone_axis` (0 where not in the zone
    pattern), s the exact excitation error on the zone, w = :data:`RELROD_WIDTH_INV_NM`."""
    from saed.simulate.zone import zone_pattern

    g_max = float(np.max(ordered_phase.lattice.g_inv_nm(hkl)))
    zp = zone_pattern(ordered_phase, tuple(int(v) for v in zone_axis), voltage_kv=voltage_kv,
                      max_g_inv_nm=g_max * 1.02 + 0.1, include_holz=False)
    f2 = np.where(zp.kinematically_forbidden, 0.0, np.asarray(zp.f_abs, float) ** 2)
    inten = f2 * np.exp(-(np.asarray(zp.excitation_error_inv_nm) / RELROD_WIDTH_INV_NM) ** 2)
    lut = {tuple(int(v) for v in h): float(i) for h, i in zip(zp.hkl, inten)}
    return np.array([lut.get(tuple(int(v) for v in h), 0.0) for h in hkl])


def order_evidence(ordered_solution, ordered_phase, disordered_table, *, voltage_kv: float) -> OrderEvidence | None:
    """rho and its uncertainty for an ordered solution (see the module docstring); None when fewer than two
    superlattice or three fundamental spots carry a measured and a model intensity.

    `disordered_table`: the index table of the disordered form (its ``allowed`` reflections are the
    fundamental ones).
    """
    recs = [s for s in ordered_solution.indexed
            if s.kind == "allowed" and s.hkl is not None and s.intensity is not None and s.intensity > 0]
    if len(recs) < 5:
        return None
    hkl = np.array([s.hkl for s in recs], np.int64)
    model = _model_intensity(ordered_phase, ordered_solution.zone_axis, hkl, voltage_kv)
    rows = disordered_table.rows_of(hkl)
    fund = np.array([r >= 0 and bool(disordered_table.allowed[r]) for r in rows], bool)
    keep = model > 0
    meas = np.array([s.intensity for s in recs], float)
    g2 = ordered_phase.lattice.g_inv_nm(hkl) ** 2
    resid = np.log(np.where(keep, meas, 1.0) / np.where(keep, model, 1.0))
    f, s_ = keep & fund, keep & ~fund
    n_f, n_s = int(f.sum()), int(s_.sum())
    if n_s < 2 or n_f < 3:
        return None
    x_f = np.stack([np.ones(n_f), g2[f]], axis=1)
    slope = n_f >= 4 and float(np.ptp(g2[f])) >= MIN_G2_SPAN_INV_NM2
    if slope:
        coef, *_ = np.linalg.lstsq(x_f, resid[f], rcond=None)
        if coef[1] > 0:  # intensities never grow with |g|: a positive slope is noise
            slope = False
    if not slope:
        x_f = x_f[:, :1]
        coef = np.array([float(np.mean(resid[f]))])
    x_s = np.stack([np.ones(n_s), g2[s_]], axis=1)[:, :x_f.shape[1]]
    d_f = resid[f] - x_f @ coef
    d_s = resid[s_] - x_s @ coef
    dof = (n_f - x_f.shape[1]) + (n_s - 1)
    scatter = math.sqrt((float(np.sum(d_f ** 2)) + float(np.sum((d_s - d_s.mean()) ** 2))) / max(dof, 1))
    c = x_s.mean(axis=0)
    line_var = float(c @ np.linalg.pinv(x_f.T @ x_f) @ c)  # variance of the fitted line there, per scatter^2
    sigma = scatter * math.sqrt(1.0 / n_s + line_var)
    return OrderEvidence(float(math.exp(d_s.mean())), sigma, n_s, n_f, scatter)


def _design(g2: np.ndarray, k: int) -> np.ndarray:
    """Columns 1, g^2, g^4 (the first `k`)."""
    return np.stack([np.ones(len(g2)), g2, g2 ** 2], axis=1)[:, :k]


def _falloff_fit(g2: np.ndarray, resid: np.ndarray, g2_all: np.ndarray) -> tuple[np.ndarray, int]:
    """ln(I / model) = a + b g^2 + c g^4 over the fundamental positions, fewer terms where the data do not carry
    them: the g^4 term needs 7 positions, the g^2 term a span of :data:`MIN_G2_SPAN_INV_NM2`. The three-term fit
    may rise with |g| (a reference relrod narrower than the foil's makes measured / model grow as g^4); the
    two-term one may not over `g2_all` (a rising line from few spots is noise) and falls back to the mean. On a zone axis the excitation error of a
    zero-layer reflection is about lambda g^2 / 2, so the relrod factor exp(-(s/w)^2) of any width w is a g^4 term:
    with it the reference's relrod width cancels (docs/indexing.md section 8, robustness)."""
    span = float(np.ptp(g2)) if len(g2) else 0.0
    lo, hi = float(np.min(g2_all)), float(np.max(g2_all))
    for k in (3, 2):
        if len(g2) < (7 if k == 3 else 4) or span < MIN_G2_SPAN_INV_NM2:
            continue
        coef, *_ = np.linalg.lstsq(_design(g2, k), resid, rcond=None)
        slope = [coef[1] + (2.0 * coef[2] * x if k == 3 else 0.0) for x in (lo, hi)]  # d/d(g^2), linear in g^2
        if k == 3 or max(slope) <= 0:
            return coef, k
    return np.array([float(np.mean(resid))]), 1


def order_evidence_photometric(ordered_phase, zone_axis, hkl, intensity, intensity_sigma, fundamental, *,
                               voltage_kv: float, usable=None) -> OrderEvidence | None:
    """rho from intensities measured at *every* predicted position of the ordered reading (the superlattice probe,
    :mod:`saed.index.superlattice_probe`), not only at the spots a threshold kept.

    Fundamental positions (`fundamental` True, measured above 3 sigma, `usable`: not saturated) fix
    ln(I / model) = a + b g^2 + c g^4 (:func:`_falloff_fit`; never growing with |g|) and its scatter s. The superlattice
    intensities, faint or even negative, enter linearly: I_i = rho E_i + noise, E_i = model_i exp(a + b g_i^2),
    var_i = (rho E_i)^2 (exp(s^2) - 1) + sigma_i^2 (the spot-to-spot disorder plus the measured photometric
    noise); rho is the weighted least-squares value (two passes), its variance 1 / sum(E^2 / var) plus
    rho^2 times the variance of the fitted line at the superlattice positions; the sigma of ln rho is that of
    the log-normal with this mean and variance, sqrt(ln(1 + var / rho^2)). Averaging all positions
    removes the bias towards bright spots that a detection threshold brings. None with fewer than three
    superlattice or four fundamental positions, or rho <= 0 (no superlattice signal).
    """
    hkl = np.asarray(hkl, np.int64).reshape(-1, 3)
    inten = np.asarray(intensity, float)
    sig = np.asarray(intensity_sigma, float)
    fund = np.asarray(fundamental, bool)
    use = np.ones(len(hkl), bool) if usable is None else np.asarray(usable, bool)
    model = _model_intensity(ordered_phase, zone_axis, hkl, voltage_kv)
    g2 = ordered_phase.lattice.g_inv_nm(hkl) ** 2
    fin = np.isfinite(inten) & np.isfinite(sig) & (model > 0)
    f = fin & fund & use & (inten > 3.0 * sig)
    s_ = fin & ~fund
    n_f, n_s = int(f.sum()), int(s_.sum())
    if n_f < 4 or n_s < 3:
        return None
    resid = np.log(inten[f] / model[f])
    coef, k = _falloff_fit(g2[f], resid, np.concatenate([g2[f], g2[s_]]))
    x_f = _design(g2[f], k)
    d_f = resid - x_f @ coef
    scatter = math.sqrt(float(np.sum(d_f ** 2)) / max(n_f - k, 1))
    x_s = _design(g2[s_], k)
    e = model[s_] * np.exp(x_s @ coef)
    i_s, v_noise = inten[s_], sig[s_] ** 2
    rho = float(np.sum(e * i_s) / np.sum(e * e))
    for _ in range(2):
        var = (max(rho, 0.0) * e) ** 2 * (math.exp(scatter ** 2) - 1.0) + v_noise
        rho = float(np.sum(e * i_s / var) / np.sum(e * e / var))
    if rho <= 0:
        return None
    var = (rho * e) ** 2 * (math.exp(scatter ** 2) - 1.0) + v_noise
    w = e * e / var
    c = (w[:, None] * x_s).sum(axis=0) / w.sum()
    line_var = scatter ** 2 * float(c @ np.linalg.pinv(x_f.T @ x_f) @ c)
    rel_var = 1.0 / float(np.sum(w)) / rho ** 2 + line_var
    # the log-normal with rho's mean and variance: its sigma of ln rho (= the relative error while small)
    return OrderEvidence(rho, math.sqrt(math.log1p(rel_var)), n_s, n_f, scatter, photometric=True)
