"""The superlattice probe applied to a solution: is the crystal (or part of the area) ordered, and how much?

Given a solution whose phase has an ordered / disordered partner among the candidate phases (L1_2
Ni3Al and fcc Ni), :func:`probe_order` reads the ordered phase in the solution's orientation (the
fundamental spots fix every superlattice position), measures every predicted position of that reading
in the image (:mod:`saed.index.superlattice_probe`) and

* counts the superlattice family as present only when its combined significance Z reaches
  :data:`~saed.index.superlattice_probe.PRESENT_Z` *and* stands out from the same set turned about the
  centre on this image (:data:`N_DECOYS` decoys): Z above every decoy and at least PRESENT_Z times the
  decoys' scatter where that exceeds 1 (Kikuchi bands, streaks and the halo make the null wider than
  the ideal normal one; measured in docs/indexing.md section 8);
* when present, measures rho (:func:`saed.index.ordering.order_evidence_photometric`) from all
  superlattice and fundamental positions, faint ones included.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from saed.index.candidates import Candidate, SpotSet
from saed.index.ordering import OrderEvidence, _model_intensity, order_evidence_photometric
from saed.index.orientation_relationships import ordered_pair
from saed.index.score import score_candidate
from saed.index.superlattice_probe import PRESENT_Z, amplitude_map, decoy_family_z, family_z, probe_reflections
from saed.index.values import Solution

__all__ = ["OrderProbe", "ProbeContext", "context_for", "probe_order", "N_DECOYS"]

#: Turned copies of the superlattice set measured on the same image as its null.
N_DECOYS = 12
#: Scale tolerance of the ordered reading of a disordered crystal 1 (cells a few per cent apart).
READING_SCALE_TOL = 0.03
#: A combined significance from this up to the threshold is reported as "not significant" in a note.
HINT_Z = 2.5


@dataclass(frozen=True)
class OrderProbe:
    """What the probe found for one solution.

    ``ordered``: the ordered reading in the solution's orientation; ``disordered``: its disordered partner's
    name; ``family_z``: combined significance of the superlattice positions; ``decoy_max`` / ``decoy_sd``: the
    largest and the scatter of the turned sets' Z; ``n_superlattice`` positions probed; ``evidence``: rho
    from the photometry (None when absent or not measurable).
    """

    ordered: Solution
    disordered: str
    family_z: float
    decoy_max: float
    decoy_sd: float
    n_superlattice: int
    present: bool
    evidence: OrderEvidence | None

    @property
    def required_z(self) -> float:
        """The combined significance the family had to reach (:func:`required_z`)."""
        return required_z(self.decoy_sd)

    def text(self) -> str:
        return (f"Superlattice positions of {self.ordered.phase_name} probed in the image ({self.n_superlattice} positions): "
                f"combined significance {self.family_z:.2f} against at most {self.decoy_max:.2f} for the same set turned "
                f"about the centre ({N_DECOYS} turns, scatter {self.decoy_sd:.2f})")


def required_z(decoy_sd: float) -> float:
    """PRESENT_Z, raised to PRESENT_Z times the turned sets' scatter where that exceeds 1 (a structured background
    spreads chance values wider than a unit normal). A family also has to beat every turned set."""
    return PRESENT_Z * max(1.0, decoy_sd) if math.isfinite(decoy_sd) else PRESENT_Z


class ProbeContext:
    """The image and its matched-filter map, made once per pattern (:func:`context_for`)."""

    def __init__(self, image, measured):
        self.image = image
        sizes = np.asarray(measured.spots.size_px, float)
        sizes = sizes[np.isfinite(sizes) & (sizes > 0)]
        self.sigma_px = float(np.median(sizes)) if len(sizes) else 2.0
        self.measured = measured
        self._cache: dict = {}
        self._amap = None

    @property
    def amap(self) -> np.ndarray:
        """The matched-filter map, made at the first probe (most patterns have no ordered partner to probe)."""
        if self._amap is None:
            self._amap = amplitude_map(np.asarray(self.image), self.sigma_px)
        return self._amap


_LAST: list = []


def context_for(image, measured) -> ProbeContext:
    """The :class:`ProbeContext` of this image and pattern, reused while the same two objects come again (the
    further-crystal search runs once per reading of crystal 1; the map and the probes need making once)."""
    if _LAST and _LAST[0].image is image and _LAST[0].measured is measured:
        return _LAST[0]
    ctx = ProbeContext(image, measured)
    _LAST[:] = [ctx]
    return ctx


def _partner(tables, sol: Solution):
    """(ordered phase index or None, disordered table) for `sol`'s phase, or None without a partner."""
    p1 = tables.table(sol.phase_name).phase
    for pi, pt in enumerate(tables.phases):
        pair = ordered_pair(pt.phase, p1)
        if pair is None:
            continue
        if pair[0] == sol.phase_name:
            return None, tables.table(pair[1])
        return pi, tables.table(sol.phase_name)
    return None


def _ordered_reading(tables, spots: SpotSet, measured, sol: Solution, pi: int, rel_pos_tol: float, pitch) -> Solution:
    pt = tables.phases[pi]
    f = pt.phase.lattice.a_nm / tables.table(sol.phase_name).phase.lattice.a_nm
    uvw = tuple(int(v) for v in sol.zone_axis)
    cand = Candidate(pi, 0, 1, uvw, pt.canonical_zone(uvw), np.asarray(sol.orientation_matrix),
                     float(sol.scale_inv_nm_per_px) / f, 1.0)
    out, _ = score_candidate(cand, tables, spots, measured, calibrated_scale=None, length_tol=READING_SCALE_TOL,
                             rel_pos_tol=rel_pos_tol, pixel_pitch_um=pitch)
    return out


def probe_order(ctx: ProbeContext, tables, spots: SpotSet, sol: Solution, *, rel_pos_tol: float = 0.008,
                pitch=None) -> OrderProbe | None:
    """Probe the superlattice positions of `sol` (ordered) or of its ordered partner in its orientation; None when
    its phase has no partner among the candidates or too few positions can be measured."""
    key = (sol.phase_name, tuple(sol.zone_axis), round(float(sol.in_plane_rotation_deg), 3),
           round(float(sol.scale_inv_nm_per_px), 7))
    if key in ctx._cache:
        return ctx._cache[key]
    part = _partner(tables, sol)
    out = None
    if part is not None:
        pi, dis = part
        ordered = sol if pi is None else _ordered_reading(tables, spots, ctx.measured, sol, pi, rel_pos_tol, pitch)
        # the same ordered reading comes from every reading of crystal 1 (Ni, Fe-fcc ... in one orientation)
        okey = (ordered.phase_name, dis.phase.name, tuple(ordered.zone_axis), round(float(ordered.in_plane_rotation_deg) / 0.2),
                round(math.log(float(ordered.scale_inv_nm_per_px)) / 0.002))
        if okey not in ctx._cache:
            ctx._cache[okey] = _probe(ctx, tables, ordered, dis)
        out = ctx._cache[okey]
        if out is not None and pi is not None and out.ordered is not ordered:
            out = replace(out, ordered=ordered)
    ctx._cache[key] = out
    return out


def _probe(ctx: ProbeContext, tables, ordered: Solution, dis) -> OrderProbe | None:
    measured = ctx.measured
    xy, hkl = np.asarray(ordered.predicted_xy_px, float), np.asarray(ordered.predicted_hkl, np.int64)
    rows = dis.rows_of(hkl)
    fund = np.array([r >= 0 and bool(dis.allowed[r]) for r in rows], bool)
    if (~fund).sum() < 3 or fund.sum() < 4:
        return None
    det = np.asarray(measured.spots.xy_px, float).reshape(-1, 2)
    exclude = np.vstack([det, xy])
    allp = probe_reflections(ctx.amap, xy, center_px=measured.center_px, sigma_px=ctx.sigma_px, exclude_xy_px=exclude)
    # fundamentals next to a saturated detected spot measure low: not used for the fall-off
    usable = np.ones(len(xy), bool)
    sat = np.asarray(measured.spots.saturated, bool)
    if sat.any():
        d = np.linalg.norm(xy[:, None, :] - det[sat][None, :, :], axis=2).min(axis=1)
        usable = d > 3.0
    phase = tables.table(ordered.phase_name).phase
    voltage = measured.calibration.voltage_kv if measured.calibration is not None else 200.0
    model = _model_intensity(phase, ordered.zone_axis, hkl, voltage)
    g2 = phase.lattice.g_inv_nm(hkl) ** 2
    f = fund & usable & np.isfinite(allp.intensity) & (allp.intensity > 3.0 * allp.intensity_sigma) & (model > 0)
    b = 0.0
    if f.sum() >= 4 and float(np.ptp(g2[f])) > 0:
        coef, *_ = np.linalg.lstsq(np.stack([np.ones(f.sum()), g2[f]], 1), np.log(allp.intensity[f] / model[f]), rcond=None)
        b = min(float(coef[1]), 0.0)
    sup = ~fund & (model > 0)
    if sup.sum() < 3:
        return None
    expected = model[sup] * np.exp(b * g2[sup])
    # the superlattice positions were measured above, against the same null points
    fz = family_z(allp.z[sup], allp.intensity_sigma[sup], expected)
    if not math.isfinite(fz):
        return None
    decoys = np.zeros(0)
    if fz >= HINT_Z:  # below it nothing is claimed or noted: the turned sets need not be measured
        decoys = decoy_family_z(ctx.amap, xy[sup], center_px=measured.center_px, sigma_px=ctx.sigma_px,
                                exclude_xy_px=exclude, expected=expected, n_decoys=N_DECOYS)
        decoys = decoys[np.isfinite(decoys)]
    d_max = float(decoys.max()) if len(decoys) else float("nan")
    d_sd = float(np.std(decoys)) if len(decoys) >= 3 else float("nan")
    present = len(decoys) >= N_DECOYS // 2 and fz > d_max and fz >= required_z(d_sd)
    ev = None
    if present:
        ev = order_evidence_photometric(phase, ordered.zone_axis, hkl, allp.intensity, allp.intensity_sigma, fund,
                                        voltage_kv=voltage, usable=usable)
    return OrderProbe(ordered, dis.phase.name, fz, d_max, d_sd, int(sup.sum()), present, ev)
