"""The ``saed grain`` JSON document (docs/contract.md, section "saed grain")."""

from __future__ import annotations

import numpy as np

from saed.index.grain_values import GrainResult
from saed.report.index_json import result_json
from saed.report.json_numbers import json_float as _num, json_ints as _ints

__all__ = ["grain_json"]


def grain_json(res: GrainResult, *, per_pattern: bool = True, calibrations=None, note: str | None = None) -> dict:
    """Solutions (best first), look-alikes, the third pattern to record, and each pattern's own result.

    `calibrations` (``saed grain``): (image path, resolved calibration) of each pattern, written with
    where its calibration came from; `note`: the note on the alpha axis of the series, when there is one.
    """
    sols = []
    for rank, s in enumerate(res.solutions, 1):
        sols.append({
            "rank": rank, "phase": s.phase_name, "score": _num(s.score, 4),
            "orientation_matrix": [[_num(v, 6) for v in row] for row in np.asarray(s.orientation_matrix)],
            "orientation_frame": "crystal Cartesian -> detector frame of the first pattern at readings (0, 0)",
            "euler_bunge_deg": [_num(v, 3) for v in s.euler_bunge_deg],
            "joint": not s.missing, "patterns_not_explained": list(s.missing),
            "max_misfit_deg": _num(s.max_misfit_deg, 3),
            "patterns": [{"image": p.image, "tilt_deg": [_num(v, 3) for v in p.tilt_deg],
                          "zone_axis": _ints(p.zone_axis), "zone_axis_4": _ints(p.zone_axis_4),
                          "misfit_deg": _num(p.misfit_deg, 3), "single_pattern_score": _num(p.single_score, 4),
                          "turned_180": p.turned, "rms_inv_nm": _num(p.rms_inv_nm, 4), "n_spots": p.n_spots}
                         for p in s.patterns],
        })
    t = res.third_pattern
    doc = {
        "solutions": sols,
        "lookalikes": [{"phase": lk.phase_name, "relation": lk.relation, "patterns": list(lk.patterns),
                        "evidence": lk.evidence} for lk in res.lookalikes],
        "third_pattern": None if t is None else {
            "zone_axis": _ints(t.zone_axis), "zone_axis_4": _ints(t.zone_axis_4),
            "tilt_deg": [_num(t.alpha_deg, 2), _num(t.beta_deg, 2)], "text": t.text},
        "message": res.message,
        "patterns_disagreeing": list(res.disagreeing),
        "tolerance_deg": res.tolerance_deg,
        "inputs": [{"image": gp.image, "tilt_deg": list(gp.tilt_deg), "alpha_axis_deg": _num(gp.alpha_axis_deg, 3)}
                   for gp in res.patterns],
    }
    if per_pattern:
        doc["per_pattern"] = [result_json(gp.result, image=gp.image) for gp in res.patterns]
    if calibrations is not None:
        doc["calibrations"] = [{"image": str(path), **r.to_json()} for path, r in calibrations]
    if note:
        doc["notes"] = [note]
    return doc
