"""Values of ``saed grain``: the patterns of a series in, the joint solutions and advice out."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from saed.index.values import IndexResult

__all__ = ["GrainPattern", "PatternFit", "GrainSolution", "GrainLookalike", "ThirdPattern", "GrainResult"]


@dataclass(frozen=True)
class GrainPattern:
    """One pattern of the series: its name, holder readings (alpha, beta) in deg, its single-pattern
    result, and the alpha-axis azimuth on its detector (deg from +x toward +y)."""

    image: str
    tilt_deg: tuple[float, float]
    result: IndexResult
    alpha_axis_deg: float = 0.0


@dataclass(frozen=True)
class PatternFit:
    """How one pattern fits a joint solution: the zone on the beam at its readings, the misfit."""

    image: str
    tilt_deg: tuple[float, float]
    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    misfit_deg: float
    single_score: float
    turned: bool
    rms_inv_nm: float
    n_spots: int


@dataclass(frozen=True)
class GrainSolution:
    """A phase and one orientation explaining the patterns in ``patterns`` (``missing``: those it does not)."""

    phase_name: str
    score: float
    orientation_matrix: np.ndarray
    euler_bunge_deg: tuple[float, float, float]
    patterns: tuple[PatternFit, ...]
    missing: tuple[str, ...] = ()

    @property
    def max_misfit_deg(self) -> float:
        return max((p.misfit_deg for p in self.patterns), default=0.0)


@dataclass(frozen=True)
class GrainLookalike:
    """A solution one pattern could not rule out, and what the series says about it."""

    phase_name: str
    relation: str  # 'decided' (the series rules it out) or 'undecided'
    patterns: tuple[str, ...]  # the patterns that alone could not separate it
    evidence: str


@dataclass(frozen=True)
class ThirdPattern:
    """A zone to record next, with the holder readings, where the remaining solutions differ."""

    zone_axis: tuple[int, int, int]
    zone_axis_4: tuple[int, int, int, int] | None
    alpha_deg: float
    beta_deg: float
    text: str


@dataclass(frozen=True)
class GrainResult:
    solutions: tuple[GrainSolution, ...]
    lookalikes: tuple[GrainLookalike, ...]
    third_pattern: ThirdPattern | None
    message: str
    disagreeing: tuple[str, ...]
    patterns: tuple[GrainPattern, ...]
    tolerance_deg: float

    @property
    def best(self) -> GrainSolution | None:
        return self.solutions[0] if self.solutions else None
