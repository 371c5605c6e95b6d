"""Which phases made these rings: every candidate alone, then the best pairs as two-phase mixtures.

Each candidate phase is matched alone (:func:`saed.rings.match.match_scale`). The strongest
candidates are then tried in pairs at a common scale; a pair is kept only when each of its phases
explains rings (gives at least half their predicted intensity) that its partner alone leaves
unexplained -- at least two, or one carrying 8 % of the ring signal; otherwise the second phase is
a look-alike of the first, not a second phase -- and it must beat both of its phases alone by a
clear margin
(:data:`MIXTURE_GAIN`). Solutions of both kinds are ranked together by their score.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from itertools import combinations
from typing import Sequence

import numpy as np

from saed.crystal.phase import Phase
from saed.errors import InputError
from saed.rings.match import ObservedRings, RingMatch, match_scale
from saed.units import percent

__all__ = ["RingIdentification", "identify_phases", "MIXTURE_GAIN"]

logger = logging.getLogger(__name__)

#: A mixture must score this much above the better of its two phases alone.
MIXTURE_GAIN = 0.05
#: Phases alone that are tried in pairs (the best by score).
PAIR_POOL = 10
#: Rings a phase of a mixture must explain that its partner cannot ...
MIN_UNIQUE_RINGS = 2
#: ... or one such ring carrying at least this share of the ring signal (sqrt-intensity weighted).
MIN_UNIQUE_SIGNAL = 0.08


def _own_evidence(obs: ObservedRings, mix: RingMatch, p: int, partner_alone: RingMatch) -> bool:
    """Does phase p of the mixture explain rings its partner alone cannot? (at least two, or one strong)"""
    sq = np.sqrt(obs.intensity)
    mine = [i for i in range(len(mix.ring_lines))
            if mix.ring_share[i, p] >= 0.5 and not partner_alone.ring_lines[i]]
    signal = float(sq[mine].sum() / sq.sum()) if mine else 0.0
    return len(mine) >= MIN_UNIQUE_RINGS or (len(mine) >= 1 and signal >= MIN_UNIQUE_SIGNAL)


@dataclass(frozen=True)
class RingIdentification:
    """Ranked hypotheses (best first) and notes for a microscopist."""

    solutions: tuple[RingMatch, ...]
    calibrated: bool
    notes: tuple[str, ...] = field(default=())


def identify_phases(obs: ObservedRings, phases: Sequence[Phase], *, scale_inv_nm_per_px: float | None = None,
                    scale_sigma_rel: float = 0.003, tol_rel: float = 0.01, top: int = 5,
                    mixtures: bool = True, progress=None) -> RingIdentification:
    """Rank candidate phases (and two-phase mixtures) for the measured rings.

    Parameters
    ----------
    obs : measured rings
    phases : candidate phases
    scale_inv_nm_per_px : detector scale from a calibration (None: ratios only, scale fitted per phase)
    scale_sigma_rel : relative uncertainty of that scale
    tol_rel : largest relative radius misfit of a ring match
    top : solutions returned
    mixtures : also try pairs of phases
    progress : optional callback ``progress(done, total, text)``
    """
    phases = list(phases)
    if not phases:
        raise InputError("no candidate phases")
    if len(obs) < 2:
        raise InputError(f"only one ring (r = {obs.radius_px[0]:.1f} px): phase identification needs at least two rings")
    singles: list[tuple[RingMatch, list[RingMatch]]] = []
    kw = dict(scale_inv_nm_per_px=scale_inv_nm_per_px, scale_sigma_rel=scale_sigma_rel, tol_rel=tol_rel)
    for k, ph in enumerate(phases):
        if progress:
            progress(k, len(phases), ph.name)
        res = match_scale(obs, [ph], n_best=2, **kw)
        if res:
            singles.append((res[0], res))
    singles.sort(key=lambda t: -t[0].score)
    solutions = [t[0] for t in singles]
    notes = []
    if mixtures and len(singles) >= 2:
        pool = [t for t in singles[:PAIR_POOL] if t[0].n_matched >= MIN_UNIQUE_RINGS]
        best_alone = {t[0].phases[0].name: t[0].score for t in singles}
        for (a, ra), (b, rb) in combinations(pool, 2):
            seeds = [m.scale_inv_nm_per_px for m in ra + rb]
            res = match_scale(obs, [a.phases[0], b.phases[0]], n_best=1, seeds=seeds, **kw)
            if not res:
                continue
            mix = res[0]
            if min(mix.amounts) <= 0 or not (_own_evidence(obs, mix, 0, b) and _own_evidence(obs, mix, 1, a)):
                continue
            if mix.score < max(best_alone[a.phases[0].name], best_alone[b.phases[0].name]) + MIXTURE_GAIN:
                continue
            solutions.append(mix)
    if progress:
        progress(len(phases), len(phases), "done")
    solutions.sort(key=lambda m: -m.score)
    if scale_inv_nm_per_px is None:
        notes.append("no calibration: phases were matched by ring-radius ratios alone, so phases of one structure "
                     "type (e.g. Au, Al, Cu) cannot be told apart; give --calibration or --scale")
    if solutions and solutions[0].explained < 0.8:
        notes.append(f"the best solution leaves {percent(1 - solutions[0].explained):.0f} % of the ring signal "
                     "unexplained (sqrt-intensity weighted): a phase may be missing from the candidates")
    return RingIdentification(tuple(solutions[:top]), scale_inv_nm_per_px is not None, tuple(notes))
