"""Double-tilt holder planning: the (alpha, beta) readings that bring a zone axis onto the beam.

Geometry (detector frame of :mod:`saed.simulate.geometry`: x = columns, y = rows, z along the
beam from the specimen toward the detector):

* The alpha (goniometer) axis lies in the detector plane at ``alpha_axis_deg`` from +x toward +y.
  The beta axis is normal to it in the specimen plane, e_beta = z x e_alpha at alpha = 0, and is
  carried round by the alpha tilt (the beta cradle sits on the alpha rod).
* Positive alpha or beta turns the specimen right-handedly about its axis. The specimen rotation
  for readings (alpha, beta) is H(alpha, beta) = R(e_alpha, alpha) R(e_beta, beta).
* The known orientation U (crystal Cartesian -> detector) was recorded at readings (alpha0, beta0);
  at other readings U(alpha, beta) = H(alpha, beta) H(alpha0, beta0)^T U.
* A zone [uvw] is on the beam when U(alpha, beta) r_uvw is along +z. Either sign of [uvw] gives the
  same kinematic pattern (turned by 180 deg), so both are tried and the smaller tilt is reported.

For the unit vector d = (x, y, z) of the zone in the holder frame (e_alpha, e_beta, z) at zero
tilt, the readings are alpha = asin(y) and beta = atan2(-x, z) (|alpha| <= 90 deg), the one
solution of R(e_beta, beta) d = R(e_alpha, -alpha) z. Sign conventions of real holders differ
between makers: check the sign of each axis once with a known tilt, and flip it with the
holder's sign options if needed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.simulate.families import canonical_zone, interzone_angle_deg, zone_families, zone_label
from saed.simulate.geometry import orientation_matrix, rotation_about_axis, unit
from saed.simulate.zone import zone_axis_3

__all__ = ["Holder", "TiltSetting", "holder_rotation", "orientation_at", "tilt_to_zone", "reachable_zones",
           "check_orientation_matrix", "beam_direction_crystal", "in_plane_rotation_of", "ClosestSetting",
           "closest_setting", "TiltPlan", "plan_tilt"]

#: Start points of the closest-setting search: a grid over the holder's alpha x beta ranges. The
#: bounded optimiser only finds the minimum of the basin it starts in, so it starts from the best
#: grid point; 13 x 11 points are 5 deg apart on the default +-30 / +-25 deg ranges.
CLOSEST_START_ALPHA_POINTS = 13
CLOSEST_START_BETA_POINTS = 11


def _pair(value, what: str) -> tuple[float, float]:
    v = np.asarray(value, dtype=float).ravel()
    if v.size == 1:
        v = np.array([-abs(v[0]), abs(v[0])])
    if v.size != 2 or not np.all(np.isfinite(v)):
        raise InputError(f"{what} range must be one number (+/-) or two numbers (min max) in degrees, got {value!r}")
    lo, hi = float(min(v)), float(max(v))
    if lo > 0 or hi < 0 or hi - lo <= 0 or max(abs(lo), abs(hi)) > 90:
        raise InputError(f"{what} range {lo:g}..{hi:g} deg must include 0 and lie within -90..90 deg")
    return lo, hi


@dataclass(frozen=True)
class Holder:
    """A double-tilt holder: alpha-axis direction on the detector and the two tilt ranges (deg).

    ``alpha_sign`` / ``beta_sign`` = -1 flip an axis whose readings turn the specimen left-handedly.
    """

    alpha_axis_deg: float = 0.0
    alpha_range_deg: tuple[float, float] = (-30.0, 30.0)
    beta_range_deg: tuple[float, float] = (-25.0, 25.0)
    alpha_sign: int = 1
    beta_sign: int = 1

    def __post_init__(self):
        a = float(self.alpha_axis_deg)
        if not math.isfinite(a):
            raise InputError(f"alpha-axis angle {self.alpha_axis_deg!r} is not a finite number of degrees")
        object.__setattr__(self, "alpha_axis_deg", a)
        object.__setattr__(self, "alpha_range_deg", _pair(self.alpha_range_deg, "alpha"))
        object.__setattr__(self, "beta_range_deg", _pair(self.beta_range_deg, "beta"))
        for name in ("alpha_sign", "beta_sign"):
            if getattr(self, name) not in (1, -1):
                raise InputError(f"{name} must be +1 or -1")

    @property
    def alpha_axis(self) -> np.ndarray:
        p = math.radians(self.alpha_axis_deg)
        return np.array([math.cos(p), math.sin(p), 0.0])

    @property
    def beta_axis(self) -> np.ndarray:
        return np.cross([0.0, 0.0, 1.0], self.alpha_axis)

    def reachable(self, alpha_deg: float, beta_deg: float, *, tol_deg: float = 1e-9) -> bool:
        (a0, a1), (b0, b1) = self.alpha_range_deg, self.beta_range_deg
        return a0 - tol_deg <= alpha_deg <= a1 + tol_deg and b0 - tol_deg <= beta_deg <= b1 + tol_deg

    def range_text(self) -> str:
        def one(lo, hi):
            return f"+/-{hi:g}" if lo == -hi else f"{lo:g}..{hi:g}"
        return f"alpha {one(*self.alpha_range_deg)}, beta {one(*self.beta_range_deg)} deg"


def holder_rotation(holder: Holder, alpha_deg: float, beta_deg: float) -> np.ndarray:
    """H(alpha, beta) = R(e_alpha, alpha) R(e_beta, beta): the specimen rotation in the detector frame."""
    return (rotation_about_axis(holder.alpha_axis, holder.alpha_sign * alpha_deg)
            @ rotation_about_axis(holder.beta_axis, holder.beta_sign * beta_deg))


def orientation_at(u_matrix, holder: Holder, alpha_deg: float, beta_deg: float,
                   *, recorded_at_deg: tuple[float, float] = (0.0, 0.0)) -> np.ndarray:
    """U at readings (alpha, beta) from U recorded at readings `recorded_at_deg`."""
    h0 = holder_rotation(holder, *recorded_at_deg)
    return holder_rotation(holder, alpha_deg, beta_deg) @ h0.T @ np.asarray(u_matrix, float)


def check_orientation_matrix(m) -> np.ndarray:
    """A proper rotation matrix from 9 numbers (orthonormalised by SVD); InputError if it is not one."""
    a = np.asarray(m, dtype=float)
    if a.size != 9 or not np.all(np.isfinite(a)):
        raise InputError(f"an orientation matrix needs 9 finite numbers (3 rows of 3), got {a.size}")
    a = a.reshape(3, 3)
    u, _, vt = np.linalg.svd(a)
    r = u @ vt
    if np.abs(a - r).max() > 2e-3:
        raise InputError("the orientation matrix is not a rotation (rows not orthonormal within 0.002)")
    if np.linalg.det(r) < 0:
        raise InputError("the orientation matrix has determinant -1 (a mirror, not a rotation): check its sign")
    return r


def beam_direction_crystal(u_matrix) -> np.ndarray:
    """Unit beam direction (+z of the detector) in the crystal Cartesian frame: U^T z."""
    return np.asarray(u_matrix, float).T @ np.array([0.0, 0.0, 1.0])


def in_plane_rotation_of(u_matrix, lattice, uvw) -> float:
    """In-plane rotation phi (deg) with U ~ Rz(phi) R0(uvw), for U with [uvw] on (or near) the beam."""
    m = np.asarray(u_matrix, float) @ orientation_matrix(lattice, uvw, 0.0).T
    return math.degrees(math.atan2(m[1, 0], m[0, 0]))


@dataclass(frozen=True)
class TiltSetting:
    """Holder readings that put `zone_axis` (signed, 3-index) on the beam."""

    zone_axis: tuple[int, int, int]
    alpha_deg: float
    beta_deg: float
    reachable: bool
    angle_from_beam_deg: float
    in_plane_rotation_deg: float

    @property
    def tilt_size_deg(self) -> float:
        return max(abs(self.alpha_deg), abs(self.beta_deg))


def _solve(u_zero: np.ndarray, holder: Holder, d_cart: np.ndarray) -> tuple[float, float]:
    d = u_zero @ d_cart  # zone in the detector frame at zero readings
    x = float(d @ holder.alpha_axis)
    y = float(d @ holder.beta_axis)
    z = float(d[2])
    alpha = math.degrees(math.asin(max(-1.0, min(1.0, y)))) * holder.alpha_sign
    beta = math.degrees(math.atan2(-x, z)) * holder.beta_sign
    return alpha, beta


def tilt_to_zone(phase: Phase, u_matrix, zone_axis, holder: Holder, *,
                 recorded_at_deg: tuple[float, float] = (0.0, 0.0)) -> TiltSetting:
    """Readings that bring `zone_axis` (3 or 4 indices) onto the beam, the sign with the smaller tilt.

    Of the two signs of the zone, a reachable one is preferred, then the smaller max(|alpha|, |beta|).
    """
    lat = phase.lattice
    uvw = zone_axis_3(phase, zone_axis)
    u = check_orientation_matrix(u_matrix)
    u_zero = holder_rotation(holder, *recorded_at_deg).T @ u
    beam = beam_direction_crystal(u)
    best = None
    for sign in (1, -1):
        z = sign * uvw
        d_cart = unit(lat.r_cartesian_nm(z))
        a, b = _solve(u_zero, holder, d_cart)
        ok = holder.reachable(a, b)
        ang = math.degrees(math.acos(max(-1.0, min(1.0, float(beam @ d_cart)))))
        u_new = orientation_at(u, holder, a, b, recorded_at_deg=recorded_at_deg)
        s = TiltSetting(tuple(int(v) for v in z), a, b, ok, ang, in_plane_rotation_of(u_new, lat, z))
        key = (not ok, s.tilt_size_deg)
        if best is None or key < best[0]:
            best = (key, s)
    return best[1]


def reachable_zones(phase: Phase, u_matrix, holder: Holder, *, max_index: int = 3,
                    recorded_at_deg: tuple[float, float] = (0.0, 0.0),
                    include_unreachable: bool = False) -> list[TiltSetting]:
    """Every zone axis up to `max_index` (all members of each family) within the holder's range.

    Sorted nearest first: by the angle between the present beam and the zone. Each zone appears with
    the sign that needs the smaller tilt.
    """
    out = []
    for fam in zone_families(phase, max_index=max_index):
        seen = set()
        for m in fam.members.tolist():
            key = tuple(m) if tuple(m) > tuple(-x for x in m) else tuple(-x for x in m)
            if key in seen:
                continue
            seen.add(key)
            s = tilt_to_zone(phase, u_matrix, m, holder, recorded_at_deg=recorded_at_deg)
            if s.reachable or include_unreachable:
                out.append(s)
    out.sort(key=lambda s: (s.angle_from_beam_deg, s.tilt_size_deg))
    return out


def family_text(phase: Phase, uvw) -> str:
    """'<011>'-style family label of a zone."""
    return "<" + zone_label(phase, canonical_zone(phase, uvw))[1:-1] + ">"


@dataclass(frozen=True)
class ClosestSetting:
    """The holder readings within range that bring the beam closest to a zone out of reach."""

    alpha_deg: float
    beta_deg: float
    angle_left_deg: float


def closest_setting(phase: Phase, u_matrix, holder: Holder, uvw,
                    recorded_at_deg: tuple[float, float] = (0.0, 0.0)) -> ClosestSetting:
    """(alpha, beta, angle left) of the holder setting within range that brings the beam closest to `uvw`.

    Either sign of the zone counts (the angle is to the line of the zone). A grid over the ranges
    gives the start, scipy's bounded L-BFGS-B refines it.
    """
    from scipy.optimize import minimize

    d = unit(phase.lattice.r_cartesian_nm(uvw))

    def off(x):
        b = beam_direction_crystal(orientation_at(u_matrix, holder, x[0], x[1], recorded_at_deg=recorded_at_deg))
        return -abs(float(b @ d))

    (a0, a1), (b0, b1) = holder.alpha_range_deg, holder.beta_range_deg
    grid = [(a, b) for a in np.linspace(a0, a1, CLOSEST_START_ALPHA_POINTS)
            for b in np.linspace(b0, b1, CLOSEST_START_BETA_POINTS)]
    start = min(grid, key=off)
    res = minimize(off, start, bounds=[(a0, a1), (b0, b1)], method="L-BFGS-B")
    ang = math.degrees(math.acos(min(1.0, -float(res.fun))))
    return ClosestSetting(float(res.x[0]), float(res.x[1]), ang)


@dataclass(frozen=True)
class TiltPlan:
    """How to reach a target zone with the holder.

    ``target``: the readings that put the zone on the beam (they may lie out of range). When out of
    range: ``closest`` is the best the holder can do, and ``nearest_reachable`` a zone within reach
    instead (``same_family`` True when it is of the target's own family, else the reachable zone at
    the smallest angle to the target), or None when no zone up to the index bound is within reach.
    """

    target: TiltSetting
    closest: ClosestSetting | None = None
    nearest_reachable: TiltSetting | None = None
    same_family: bool = False


def plan_tilt(phase: Phase, u_matrix, uvw, holder: Holder, reachable: list[TiltSetting], *,
              recorded_at_deg: tuple[float, float] = (0.0, 0.0)) -> TiltPlan:
    """The plan to reach zone `uvw` (3-index), given the zones within reach (:func:`reachable_zones`)."""
    t = tilt_to_zone(phase, u_matrix, uvw, holder, recorded_at_deg=recorded_at_deg)
    if t.reachable:
        return TiltPlan(t)
    closest = closest_setting(phase, u_matrix, holder, uvw, recorded_at_deg)
    fam = family_text(phase, uvw)
    same = [s for s in reachable if family_text(phase, s.zone_axis) == fam]
    if same:
        return TiltPlan(t, closest, same[0], True)
    if reachable:
        s = min(reachable, key=lambda r: interzone_angle_deg(phase.lattice, r.zone_axis, uvw))
        return TiltPlan(t, closest, s, False)
    return TiltPlan(t, closest)
