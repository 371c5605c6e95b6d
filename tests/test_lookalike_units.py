"""Issue 15 leftover: the look-alike notes quote spacings in the units the person chose (--units angstrom).

Check values, with sources:
* Co-hcp a = 0.25071 nm (ICDD 05-0727, from memory, as in tests/test_index_lookalike.py);
  d(10-10) = a sqrt(3) / 2 for a hexagonal cell (1/d^2 = 4 (h^2 + hk + k^2) / (3 a^2), International
  Tables vol. B / any crystallography text, common practice) = 0.217122 nm, so |g(10-10)| =
  4.6057 1/nm = 0.46057 1/Å (1 nm = 10 Å, SI definition).
* Co-fcc a = 0.35447 nm (ICDD 15-0806, from memory): |g(200)| = 2 / a = 5.6422 1/nm = 0.56422 1/Å.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import replace

import pytest

from saed.crystal import builtin_phase
from saed.crystal.notation import UNITS
from saed.index import index_pattern, prepare_phases
from saed.index.lookalike import Relation
from saed.synth.kinematic import synthetic_measured
from saed.report.index_json import result_json
from saed.report.index_summary import format_summary, other_lookalikes, plain_notes
from saed.report.terminal_text import unwrapped

G_HCP_1010_INV_NM = 1.0 / (0.25071 * math.sqrt(3.0) / 2.0)
G_FCC_200_INV_NM = 2.0 / 0.35447


@pytest.fixture(scope="module")
def fcc_011():
    tables = prepare_phases([builtin_phase(n) for n in ("Co-fcc", "Co-hcp", "Cr")])
    m, _ = synthetic_measured(builtin_phase("Co-fcc"), [0, 1, 1], rng=21, max_g_inv_nm=13.0, in_plane_rotation_deg=37.0)
    return index_pattern(m, tables)


def _hcp_note(result, units, style="plain"):
    return next(sep for head, sep, _ in other_lookalikes(result.best, style, units) if "Co-hcp" in head)


def test_lookalike_spacings_follow_angstrom(fcc_011):
    nm = _hcp_note(fcc_011, UNITS["nm"])
    ang = _hcp_note(fcc_011, UNITS["angstrom"], "unicode")
    # 10-10 of hcp, the spot fcc [011] lacks: |g| in nm^-1 and in Å^-1 (same significant figures)
    assert f"10-10 at {G_HCP_1010_INV_NM:.2f}," in nm and "1/nm" in nm
    assert f"10-10 at {G_HCP_1010_INV_NM / 10:.3f}," in ang
    assert f"200 at {G_FCC_200_INV_NM / 10:.3f}," in ang
    assert "1/nm" not in ang and "1/Å" in ang
    # every number is the nm number divided by 10, nothing else in the text changes
    to_nm = re.sub(r"\d+\.\d+", lambda mt: f"{float(mt.group(0)) * 10:.2f}", ang).replace("1/Å", "1/nm")
    assert to_nm == nm


def test_summary_prints_lookalike_spacings_in_the_chosen_units(fcc_011):
    text = format_summary(fcc_011, image="p.tif", units=UNITS["angstrom"])
    line = next(ln for ln in unwrapped(text) if "ruled out: Co-hcp" in ln)
    assert "1/A" in line and "1/nm" not in line and f"{G_HCP_1010_INV_NM / 10:.3f}" in line


def test_json_keeps_nm_text_and_plain_relation_strings(fcc_011):
    """The JSON contract: `separating` in 1/nm whatever --units says; `relation` the same plain string as before."""
    doc = result_json(fcc_011, image="p.tif")
    lk = next(x for x in doc["solutions"][0]["lookalikes"] if x["phase"] == "Co-hcp")
    assert fcc_011.best.lookalikes[0].relation is Relation.RULED_OUT
    assert json.dumps({"relation": lk["relation"]}) == '{"relation": "ruled out"}'
    assert f"10-10 at {G_HCP_1010_INV_NM:.2f}," in lk["separating"] and "1/nm" in lk["separating"]


def test_ambiguous_note_follows_the_units(fcc_011):
    """An ambiguous look-alike is shown through the solution's notes: the note quotes it in the chosen units."""
    best = fcc_011.best
    lk = replace(best.lookalikes[0], relation=Relation.AMBIGUOUS)
    note = f"ambiguous with {lk.phase_name} [-12-10]: {lk.separating}"
    sol = replace(best, lookalikes=(lk,), notes=best.notes + (note,))
    nm_notes = plain_notes(sol, UNITS["nm"])
    a_notes = plain_notes(sol, UNITS["angstrom"])
    assert note in nm_notes
    shown = next(n for n in a_notes if n.startswith("ambiguous with"))
    assert "1/nm" not in shown and f"{G_HCP_1010_INV_NM / 10:.3f}" in shown and "1/A" in shown
