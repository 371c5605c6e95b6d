"""The matcher: rank (phase, zone axis, orientation) solutions for a measured pattern.

Above :mod:`saed.image` (the measured pattern) and :mod:`saed.simulate` (what each phase shows); below
:mod:`saed.report`, which writes the results. Tables (:mod:`~saed.index.tables`) and their reach
(:mod:`~saed.index.reach`), candidates, scoring, look-alikes, mistilt, further crystals and their
orientation relationships, one grain from several patterns (``grain*.py``), the ratio method.

>>> from saed.crystal import builtin_phase
>>> tables = prepare_phases([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")])
>>> len(tables)
2
"""

from saed.index.match import index_image, index_pattern
from saed.index.tables import IndexTables, PhaseIndexTable, prepare_phases
from saed.index.values import IndexedSpot, IndexResult, Lookalike, Mistilt, Solution, TiltAdvice

__all__ = ["prepare_phases", "index_pattern", "index_image", "IndexTables", "PhaseIndexTable", "Solution",
           "IndexResult", "IndexedSpot", "Lookalike", "Mistilt", "TiltAdvice"]
