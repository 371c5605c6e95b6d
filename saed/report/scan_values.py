"""What a scan map holds: the grid of phases, zone families, figure of merit and orientation colours.

The value types of a scan, shared by the batch that fills them (:mod:`saed.batch.scan`) and the
picture drawn from them (:mod:`saed.report.scan_map`). They live in report/, which batch/ may import,
so the picture never reaches up into the batch. The orientation colours and boundaries are
crystallography and live in :mod:`saed.index.orientmap`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from saed.readonly import frozen_array

__all__ = ["NOT_DONE", "NO_SOLUTION", "ERROR", "family_label", "FamilyCount", "Summary", "ScanMap"]

#: Codes in ScanMap.phase_index for frames without a phase.
NOT_DONE, NO_SOLUTION, ERROR = -1, -2, -3


def family_label(family) -> str:
    """``<11-20>``-style text (ASCII, minus signs before negative indices).

    >>> family_label((1, 1, -2, 0)), family_label((0, 1, 1)), family_label((10, 0, 1))
    ('<11-20>', '<011>', '<10 0 1>')
    """
    from saed.crystal.miller import format_indices

    return f"<{format_indices(family)}>"


@dataclass(frozen=True)
class FamilyCount:
    """How many frames were indexed as `phase` on a zone of `family` (None: phase unknown here)."""

    phase: str
    family: tuple[int, ...] | None
    count: int

    @property
    def label(self) -> str:
        return family_label(self.family) if self.family is not None else "?"


@dataclass(frozen=True)
class Summary:
    """What a batch found: frame counts by status, by phase, and by (phase, zone family)."""

    n_frames: int
    n_ok: int
    n_no_solution: int
    n_error: int
    phases: tuple[tuple[str, int], ...]
    families: tuple[FamilyCount, ...]


@dataclass(frozen=True)
class ScanMap:
    """A scan as a grid: which phase and zone family each position was indexed as.

    ``phase_index[iy, ix]`` indexes ``phases`` or is NOT_DONE / NO_SOLUTION / ERROR;
    ``family_index[iy, ix]`` indexes ``families`` (a FamilyCount each) or is -1.
    Position (iy, ix) holds the frame with sequence number ``iy * nx + ix`` over the inputs
    in order. ``score`` is the figure of merit (NaN where not indexed); ``ipf_rgb`` the
    inverse-pole-figure colour of the beam direction (NaN where not indexed; see
    :mod:`saed.index.orientmap`); ``boundary_right[iy, ix]`` is True where (iy, ix) and
    (iy, ix + 1) are separated by a grain or phase boundary, ``boundary_down`` likewise for
    (iy + 1, ix), at misorientations above ``boundary_deg``.
    """

    shape: tuple[int, int]
    phase_index: np.ndarray
    family_index: np.ndarray
    phases: tuple[str, ...]
    families: tuple[FamilyCount, ...]
    summary: Summary
    score: np.ndarray | None = None
    ipf_rgb: np.ndarray | None = None
    boundary_right: np.ndarray | None = None
    boundary_down: np.ndarray | None = None
    boundary_deg: float = 5.0
    phase_objects: tuple = ()

    def __post_init__(self):
        for name in ("phase_index", "family_index"):
            object.__setattr__(self, name, frozen_array(getattr(self, name), np.int32))
        ny, nx = self.shape
        defaults = {"score": np.full((ny, nx), np.nan), "ipf_rgb": np.full((ny, nx, 3), np.nan),
                    "boundary_right": np.zeros((ny, max(nx - 1, 0)), bool),
                    "boundary_down": np.zeros((max(ny - 1, 0), nx), bool)}
        for name, default in defaults.items():
            v = getattr(self, name)
            object.__setattr__(self, name, frozen_array(default if v is None else v, default.dtype))
