"""The demo patterns: a Co-Cr wear-resistant coating whose cobalt grains are fcc or hcp, at 200 kV.

Invented data for the demo only (synthetic patterns from :mod:`saed.synth.kinematic`): 512 x 512
16-bit frames at a camera length of 120 mm with 15 um pixels, each with a calibration sidecar.
The set is chosen to show what the indexer does with the cases a microscopist meets in such a
coating: a clear fcc grain, a clear hcp grain with a double-diffraction spot, the basal hcp
zone, the fcc [112] / hcp [10-10] pair that one pattern cannot separate, and a thin fcc grain
along [111] whose weak extra spots mimic hcp.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from saed import physics
from saed.calibration import CALIBRATION_FORMAT

__all__ = ["DemoPattern", "DEMO_PATTERNS", "DEMO_PHASES", "DEMO_CAMERA_LENGTH_MM", "DEMO_PIXEL_PITCH_UM",
           "demo_scale_inv_nm_per_px", "make_demo_pattern"]

#: Candidate phases of the coating: the two cobalt polymorphs and chromium.
DEMO_PHASES = ("Co-fcc", "Co-hcp", "Cr")
DEMO_VOLTAGE_KV = 200.0
DEMO_CAMERA_LENGTH_MM = 120.0
DEMO_PIXEL_PITCH_UM = 15.0
DEMO_SHAPE = (512, 512)


@dataclass(frozen=True)
class DemoPattern:
    """How one demo pattern is made (and what it shows)."""

    name: str
    phase: str
    zone_axis: tuple[int, ...]
    rotation_deg: float
    tilt_deg: float
    tilt_toward: tuple[int, ...] | None
    double_diffraction: float
    holz_projection: float
    beam_stop: bool
    seed: int
    description: str


DEMO_PATTERNS = (
    DemoPattern("grain_A_fcc", "Co-fcc", (0, 1, 1), 31.0, 0.5, (2, 0, 0), 0.0, 0.0, True, 11,
                "an fcc cobalt grain near [011], the beam 0.5 deg off the zone; beam stop in"),
    DemoPattern("grain_B_hcp", "Co-hcp", (2, -1, -1, 0), 64.0, 0.0, None, 0.004, 0.0, False, 12,
                "an hcp cobalt grain along [2-1-10], with weak 0001 spots from double diffraction"),
    DemoPattern("grain_C_hcp_basal", "Co-hcp", (0, 0, 0, 1), 12.0, 0.0, None, 0.0, 0.0, False, 13,
                "an hcp cobalt grain along [0001]: strong 10-10 spots inside the 11-20 hexagon"),
    DemoPattern("grain_D_fcc_or_hcp", "Co-fcc", (1, 1, 2), 78.0, 0.0, None, 0.0, 0.0, True, 14,
                "an fcc cobalt grain along [112], whose pattern hcp cobalt [10-10] matches to 0.6 %"),
    DemoPattern("grain_E_thin_fcc", "Co-fcc", (1, 1, 1), 5.0, 0.0, None, 0.0, 0.02, False, 15,
                "a thin fcc cobalt grain along [111] with weak extra spots at the 1/3{422} positions"),
)


def demo_scale_inv_nm_per_px() -> float:
    """The demo detector scale (1/nm per px) from its camera length, pixel pitch and voltage."""
    return physics.scale_from_camera_inv_nm_per_px(DEMO_CAMERA_LENGTH_MM, DEMO_PIXEL_PITCH_UM, DEMO_VOLTAGE_KV)


def make_demo_pattern(spec: DemoPattern) -> tuple[np.ndarray, dict]:
    """The 16-bit image and the calibration sidecar (a saed calibration document) of one demo pattern."""
    from saed.crystal import builtin_phase
    from saed.synth.kinematic import synthetic_image
    from saed.synth.detector import BeamStop

    scale = demo_scale_inv_nm_per_px()
    pat, truth = synthetic_image(
        builtin_phase(spec.phase), list(spec.zone_axis), voltage_kv=DEMO_VOLTAGE_KV, scale_inv_nm_per_px=scale,
        in_plane_rotation_deg=spec.rotation_deg, tilt_deg=spec.tilt_deg,
        tilt_toward_hkl=list(spec.tilt_toward) if spec.tilt_toward else None, image_shape=DEMO_SHAPE,
        max_g_inv_nm=13.0, double_diffraction=spec.double_diffraction, holz_projection_intensity=spec.holz_projection,
        beam_stop=BeamStop(angle_deg=235.0, width_px=14.0, transmission=0.0) if spec.beam_stop else None,
        electrons_max=5e4, rng=spec.seed)
    sidecar = {
        "format": CALIBRATION_FORMAT,
        "scale_inv_nm_per_px": scale,
        "voltage_kv": DEMO_VOLTAGE_KV,
        "camera_length_mm": DEMO_CAMERA_LENGTH_MM,
        "pixel_pitch_um": DEMO_PIXEL_PITCH_UM,
        "standard": None,
        "date": None,
        "description": f"Synthetic demo pattern (invented data): {spec.description}. Co-Cr wear coating, 200 kV.",
        "synthetic": {"phase": spec.phase, "zone_axis": list(spec.zone_axis), "in_plane_rotation_deg": spec.rotation_deg,
                      "tilt_deg": spec.tilt_deg, "seed": spec.seed, "generator": "saed.synth.demo_set"},
    }
    del truth
    return np.asarray(pat.image), sidecar
