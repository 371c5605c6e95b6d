"""Calibration from the ring pattern of a polycrystalline standard (evaporated Au, Al, or any phase).

The rings are measured (:func:`saed.rings.measure.measure_rings`: centre, ellipse, corrected radii),
the standard's ring lines are matched at a free scale (:func:`saed.rings.match.match_scale`), and
the scale is the weighted least-squares ratio of |g| to corrected radius over the matched rings,
d = 1/g by Bragg's law in the small-angle limit (R d = lambda L). With the pixel pitch the camera
length L = pitch / (scale lambda) and the camera constant lambda L follow.
"""

from __future__ import annotations

import datetime as _dt
import logging
import math
from dataclasses import dataclass, field

import numpy as np

from saed import physics
from saed.calibration import Calibration
from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.rings.match import ObservedRings, RingMatch, match_scale
from saed.rings.measure import RingMeasurement, measure_rings
from saed.units import percent

__all__ = ["RingCalibration", "calibrate_from_rings", "fit_standard", "MIN_EXPLAINED"]

logger = logging.getLogger(__name__)

#: Share of the ring signal (sqrt-intensity weighted) the standard must explain.
MIN_EXPLAINED = 0.75
#: An unexplained ring this strong (relative to the strongest ring) rejects the standard.
STRONG_RING = 0.25
#: A line of the standard predicted this strong (above the detection limit) but not seen rejects it.
STRONG_MISSING = 0.1


@dataclass(frozen=True)
class RingCalibration:
    """A calibration from a ring standard, with the evidence.

    ``ring_rows``: per measured ring (radius_px, hkl label or None, d_nm of the standard line or None,
    d_nm measured, misfit %); ``unfit``: indices of rings the standard does not explain.
    """

    calibration: Calibration
    measurement: RingMeasurement
    match: RingMatch
    residual_pct: float
    ring_rows: tuple[tuple, ...]
    unfit: tuple[int, ...]
    notes: tuple[str, ...] = field(default=())

    @property
    def scale_sigma_rel(self) -> float:
        """1-sigma relative uncertainty of the scale (least squares over the matched rings)."""
        return self.match.scale_sigma_rel


def _fmt_rings(measured: RingMeasurement, idx) -> str:
    return ", ".join(f"{measured.rings.radius_px[i]:.1f}" for i in idx)


def fit_standard(measured: RingMeasurement, standard: Phase, *, tol_rel: float = 0.01) -> RingMatch:
    """Match the standard's rings at a free scale; InputError when they do not fit (saying which rings)."""
    rings = measured.rings
    n = len(rings)
    if n == 0:
        raise InputError("no rings found: nothing to calibrate from")
    if n == 1:
        raise InputError(f"only one ring found (r = {rings.radius_px[0]:.1f} px): a calibration needs at least two "
                         f"rings of {standard.name} to fix the scale and tell its lines apart")
    obs = ObservedRings.from_measurement(measured)
    res = match_scale(obs, [standard], tol_rel=tol_rel, n_best=2)
    if not res:
        raise InputError(f"the rings do not fit {standard.name} at any plausible scale")
    best = res[0]
    unfit = [i for i, a in enumerate(best.ring_lines) if not a]
    strongest = int(np.argmax(obs.intensity))
    if best.explained < MIN_EXPLAINED or best.n_matched < 2 or strongest in unfit:
        ratios = rings.radius_px / rings.radius_px[strongest]
        raise InputError(
            f"the rings do not fit {standard.name}: rings at r = {_fmt_rings(measured, unfit)} px match no "
            f"{standard.name} line (best scale {best.scale_inv_nm_per_px:.5g} 1/nm/px explains {best.n_matched} of {n}; "
            f"radius ratios to the strongest ring {', '.join(f'{v:.3f}' for v in ratios[:8])}"
            f"{', ...' if len(ratios) > 8 else ''}); check --standard"
        )
    lines = best.lines[0]
    strong_unfit = [i for i in unfit if obs.intensity[i] >= STRONG_RING]
    missing = [(j, v) for p_idx, j, v in best.missing if v >= STRONG_MISSING]
    if strong_unfit or missing:
        parts = []
        if strong_unfit:
            parts.append(f"the strong rings at r = {_fmt_rings(measured, strong_unfit)} px match no {standard.name} line")
        if missing:
            parts.append(", ".join(f"{standard.name} {lines.hkl_label(j)} (d = {lines.d_nm[j]:.4f} nm, expected at "
                                   f"r = {lines.g_inv_nm[j] / best.scale_inv_nm_per_px:.1f} px) is missing" for j, _ in missing))
        raise InputError(f"the rings do not fit {standard.name}: " + "; ".join(parts) +
                         f" (best scale {best.scale_inv_nm_per_px:.5g} 1/nm/px); check --standard")
    if len(res) > 1 and res[1].score > 0.9 * best.score:
        logger.warning("a second scale (%.5g 1/nm/px) fits %s almost as well", res[1].scale_inv_nm_per_px, standard.name)
    return best


def calibrate_from_rings(image, standard: Phase, *, voltage_kv: float = 200.0, pixel_pitch_um: float | None = None,
                         mask=None, center_px=None, fit_ellipse: bool = True, tol_rel: float = 0.01,
                         date: str | None = None, allow_spots: bool = False) -> RingCalibration:
    """Calibrate the detector from a ring pattern of `standard`.

    Parameters
    ----------
    image : (ny, nx) counts
    standard : the phase of the film (e.g. ``builtin_phase("Au")``)
    voltage_kv : accelerating voltage (for the camera length and constant)
    pixel_pitch_um : detector pixel pitch; then camera length and camera constant are given
    mask, center_px, fit_ellipse, allow_spots : as :func:`saed.rings.measure.measure_rings`
    tol_rel : largest relative misfit of a ring to a standard line
    date : ISO date-time recorded in the calibration (default: now, local time)

    Raises
    ------
    ImageError, InputError
        no rings, one ring, a spot pattern, rings that do not fit the standard (named).

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> from saed.synth.rings import ring_pattern
    >>> au = builtin_phase("Au")
    >>> pat = ring_pattern([au], shape_px=(512, 512), scale_inv_nm_per_px=0.04, rng=0)
    >>> cal = calibrate_from_rings(pat.image, au, pixel_pitch_um=14.0).calibration
    >>> abs(cal.scale_inv_nm_per_px / 0.04 - 1) < 1e-3
    True
    """
    v = physics.check_voltage_kv(voltage_kv)
    measured = measure_rings(image, mask=mask, center_px=center_px, fit_ellipse=fit_ellipse, allow_spots=allow_spots,
                             spots_advice="for a single-crystal standard give its zone axis, --zone U V W")
    best = fit_standard(measured, standard, tol_rel=tol_rel)
    s = best.scale_inv_nm_per_px
    rows, unfit, deltas = [], [], []
    lines = best.lines[0]
    for i, a in enumerate(best.ring_lines):
        r = float(measured.rings.radius_px[i])
        d_meas = 1.0 / (r * s)
        if a:
            j = max(a, key=lambda m: lines.intensity[m[1]])[1]
            d_std = float(lines.d_nm[j])
            dpct = percent(float(best.ring_delta_rel[i]))
            rows.append((r, "/".join(lines.hkl_label(m[1]) for m in a), d_std, d_meas, dpct))
            deltas.append(best.ring_delta_rel[i])
        else:
            rows.append((r, None, None, d_meas, None))
            unfit.append(i)
    residual_pct = percent(float(np.sqrt(np.mean(np.square(deltas))))) if deltas else float("nan")
    notes = list(measured.notes)
    if unfit:
        notes.append(f"rings at r = {_fmt_rings(measured, unfit)} px do not fit {standard.name} and were left out "
                     "(contamination, a second phase or the support film?)")
    for p_idx, j_idx, v_rel in best.missing:
        if v_rel > 0.05:
            notes.append(f"{standard.name} {lines.hkl_label(j_idx)} (d = {lines.d_nm[j_idx]:.4f} nm) expected but not seen")
    if date is None:
        date = _dt.datetime.now().astimezone().isoformat(timespec="seconds")
    cal = Calibration(scale_inv_nm_per_px=s, voltage_kv=v, center_px=measured.center_px, ellipse=measured.ellipse,
                      pixel_pitch_um=pixel_pitch_um, standard=standard.name, date=date, source="rings")
    if not math.isfinite(residual_pct):
        raise InputError(f"no ring of {standard.name} could be matched")
    return RingCalibration(cal, measured, best, residual_pct, tuple(rows), tuple(unfit), tuple(notes))
