"""Kinematic zone-axis patterns: a selection and a projection of the cached reflection table.

A :class:`ZonePattern` lists, for one phase, one zone axis [uvw] and one beam direction (on the
zone or tilted off it), the zero-order Laue-zone (ZOLZ) reflections and the higher-order ones
close to the Ewald sphere, up to ``max_g_inv_nm``. No structure factor is summed here: the
reflections and their F come from :func:`saed.crystal.reflection_table` (computed once per phase
and radius), and this module only rotates, selects and weights them.

Conventions (:mod:`saed.simulate.geometry`): the zone axis points along the beam, from the
specimen toward the detector; positions are in the detector frame of the beam (x along increasing
column, y along increasing row) for in-plane rotation 0; reciprocal lengths carry no 2 pi.

Physics
-------
* Wave number k = 1/lambda (relativistic, :func:`saed.physics.electron_wavelength_nm`); the
  Ewald sphere passes through 000 and has its centre at -k b, b the unit beam direction.
* Excitation error, exact: s_g is the distance from g to the sphere measured along the beam,
  s_g = sqrt(k^2 - |g_perp|^2) - k - g_par, with g_par = g.b and g_perp the part normal to b.
  s_g > 0 inside the sphere (the usual sign: s < 0 for ZOLZ points on the zone axis).
* Kinematic intensity I_g = |F_g|^2 sinc^2(pi t s_g), sinc(x) = sin(x)/x: the shape factor of a
  parallel-sided foil of thickness t (the relrod), e.g. Williams & Carter, *Transmission Electron
  Microscopy* (2009), ch. 17; Hirsch, Howie, Nicholson, Pashley & Whelan, *Electron Microscopy of
  Thin Crystals* (1965), ch. 4. A selected area is never one exact thickness (wedge-shaped foils,
  bending, beam convergence), and the exact sinc^2 has zeros that would wipe out strong low-order
  spots (fcc 200 in [011] at t = 50 nm). By default the shape factor is therefore averaged over a
  uniform thickness range t (1 +/- w), w = ``thickness_spread`` = 0.5, which has the closed form
  <sin^2(pi s t)> = 1/2 - [sin(2 pi s t2) - sin(2 pi s t1)] / (4 pi s (t2 - t1)), divided by
  (pi s t)^2; w = 0 gives the exact sinc^2 of a parallel-sided foil.
* Laue zones: n = h u + k v + l w is the layer index of reflection hkl along [uvw]. With the zone
  along the beam the sphere bends toward -b, so it meets the layers n < 0. The reciprocal layers
  that hold reciprocal-lattice points are 1/|r_uvw| apart, times p when r_uvw/p is itself a
  lattice vector of the centred lattice (fcc [011]: p = 2, so only n = 0, +-2, +-4 ... are
  populated). Layers are numbered as the trade numbers them, counting populated layers only:
  ``laue_zone`` = -n / p, so the first-order Laue zone (FOLZ), the first populated layer above
  the ZOLZ, has ``laue_zone`` = 1 in every zone, fcc [011] included; the FOLZ ring radius is
  R = sqrt(2 k H - H^2) with H = p/|r_uvw| (the sphere at depth H below the ZOLZ plane).
* Double diffraction: a kinematically forbidden ZOLZ reflection g is marked when g = g1 + g2 with
  g1, g2 allowed ZOLZ reflections of the same pattern (the shortest such route is kept). Positions
  that the lattice centring removes are not reciprocal-lattice points at all and are not listed;
  positions forbidden by a glide, a screw or the site occupation are listed with intensity 0.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from saed.crystal.lattice import reduce_indices
from saed.crystal.miller import direction_from_4, direction_to_4, plane_from_4, plane_to_4
from saed.crystal.phase import Phase
from saed.crystal.reflections import ReflectionTable, reflection_table
from saed.crystal.symmetry import space_group
from saed.errors import InputError
from saed.physics import check_voltage_kv, electron_wavelength_nm
from saed.readonly import freeze_in_place, frozen_array
from saed.simulate.geometry import check_zone_axis, orientation_matrix, unit

__all__ = ["ZonePattern", "zone_pattern", "zone_axis_3", "plane_3", "centring_translations",
           "layer_multiplicity", "folz_ring_radius_inv_nm", "tilted_beam", "rotate_xy"]

logger = logging.getLogger(__name__)

#: Largest beam tilt off the zone accepted, degrees (beyond this "zone pattern" means nothing).
MAX_TILT_DEG = 60.0


# ---------------------------------------------------------------------- index helpers
def zone_axis_3(phase: Phase, zone_axis) -> np.ndarray:
    """The reduced 3-index zone axis [uvw] of `phase` from 3 or (hexagonal axes only) 4 indices.

    Raises InputError for [000], non-integers, NaN, a 4-index zone of a non-hexagonal phase or a
    4-index zone with U + V + T != 0.

    >>> from saed.crystal import builtin_phase
    >>> zone_axis_3(builtin_phase("Co-hcp"), [2, -1, -1, 0]).tolist()
    [1, 0, 0]
    >>> zone_axis_3(builtin_phase("Si"), [0, 2, 2]).tolist()
    [0, 1, 1]
    """
    a = np.asarray(zone_axis, dtype=float).ravel()
    if a.size == 4:
        if not phase.is_hexagonal:
            raise InputError(f"4-index zone {_fmt(a)} given, but {phase.name} does not have hexagonal axes: give 3 indices")
        _check_integers(a, "zone axis")
        if int(round(a[0] + a[1] + a[2])) != 0:
            raise InputError(f"4-index zone [{_fmt(a)}]: U+V+T = {a[0] + a[1] + a[2]:g}, must be 0 (e.g. 2 -1 -1 0)")
        if not np.any(a):
            raise InputError("zone axis [0000] is not a direction: give at least one non-zero index")
        a = direction_from_4(np.rint(a).astype(np.int64)).astype(float)
    return reduce_indices(check_zone_axis(a))


def plane_3(phase: Phase, hkl, *, what: str = "reflection") -> np.ndarray:
    """3-index (hkl) from 3 or (hexagonal axes only) 4 Miller(-Bravais) indices; not 000."""
    a = np.asarray(hkl, dtype=float).ravel()
    if a.size not in (3, 4):
        raise InputError(f"{what} needs 3 indices (or 4 for hexagonal phases), got {a.tolist()}")
    _check_integers(a, what)
    if a.size == 4:
        if not phase.is_hexagonal:
            raise InputError(f"4-index {what} ({_fmt(a)}) given, but {phase.name} does not have hexagonal axes")
        if int(round(a[2])) != -int(round(a[0] + a[1])):
            raise InputError(f"4-index {what} ({_fmt(a)}): i must equal -(h+k)")
        a = plane_from_4(np.rint(a).astype(np.int64)).astype(float)
    h = np.rint(a).astype(np.int64)
    if not np.any(h):
        raise InputError(f"{what} (000) is the central beam, not a direction: give a non-zero hkl")
    return h


def _check_integers(a: np.ndarray, what: str) -> None:
    if not np.all(np.isfinite(a)):
        raise InputError(f"{what} {a.tolist()} has a non-finite index")
    if not np.allclose(a, np.rint(a), atol=1e-9):
        raise InputError(f"{what} indices must be integers, got {a.tolist()}")


def _fmt(a) -> str:
    return " ".join(f"{v:g}" for v in np.asarray(a, float).ravel())


def rotate_xy(xy, in_plane_rotation_deg: float) -> np.ndarray:
    """Detector-plane points (..., 2) turned by `in_plane_rotation_deg` from +x toward +y."""
    p = math.radians(float(in_plane_rotation_deg))
    c, s = math.cos(p), math.sin(p)
    return np.asarray(xy, float) @ np.array([[c, s], [-s, c]])


# ---------------------------------------------------------------------- lattice-centring facts
@lru_cache(maxsize=None)
def centring_translations(space_group_name: str) -> np.ndarray:
    """Fractional lattice-centring translations of the space group (row 0 is 000), shape (m, 3)."""
    ops = space_group(space_group_name).operations()
    den = 24  # gemmi.Op.DEN
    t = np.array(ops.cen_ops, dtype=float) / den
    freeze_in_place(t)
    return t


def layer_multiplicity(phase: Phase, uvw) -> int:
    """p: the largest integer with [uvw]/p a lattice vector of the centred lattice ([uvw] reduced).

    The reciprocal layers normal to [uvw] that hold reciprocal-lattice points are p/|r_uvw| apart.

    >>> from saed.crystal import builtin_phase
    >>> cu = builtin_phase("Cu")
    >>> layer_multiplicity(cu, [0, 0, 1]), layer_multiplicity(cu, [0, 1, 1])
    (1, 2)
    """
    u = np.asarray(uvw, dtype=float)
    cen = centring_translations(phase.space_group)
    best = 1
    for p in range(2, len(cen) + 1):
        frac = (u / p) % 1.0
        d = (frac[None, :] - cen + 0.5) % 1.0 - 0.5
        if np.any(np.all(np.abs(d) < 1e-9, axis=1)):
            best = p
    return best


def folz_ring_radius_inv_nm(*, wave_number_inv_nm: float, layer_spacing_inv_nm: float) -> float:
    """Radius (1/nm) of the ring where the Ewald sphere (radius k) meets a layer H below the ZOLZ.

    (k - H)^2 + R^2 = k^2  ->  R = sqrt(2 k H - H^2).

    >>> round(folz_ring_radius_inv_nm(wave_number_inv_nm=398.74, layer_spacing_inv_nm=2.7663), 2)
    46.89
    """
    k, h = float(wave_number_inv_nm), float(layer_spacing_inv_nm)
    return math.sqrt(max(2.0 * k * h - h * h, 0.0))


@lru_cache(maxsize=64)
def _table_extras(phase: Phase, max_g_inv_nm: float):
    """Per-table facts reused by every zone: centring absences and integer keys for lookups."""
    tbl = reflection_table(phase, max_g_inv_nm)
    cen = centring_translations(phase.space_group)
    hkl = tbl.hkl
    if len(cen) > 1:
        ph = np.exp(2j * np.pi * (hkl @ cen.T))
        centring_absent = np.abs(ph.sum(axis=1)) < 1e-6
    else:
        centring_absent = np.zeros(len(hkl), bool)
    span = int(np.abs(hkl).max()) if len(hkl) else 0
    base = 2 * span + 3
    keys = _keys(hkl, span, base)
    order = np.argsort(keys, kind="stable")
    freeze_in_place(centring_absent, keys, order)
    return centring_absent, keys, order, span, base


def _keys(hkl: np.ndarray, span: int, base: int) -> np.ndarray:
    h = np.asarray(hkl, dtype=np.int64) + span + 1
    return (h[..., 0] * base + h[..., 1]) * base + h[..., 2]


# ---------------------------------------------------------------------- the pattern value
@dataclass(frozen=True, eq=False)
class ZonePattern:
    """A kinematic zone-axis pattern (all arrays read-only, one row per reflection, sorted by |g|).

    Attributes
    ----------
    phase : Phase
    zone_axis : (3,) int, reduced 3-index [uvw] (``zone_axis_4`` gives [UVTW] for hexagonal axes)
    beam_direction_cart : (3,) unit vector of the beam (specimen -> detector), crystal Cartesian frame
    voltage_kv, wavelength_nm, max_g_inv_nm, thickness_nm : float
    tilt_deg : float, angle between the beam and the zone axis
    tilt_toward_hkl : (3,) int or None, the reflection whose side of the pattern the tilt excites
    orientation_matrix : (3, 3) U, crystal Cartesian -> detector frame of the (tilted) beam,
        in-plane rotation 0; equal to ``geometry.orientation_matrix(lattice, zone, 0)`` on the zone
    hkl : (N, 3) int
    g_inv_nm : (N,) |g| = 1/d
    xy_inv_nm : (N, 2) detector-plane position (1/nm) for in-plane rotation 0
    excitation_error_inv_nm : (N,) exact s_g, > 0 inside the Ewald sphere
    intensity : (N,) |F|^2 sinc^2(pi t s), strongest non-central reflection = 1, 0 if forbidden
    f_abs : (N,) |F| in nm
    laue_zone : (N,) int, 0 for ZOLZ, +1 (FOLZ), +2 (SOLZ) ... for the populated layers the Ewald
        sphere reaches (layer index n = h.uvw; laue_zone = -n / p, p = ``layer_multiplicity``)
    kinematically_forbidden : (N,) bool, F = 0 (glide, screw or site); centring absences are not listed
    double_diffraction : (N,) bool, forbidden but reachable as g1 + g2 with both allowed, same zone
    dd_route : (N, 2) int, row indices (g1, g2) of that route, -1 where none
    layer_spacing_inv_nm : float, spacing H of the reciprocal layers that hold lattice points (p/|r_uvw|)
    layer_multiplicity : int, p (first layer with lattice points has |n| = p)
    folz_ring_radius_inv_nm : float, radius of the FOLZ ring on the zone axis
    laue_circle_center_xy_inv_nm : (2,) projected centre of the Laue circle (0, 0 on the zone)
    laue_circle_radius_inv_nm : float, radius k sin(tilt) of the circle where the sphere cuts the ZOLZ
    thickness_spread : float, half-width w of the thickness range t (1 +/- w) the shape factor averages
    """

    phase: Phase
    zone_axis: np.ndarray
    beam_direction_cart: np.ndarray
    voltage_kv: float
    wavelength_nm: float
    max_g_inv_nm: float
    thickness_nm: float
    tilt_deg: float
    tilt_toward_hkl: np.ndarray | None
    orientation_matrix: np.ndarray
    hkl: np.ndarray
    g_inv_nm: np.ndarray
    xy_inv_nm: np.ndarray
    excitation_error_inv_nm: np.ndarray
    intensity: np.ndarray
    f_abs: np.ndarray
    laue_zone: np.ndarray
    kinematically_forbidden: np.ndarray
    double_diffraction: np.ndarray
    dd_route: np.ndarray
    layer_spacing_inv_nm: float
    layer_multiplicity: int
    folz_ring_radius_inv_nm: float
    laue_circle_center_xy_inv_nm: np.ndarray
    laue_circle_radius_inv_nm: float
    thickness_spread: float = 0.0

    def __post_init__(self):
        for name in ("zone_axis", "beam_direction_cart", "tilt_toward_hkl", "orientation_matrix", "hkl", "g_inv_nm",
                     "xy_inv_nm", "excitation_error_inv_nm", "intensity", "f_abs", "laue_zone",
                     "kinematically_forbidden", "double_diffraction", "dd_route", "laue_circle_center_xy_inv_nm"):
            a = getattr(self, name)
            if a is None:
                continue
            object.__setattr__(self, name, frozen_array(a))

        n = len(self.hkl)
        for name in ("g_inv_nm", "xy_inv_nm", "excitation_error_inv_nm", "intensity", "f_abs", "laue_zone",
                     "kinematically_forbidden", "double_diffraction", "dd_route"):
            if len(getattr(self, name)) != n:
                raise ValueError(f"ZonePattern.{name} has {len(getattr(self, name))} rows, hkl has {n}")

    def __len__(self) -> int:
        return len(self.hkl)

    # ------------------------------------------------------------- derived views
    @property
    def wave_number_inv_nm(self) -> float:
        return 1.0 / self.wavelength_nm

    @property
    def d_nm(self) -> np.ndarray:
        return 1.0 / self.g_inv_nm

    @property
    def is_hexagonal(self) -> bool:
        return self.phase.is_hexagonal

    @property
    def zone_axis_4(self) -> np.ndarray | None:
        """[UVTW] for hexagonal axes, else None."""
        return direction_to_4(self.zone_axis) if self.is_hexagonal else None

    @property
    def hkil(self) -> np.ndarray | None:
        """(N, 4) Miller-Bravais indices for hexagonal axes, else None."""
        return plane_to_4(self.hkl) if self.is_hexagonal else None

    @property
    def zolz(self) -> np.ndarray:
        """Boolean mask of the zero-order Laue-zone rows."""
        return self.laue_zone == 0

    @property
    def allowed(self) -> np.ndarray:
        return ~self.kinematically_forbidden

    @property
    def tilted(self) -> bool:
        return self.tilt_deg != 0.0

    def xy_rotated_inv_nm(self, in_plane_rotation_deg: float) -> np.ndarray:
        """(N, 2) positions after turning the pattern by `in_plane_rotation_deg` (from +x toward +y)."""
        return rotate_xy(self.xy_inv_nm, in_plane_rotation_deg)

    def laue_circle_xy_inv_nm(self, n: int = 361) -> np.ndarray:
        """(n, 2) detector-plane points of the circle where the Ewald sphere cuts the ZOLZ plane.

        The circle lies in the ZOLZ plane, which is tilted by ``tilt_deg`` to the detector plane, so
        its projection is an ellipse through 000 with axes radius and radius cos(tilt).
        Empty (0, 2) on the zone axis.
        """
        if self.laue_circle_radius_inv_nm <= 0:
            return np.zeros((0, 2))
        u = self.orientation_matrix
        z_c = unit(self.phase.lattice.r_cartesian_nm(self.zone_axis))
        k = self.wave_number_inv_nm
        b = self.beam_direction_cart
        centre = -k * (b - (b @ z_c) * z_c)
        e1 = unit(centre)
        e2 = np.cross(z_c, e1)
        t = np.linspace(0.0, 2.0 * math.pi, n)
        r = self.laue_circle_radius_inv_nm
        pts = centre[None, :] + r * (np.cos(t)[:, None] * e1[None, :] + np.sin(t)[:, None] * e2[None, :])
        return (pts @ u.T)[:, :2]

    def shortest_allowed_pair(self) -> tuple[int, int]:
        """Row indices (i1, i2) of the two shortest non-collinear allowed ZOLZ reflections.

        g1 is the shortest allowed ZOLZ reflection, g2 the shortest allowed one not parallel to g1,
        with its sign chosen so the angle between them is acute (90 deg allowed); the usual pair
        for measuring a zone-axis pattern (ratio R2/R1 and angle). Raises InputError if the pattern
        has fewer than two independent allowed ZOLZ reflections within max_g.
        """
        cand = np.flatnonzero(self.zolz & self.allowed)
        if len(cand) == 0:
            raise InputError(f"{self.phase.name} [{_fmt(self.zone_axis)}]: no allowed reflection within "
                             f"{self.max_g_inv_nm:g} 1/nm; raise max_g")
        g = self.g_inv_nm[cand]
        i1 = int(cand[np.argmin(g)])
        v1 = self.xy_inv_nm[i1]
        best, best_key = -1, None
        for i in cand:
            v = self.xy_inv_nm[i]
            cross = abs(v1[0] * v[1] - v1[1] * v[0])
            if cross <= 1e-6 * self.g_inv_nm[i1] * self.g_inv_nm[i]:
                continue
            dot = float(v1 @ v)
            key = (round(float(self.g_inv_nm[i]), 9), dot < -1e-9, -dot)
            if best_key is None or key < best_key:
                best, best_key = int(i), key
        if best < 0:
            raise InputError(f"{self.phase.name} [{_fmt(self.zone_axis)}]: only one row of allowed reflections "
                             f"within {self.max_g_inv_nm:g} 1/nm; raise max_g")
        return i1, best


# ---------------------------------------------------------------------- building a pattern
def tilted_beam(lattice, uvw, *, tilt_deg: float, toward_hkl) -> tuple[np.ndarray, np.ndarray]:
    """Beam direction (crystal Cartesian unit vector) and U of the tilted beam's frame.

    The beam leaves the zone axis by `tilt_deg` so that the Laue-circle centre moves toward the
    reflection `toward_hkl` (its projection normal to the zone): reflections on that side approach
    the Bragg condition; at tilt = theta_B(g), s_g = 0 exactly. U is the minimal rotation taking
    the tilted beam to +z, applied after ``orientation_matrix(lattice, uvw, 0)``.
    """
    u0 = orientation_matrix(lattice, uvw, 0.0)
    z_c = u0[2]
    if tilt_deg == 0.0:
        return z_c.copy(), u0
    g = lattice.g_cartesian_inv_nm(toward_hkl)
    g_perp = g - (g @ z_c) * z_c
    if np.linalg.norm(g_perp) <= 1e-9 * max(np.linalg.norm(g), 1e-30):
        raise InputError(f"tilt toward ({_fmt(toward_hkl)}) is along the zone axis [{_fmt(uvw)}]: "
                         "choose a reflection with a component normal to the zone")
    t_c = unit(g_perp)
    th = math.radians(tilt_deg)
    b = math.cos(th) * z_c - math.sin(th) * t_c
    # Minimal rotation (about z x t in the untilted detector frame) that turns the tilted beam to +z.
    b_det = u0 @ b
    axis = np.cross(b_det, [0.0, 0.0, 1.0])
    s = np.linalg.norm(axis)
    c = float(b_det[2])
    kx = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
    rot = np.eye(3) + kx + kx @ kx * ((1 - c) / (s * s))
    return b, rot @ u0


def zone_pattern(phase: Phase, zone_axis, *, voltage_kv: float = 200.0, max_g_inv_nm: float = 10.0,
                 tilt_deg: float = 0.0, tilt_toward_hkl=None, thickness_nm: float = 50.0,
                 include_holz: bool = True, max_excitation_error_inv_nm: float | None = None,
                 thickness_spread: float = 0.5) -> ZonePattern:
    """The kinematic pattern of `phase` along `zone_axis` (see the module notes for the physics).

    Parameters
    ----------
    phase : Phase
    zone_axis : 3 indices [uvw], or 4 [UVTW] for hexagonal axes; reduced to smallest integers
    voltage_kv : accelerating voltage, kV
    max_g_inv_nm : largest |g| listed, 1/nm (> 0)
    tilt_deg : beam tilt off the zone axis, degrees (0 <= tilt < 60); needs `tilt_toward_hkl`
    tilt_toward_hkl : reflection (3 or 4 indices) toward which the Laue-circle centre moves
    thickness_nm : foil thickness t for the sinc^2 shape factor, nm (> 0)
    thickness_spread : half-width w of the uniform thickness range t (1 +/- w) the shape factor is
        averaged over (0 <= w < 1; 0: exact sinc^2 of one parallel-sided foil)
    include_holz : also list higher-order Laue-zone reflections near the Ewald sphere
    max_excitation_error_inv_nm : |s| limit for those HOLZ reflections (default 1/t, the first
        zero of the shape factor); ZOLZ reflections are always listed

    Returns
    -------
    ZonePattern

    Raises
    ------
    InputError for a bad zone, bad indices, max_g <= 0, thickness <= 0 or a bad tilt.

    Examples
    --------
    >>> from saed.crystal import builtin_phase
    >>> zp = zone_pattern(builtin_phase("Si"), [0, 1, 1])
    >>> i1, i2 = zp.shortest_allowed_pair()
    >>> round(float(zp.g_inv_nm[i1]), 3), bool(zp.double_diffraction[zp.kinematically_forbidden].any())
    (3.189, True)
    """
    uvw = zone_axis_3(phase, zone_axis)
    v = check_voltage_kv(voltage_kv)
    g_max = _positive(max_g_inv_nm, "max_g", "1/nm", example="10")
    t_nm = _positive(thickness_nm, "thickness", "nm", example="50")
    try:
        tilt = float(tilt_deg)
    except (TypeError, ValueError):
        raise InputError(f"tilt {tilt_deg!r} is not a number of degrees") from None
    if not math.isfinite(tilt) or not 0.0 <= tilt < MAX_TILT_DEG:
        raise InputError(f"beam tilt {tilt_deg!r} deg must lie in 0..{MAX_TILT_DEG:g} deg "
                         "(give the direction with the tilt-toward reflection)")
    toward = None
    if tilt_toward_hkl is not None:
        toward = plane_3(phase, tilt_toward_hkl, what="tilt-toward reflection")
    if tilt > 0 and toward is None:
        raise InputError(f"a beam tilt of {tilt:g} deg needs a direction: give the reflection to tilt toward")
    if tilt == 0.0:
        toward = None
    try:
        spread = float(thickness_spread)
    except (TypeError, ValueError):
        raise InputError(f"thickness spread {thickness_spread!r} is not a number (a fraction, e.g. 0.5)") from None
    if not math.isfinite(spread) or not 0.0 <= spread < 1.0:
        raise InputError(f"thickness spread must be a fraction from 0 up to 1 (e.g. 0.5), got {thickness_spread!r}")
    s_max = None
    if max_excitation_error_inv_nm is not None:
        s_max = _positive(max_excitation_error_inv_nm, "max excitation error", "1/nm", example="0.02")
    return _zone_pattern_cached(phase, tuple(int(x) for x in uvw), v, g_max, tilt,
                                None if toward is None else tuple(int(x) for x in toward),
                                t_nm, bool(include_holz), s_max, spread)


def shape_factor(s_inv_nm, thickness_nm: float, thickness_spread: float = 0.0) -> np.ndarray:
    """Foil shape factor, 1 at s = 0 for an exact foil: sinc^2(pi t s), or its average over t (1 +/- w).

    >>> round(float(shape_factor(0.0, 50.0)), 6), round(float(shape_factor(1 / 50.0, 50.0)), 6)
    (1.0, 0.0)
    >>> bool(shape_factor(1 / 50.0, 50.0, 0.5) > 0.01)
    True
    """
    s = np.abs(np.asarray(s_inv_nm, dtype=float))
    t = float(thickness_nm)
    w = float(thickness_spread)
    out = np.empty_like(s)
    small = math.pi * t * (1.0 + w) * s < 1e-6
    if w == 0.0:
        x = math.pi * t * s[~small]
        out[~small] = (np.sin(x) / x) ** 2
        out[small] = 1.0
        return out
    t1, t2 = t * (1.0 - w), t * (1.0 + w)
    ss = s[~small]
    mean_sin2 = 0.5 - (np.sin(2 * math.pi * ss * t2) - np.sin(2 * math.pi * ss * t1)) / (4 * math.pi * ss * (t2 - t1))
    out[~small] = mean_sin2 / (math.pi * ss * t) ** 2
    out[small] = 1.0 + w * w / 3.0  # <t^2> / t^2 for a uniform range
    return out


def _positive(value, what: str, unit_: str, *, example: str) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} {value!r} is not a number (give {unit_}, e.g. {example})") from None
    if not math.isfinite(x) or x <= 0:
        raise InputError(f"{what} must be a positive number of {unit_} (e.g. {example}), got {value!r}")
    return x


@lru_cache(maxsize=2048)
def _zone_pattern_cached(phase: Phase, uvw: tuple, voltage_kv: float, max_g_inv_nm: float, tilt_deg: float,
                         toward: tuple | None, thickness_nm: float, include_holz: bool,
                         s_max: float | None, spread: float) -> ZonePattern:
    return _build(phase, np.array(uvw, dtype=np.int64), voltage_kv, max_g_inv_nm, tilt_deg, toward,
                  thickness_nm, include_holz, s_max, spread)


def _build(phase, uvw, voltage_kv, max_g_inv_nm, tilt_deg, toward, thickness_nm, include_holz, s_max, spread):
    lat = phase.lattice
    tbl: ReflectionTable = reflection_table(phase, max_g_inv_nm)
    centring_absent, keys, order, span, base = _table_extras(phase, max_g_inv_nm)
    lam = electron_wavelength_nm(voltage_kv)
    k = 1.0 / lam
    beam, u = tilted_beam(lat, uvw, tilt_deg=tilt_deg, toward_hkl=toward)

    n_layer = tbl.hkl @ uvw
    q = tbl.g_cart_inv_nm @ u.T
    perp2 = q[:, 0] ** 2 + q[:, 1] ** 2
    s = np.sqrt(np.maximum(k * k - perp2, 0.0)) - k - q[:, 2]

    zolz = n_layer == 0
    keep = zolz & ~centring_absent
    if include_holz:
        lim = (1.0 / thickness_nm) if s_max is None else s_max
        keep |= (~zolz) & tbl.allowed & (np.abs(s) <= lim)
    # Forbidden ZOLZ rows: keep those that double diffraction can reach; note the others too.
    rows = np.flatnonzero(keep)
    allowed = tbl.allowed[rows]
    forbidden = ~allowed
    route_tbl = _dd_routes(tbl, rows, zolz[rows] & allowed, zolz[rows] & forbidden, keys, order, span, base)

    p = layer_multiplicity(phase, uvw)
    f_abs = np.abs(tbl.f_nm[rows])
    shape = shape_factor(s[rows], thickness_nm, spread)
    inten = np.where(allowed, tbl.intensity[rows] * shape, 0.0)
    peak = float(inten.max()) if len(inten) else 0.0
    if peak > 0:
        inten = inten / peak

    # dd_route in table indices -> pattern row indices
    pos = np.full(len(tbl), -1, dtype=np.int64)
    pos[rows] = np.arange(len(rows))
    route_rows = route_tbl[rows]
    dd_route = np.where(route_rows >= 0, pos[np.maximum(route_rows, 0)], -1)
    dd = np.all(dd_route >= 0, axis=1)

    r_len = float(lat.length_nm(uvw))
    h_layer = p / r_len
    z_c = unit(lat.r_cartesian_nm(uvw))
    centre3 = -k * (beam - (beam @ z_c) * z_c)
    circle_r = float(k * np.linalg.norm(np.cross(beam, z_c)))

    return ZonePattern(
        phase=phase, zone_axis=uvw, beam_direction_cart=beam, voltage_kv=voltage_kv, wavelength_nm=lam,
        max_g_inv_nm=max_g_inv_nm, thickness_nm=thickness_nm, thickness_spread=spread, tilt_deg=tilt_deg,
        tilt_toward_hkl=None if toward is None else np.array(toward, dtype=np.int64), orientation_matrix=u,
        hkl=tbl.hkl[rows], g_inv_nm=tbl.g_inv_nm[rows], xy_inv_nm=q[rows, :2],
        excitation_error_inv_nm=s[rows], intensity=inten, f_abs=f_abs, laue_zone=-(n_layer[rows] // p),
        kinematically_forbidden=forbidden, double_diffraction=dd, dd_route=dd_route,
        layer_spacing_inv_nm=h_layer, layer_multiplicity=p,
        folz_ring_radius_inv_nm=folz_ring_radius_inv_nm(wave_number_inv_nm=k, layer_spacing_inv_nm=h_layer),
        laue_circle_center_xy_inv_nm=(u @ centre3)[:2], laue_circle_radius_inv_nm=circle_r,
    )


def _dd_routes(tbl, rows, allowed_zolz, forbidden_zolz, keys, order, span, base) -> np.ndarray:
    """(len(tbl), 2) table indices (g1, g2) of the shortest route g = g1 + g2 for forbidden ZOLZ rows."""
    route = np.full((len(tbl), 2), -1, dtype=np.int64)
    a_idx = rows[allowed_zolz]
    f_idx = rows[forbidden_zolz]
    if len(a_idx) == 0 or len(f_idx) == 0:
        return route
    a_keys = np.sort(keys[a_idx])
    a_sorted = a_idx[np.argsort(keys[a_idx])]
    diff = tbl.hkl[f_idx][:, None, :] - tbl.hkl[a_idx][None, :, :]  # g2 = g - g1
    inside = np.all(np.abs(diff) <= span, axis=2)
    dk = _keys(np.clip(diff, -span, span), span, base)
    at = np.searchsorted(a_keys, dk)
    at_c = np.minimum(at, len(a_keys) - 1)
    hit = inside & (a_keys[at_c] == dk)
    g2 = a_sorted[at_c]
    cost = np.where(hit, np.maximum(tbl.g_inv_nm[a_idx][None, :], tbl.g_inv_nm[g2]), np.inf)
    # tie-break on the sum of the two lengths, then on the first index, for a reproducible route
    cost = cost + 1e-6 * np.where(hit, tbl.g_inv_nm[a_idx][None, :] + tbl.g_inv_nm[g2], 0.0)
    best = np.argmin(cost, axis=1)
    ok = np.isfinite(cost[np.arange(len(f_idx)), best])
    route[f_idx[ok], 0] = a_idx[best[ok]]
    route[f_idx[ok], 1] = g2[np.arange(len(f_idx)), best][ok]
    return route
