"""Values that leave the matcher: one ranked solution per (phase, zone axis), and the result.

All are frozen dataclasses; arrays are read-only. Frames and signs follow
:mod:`saed.simulate.geometry`: U maps crystal Cartesian vectors (x || a, z || c*) to the
detector frame (x || columns, y || rows, z along the beam), and U . [uvw] is parallel to +z.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import StrEnum

import numpy as np

from saed.image.values import MeasuredPattern
from saed.readonly import frozen_array
from saed.units import percent

__all__ = ["IndexedSpot", "Mistilt", "TiltAdvice", "Lookalike", "Solution", "IndexResult", "SpotKind", "SPOT_KINDS",
           "INDEXED_KINDS", "EXPLAINED_KINDS"]


class SpotKind(StrEnum):
    """What a measured spot was explained as (``IndexedSpot.kind``).

    A :class:`enum.StrEnum`: every member *is* its text, so JSON output, CSS class names and
    comparisons such as ``kind == "allowed"`` see the same strings as before the Enum.
    """

    #: a kinematically allowed zero-order Laue-zone reflection
    ALLOWED = "allowed"
    #: kinematically forbidden, but reachable as g1 + g2 of two allowed reflections of the zone
    DOUBLE_DIFFRACTION = "double-diffraction"
    #: kinematically forbidden with no double-diffraction route
    FORBIDDEN = "forbidden"
    #: the projection of a higher-order Laue-zone reflection (thin foils, faults)
    HOLZ_PROJECTION = "holz-projection"
    #: nothing predicted there
    UNINDEXED = "unindexed"


#: Every spot kind, in declaration order.
SPOT_KINDS = tuple(SpotKind)
#: Kinds that count as indexed reflections of the solution (``Solution.n_indexed``).
INDEXED_KINDS = frozenset({SpotKind.ALLOWED, SpotKind.DOUBLE_DIFFRACTION})
#: Kinds with any explanation (``Solution.n_explained``).
EXPLAINED_KINDS = INDEXED_KINDS | {SpotKind.HOLZ_PROJECTION}


@dataclass(frozen=True)
class IndexedSpot:
    """One measured spot and the reflection it was assigned to.

    ``hkl`` is the 3-index reflection of the conventional cell (``hkil`` the 4-index form for
    hexagonal axes, else None); ``kind`` is a :class:`SpotKind`: a kinematically allowed
    zero-order reflection, a forbidden one reachable by double diffraction, a forbidden one with
    no route, the projection of a higher-order Laue-zone reflection (thin foils, faults), or
    nothing at all (``hkl`` None). For a projection ``hkl`` is the 3-D reflection and ``projected_hkl``
    / ``projected_denominator`` the fractional zero-layer position it lands on. ``residual_px`` is the distance to the predicted position.
    """

    spot_index: int
    x_px: float
    y_px: float
    intensity: float
    hkl: tuple[int, int, int] | None
    hkil: tuple[int, int, int, int] | None
    kind: SpotKind
    d_nm_measured: float
    d_nm_calc: float | None
    residual_px: float | None
    intensity_calc: float | None = None
    #: holz-projection spots only: where ``hkl`` lands projected along the zone axis, as integers over
    #: ``projected_denominator`` (fcc [111]: -200 -> (-4 2 2) / 3, a 1/3{422} position; d_nm_calc is its spacing)
    projected_hkl: tuple[int, int, int] | None = None
    projected_denominator: int = 1

    def __post_init__(self):
        if type(self.kind) is not SpotKind:  # a plain string from older callers: checked, then the member
            object.__setattr__(self, "kind", SpotKind(self.kind))

    @property
    def d_error_pct(self) -> float | None:
        if self.d_nm_calc is None:
            return None
        return percent((self.d_nm_measured - self.d_nm_calc) / self.d_nm_calc)


@dataclass(frozen=True)
class Mistilt:
    """Beam tilt off the zone axis estimated from the spot intensities (Laue-circle fit).

    ``tilt_deg``: angle between beam and zone axis. ``laue_center_azimuth_deg``: direction on
    the detector (from +x toward +y) in which the Laue-circle centre lies, i.e. the side of the
    pattern whose spots are brightest. ``laue_center_px``: that centre in detector pixels.
    ``correction_axis_deg``: azimuth of the in-plane axis about which the specimen must turn by
    ``tilt_deg`` (right-handed) to bring the zone back onto the beam. ``alpha_deg``/``beta_deg``:
    the same correction split onto the holder axes, when the alpha axis direction is known.
    ``tilt_sigma_deg``: one-sigma uncertainty of ``tilt_deg``, calibrated on simulated tilts.
    ``reliable`` is True only where the benchmark found the estimate within 25 %
    (:mod:`saed.index.mistilt`); otherwise only ``advice`` is shown.
    """

    tilt_deg: float
    laue_center_azimuth_deg: float
    laue_center_px: tuple[float, float]
    laue_radius_px: float
    correction_axis_deg: float
    reliable: bool
    advice: str
    alpha_deg: float | None = None
    beta_deg: float | None = None
    tilt_sigma_deg: float | None = None


@dataclass(frozen=True)
class TiltAdvice:
    """A tilt that separates two look-alike solutions.

    Tilt the specimen by ``angle_deg`` about the reflection row ``about_hkl`` of the best solution
    (``about_hkl_other`` the same row indexed in the other phase), which lies at
    ``about_azimuth_deg`` on the detector; the best solution then reaches ``target_zone``, the other
    ``other_target_zone`` (either None when that phase reaches no low-index zone there).
    ``angle_deg`` is signed: right-handed about the row direction as drawn on the detector.
    ``sense_ambiguous``: one pattern cannot tell the reported orientation from the same crystal
    turned 180 deg about the beam (a zone that is not a two-fold axis); then the same tilt reaches
    ``turned_target_zone`` / ``turned_other_target_zone`` under that other reading (equivalently,
    the reported orientation reaches them with the opposite sense).
    ``holder_readings_deg`` (alpha, beta): the same tilt as holder readings counted from (0, 0), when
    the alpha-axis direction is known (``turned_holder_readings_deg`` for the turned reading).
    """

    angle_deg: float
    about_hkl: tuple[int, ...]
    about_hkl_other: tuple[int, ...] | None
    about_azimuth_deg: float
    target_zone: tuple[int, ...] | None
    other_target_zone: tuple[int, ...] | None
    text: str
    sense_ambiguous: bool = False
    turned_target_zone: tuple[int, ...] | None = None
    turned_other_target_zone: tuple[int, ...] | None = None
    holder_readings_deg: tuple[float, float] | None = None
    turned_holder_readings_deg: tuple[float, float] | None = None


@dataclass(frozen=True)
class Lookalike:
    """A competing solution that fits (nearly) as well, or a related phase the pattern rules out.

    ``relation``: 'ambiguous' (the patterns cannot be told apart here), 'close' (a few spots
    decide), 'ruled out' (what this phase would show is missing), or 'identical geometry'
    (uncalibrated: an isostructural phase fits by ratios and angles just as well).
    """

    phase_name: str
    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    score: float
    relation: str
    separating: str
    tilt: TiltAdvice | None = None
    scale_inv_nm_per_px: float | None = None
    #: the separating text with its reciprocal lengths kept as numbers (saed.crystal.notation.UnitText),
    #: for outputs in other units; ``separating`` is its text in 1/nm
    separating_text: object | None = field(default=None, compare=False, repr=False)

    def separating_in(self, units=None, style: str = "plain") -> str:
        """``separating`` with its reciprocal lengths in `units` (a saed.crystal.notation.Units; default nm)."""
        return self.separating if self.separating_text is None else self.separating_text.text(units, style)


@dataclass(frozen=True)
class Solution:
    """One (phase, zone axis, orientation) solution with every measured spot accounted for.

    Attributes
    ----------
    phase_name : str
    zone_axis : (3,) reduced [uvw] of the conventional cell, pointing along the beam (U [uvw] || +z)
    zone_axis_4 : [UVTW] for hexagonal axes, else None
    orientation_matrix : (3, 3) U, crystal Cartesian -> detector frame
    in_plane_rotation_deg : phi in U = Rz(phi) R0(uvw) (:mod:`saed.simulate.geometry`)
    scale_inv_nm_per_px : the refined detector scale (the implied one when uncalibrated)
    score : figure of merit in 0..1, higher is better (docs/indexing.md)
    indexed : one :class:`IndexedSpot` per measured spot, in the measured order
    mean_d_error_pct : mean |d_meas - d_calc| / d_calc over the allowed, indexed spots, percent
    mean_angle_error_deg : mean angle between measured and predicted spot directions, degrees
    mistilt : :class:`Mistilt` or None
    sense_ambiguous_180 : True when this one pattern cannot tell the orientation from the same
        crystal turned 180 deg about the beam (the zone is not a two-fold axis of the Laue group);
        None when not determined
    notes : short sentences for the microscopist
    lookalikes : :class:`Lookalike` entries, most dangerous first
    implied_camera_length_mm : from the refined scale and the pixel pitch, when known
    scale_error_pct : refined minus calibrated scale, percent of calibrated (None uncalibrated)
    terms : the parts of the figure of merit (name, value)
    predicted_xy_px, predicted_hkl, predicted_intensity, predicted_kind : the simulated
        zero-order pattern of this solution on the detector (for overlays): positions, indices,
        kinematic intensity (strongest = 1) and kind ('allowed' or 'double-diffraction')
    """

    phase_name: str
    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    orientation_matrix: np.ndarray
    in_plane_rotation_deg: float
    scale_inv_nm_per_px: float
    score: float
    indexed: tuple[IndexedSpot, ...]
    mean_d_error_pct: float
    mean_angle_error_deg: float
    mistilt: Mistilt | None = None
    notes: tuple[str, ...] = ()
    sense_ambiguous_180: bool | None = None
    lookalikes: tuple[Lookalike, ...] = ()
    structure_type: str = ""
    implied_camera_length_mm: float | None = None
    scale_error_pct: float | None = None
    terms: tuple[tuple[str, float], ...] = ()
    predicted_xy_px: np.ndarray = field(default_factory=lambda: frozen_array(np.zeros((0, 2)), float))
    predicted_hkl: np.ndarray = field(default_factory=lambda: frozen_array(np.zeros((0, 3)), np.int64))
    predicted_intensity: np.ndarray = field(default_factory=lambda: frozen_array(np.zeros(0), float))
    predicted_kind: tuple[SpotKind, ...] = ()

    def __post_init__(self):
        object.__setattr__(self, "orientation_matrix", frozen_array(self.orientation_matrix, float))
        object.__setattr__(self, "predicted_xy_px", frozen_array(np.reshape(self.predicted_xy_px, (-1, 2)), float))
        object.__setattr__(self, "predicted_hkl", frozen_array(np.reshape(self.predicted_hkl, (-1, 3)), np.int64))
        object.__setattr__(self, "predicted_intensity", frozen_array(self.predicted_intensity, float))
        object.__setattr__(self, "zone_axis", tuple(int(v) for v in self.zone_axis))
        if self.zone_axis_4 is not None:
            object.__setattr__(self, "zone_axis_4", tuple(int(v) for v in self.zone_axis_4))
        object.__setattr__(self, "indexed", tuple(self.indexed))
        object.__setattr__(self, "notes", tuple(self.notes))
        object.__setattr__(self, "lookalikes", tuple(self.lookalikes))

    @property
    def n_indexed(self) -> int:
        """Spots explained as allowed or double-diffraction reflections."""
        return sum(1 for s in self.indexed if s.kind in INDEXED_KINDS)

    @property
    def n_explained(self) -> int:
        """Spots with any explanation (also projected higher-order Laue-zone spots)."""
        return sum(1 for s in self.indexed if s.kind in EXPLAINED_KINDS)

    def term(self, name: str) -> float | None:
        return dict(self.terms).get(name)


@dataclass(frozen=True)
class IndexResult:
    """The ranked solutions for one measured pattern (best first), and a message when there are none.

    ``message`` is one line for the microscopist (empty when the best solution needs no comment);
    ``near_miss`` is the closest solution below the acceptance threshold when ``solutions`` is empty.
    ``implied_scale_inv_nm_per_px`` is the scale of the best solution (useful when uncalibrated).
    ``crystals`` (:class:`saed.index.crystals.Crystal`): every crystal found in the pattern, the best
    solution first (one entry for a single crystal, none without a solution);
    ``orientation_relationships`` between crystals[0] and each further crystal;
    ``cross_double_diffraction``: spots explained as g1 + g2 across two crystals.
    """

    measured: MeasuredPattern
    solutions: tuple[Solution, ...]
    message: str = ""
    near_miss: Solution | None = None
    notes: tuple[str, ...] = ()
    n_candidates: int = 0
    phases: tuple[str, ...] = ()
    crystals: tuple = ()
    orientation_relationships: tuple = ()
    cross_double_diffraction: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "solutions", tuple(self.solutions))
        object.__setattr__(self, "crystals", tuple(self.crystals))
        object.__setattr__(self, "orientation_relationships", tuple(self.orientation_relationships))
        object.__setattr__(self, "cross_double_diffraction", tuple(self.cross_double_diffraction))
        object.__setattr__(self, "notes", tuple(self.notes))
        object.__setattr__(self, "phases", tuple(self.phases))

    @property
    def best(self) -> Solution | None:
        return self.solutions[0] if self.solutions else None

    @property
    def implied_scale_inv_nm_per_px(self) -> float | None:
        b = self.best or self.near_miss
        return None if b is None else b.scale_inv_nm_per_px
