"""The JSON document of ``saed tilt`` (docs/contract.md, section "saed tilt"; CONTRACT.md: keep every field).

The present orientation and beam, the holder, the target zone's readings (with the closest setting
within range and the nearest reachable zone when it is out of reach) and every zone within reach.
"""

from __future__ import annotations

from saed.crystal.miller import direction_to_4
from saed.simulate.tilt import Holder, TiltPlan, TiltSetting, beam_direction_crystal, family_text

__all__ = ["tilt_json", "setting_json"]


def setting_json(phase, s: TiltSetting) -> dict:
    """One holder setting: the zone (3- and, for hexagonal phases, 4-index), its family and the readings."""
    return {"zone_axis": list(s.zone_axis),
            "zone_axis_4": direction_to_4(s.zone_axis).tolist() if phase.is_hexagonal else None,
            "family": family_text(phase, s.zone_axis), "alpha_deg": round(s.alpha_deg, 3),
            "beta_deg": round(s.beta_deg, 3), "reachable": s.reachable,
            "angle_from_beam_deg": round(s.angle_from_beam_deg, 3),
            "in_plane_rotation_deg": round(s.in_plane_rotation_deg, 3)}


def _target_json(phase, plan: TiltPlan) -> dict:
    doc = setting_json(phase, plan.target)
    if plan.closest is not None:
        c = plan.closest
        doc["closest_setting"] = {"alpha_deg": round(c.alpha_deg, 3), "beta_deg": round(c.beta_deg, 3),
                                  "angle_left_deg": round(c.angle_left_deg, 3)}
    if plan.nearest_reachable is not None:
        doc["nearest_reachable"] = setting_json(phase, plan.nearest_reachable)
    return doc


def tilt_json(phase, u_matrix, holder: Holder, recorded_at_deg, reachable: list[TiltSetting],
              plan: TiltPlan | None) -> dict:
    """The whole ``saed tilt`` document (``target`` null when no target was asked for)."""
    return {"phase": phase.name, "orientation_matrix": [[round(float(v), 9) for v in r] for r in u_matrix],
            "beam_direction_cart": [round(float(v), 9) for v in beam_direction_crystal(u_matrix)],
            "holder": {"alpha_axis_deg": holder.alpha_axis_deg, "alpha_range_deg": list(holder.alpha_range_deg),
                       "beta_range_deg": list(holder.beta_range_deg), "recorded_at_deg": list(recorded_at_deg),
                       "alpha_sign": holder.alpha_sign, "beta_sign": holder.beta_sign},
            "target": None if plan is None else _target_json(phase, plan),
            "reachable_zones": [setting_json(phase, s) for s in reachable]}
