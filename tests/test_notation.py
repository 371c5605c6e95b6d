"""How indices and lengths are written for a person (saed.crystal.notation), against hand-made expectations.

Sources: the combining overline is U+0305 (the Unicode standard, "COMBINING OVERLINE"); the Miller-Bravais
direction relations U = (2u - v)/3, V = (2v - u)/3, T = -(u + v)/3, W = w (Frank (1965) Acta Cryst. 18, 862);
1 nm = 10 Å (SI definition of the ångström); projection of a reciprocal vector onto the plane normal to the
beam, g - (g.t / t.t) t (vector algebra, common practice).
"""

import math
import unicodedata

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from saed.crystal.notation import (UNITS, fraction_text, indices_text, pad, person_text, plane_text, projected_plane,
                                   table_lines, terminal_style, text_width, units_named, wavelength_text, zone_text)
from saed.errors import InputError


def test_overline_is_the_unicode_combining_overline():
    assert unicodedata.name("\u0305") == "COMBINING OVERLINE"
    text = indices_text([2, -1, -1, 0], "unicode")
    assert text == "21\u03051\u03050"
    assert text_width(text) == 4  # the marks take no terminal column


def test_every_medium_marks_negatives_and_plain_keeps_minus_signs():
    assert indices_text([1, -1, 0]) == "1-10"
    assert indices_text([1, -1, 0], "html") == '1<span class="ob">1</span>0'
    assert indices_text([1, -1, 0], "mathtext") == r"$1\,\bar{1}\,0$"
    # two-digit indices are separated, so 17 -13 -4 18 is never read as 1, 7, -1, 3 ...
    assert indices_text([17, -13, -4, 18]) == "17 -13 -4 18"
    assert indices_text([17, -13, -4, 18], "unicode") == "17 1\u03053\u0305 4\u0305 18"
    with pytest.raises(InputError):
        indices_text([1, 0, 0], "latex")


def test_hexagonal_zones_and_planes_are_shown_in_four_indices():
    # Frank (1965): [100] -> [2-1-10], [120] -> [01-10] ... written here by hand from U = (2u - v)/3 etc.
    assert zone_text([1, 0, 0], True) == "[2-1-10]"
    assert zone_text([1, 2, 0], True) == "[01-10]"
    assert zone_text([0, 0, 1], True) == "[0001]"
    assert zone_text([1, 1, 2], False) == "[112]"
    assert zone_text([1, 0, 0], True, "html").startswith("[2<span")
    assert zone_text([1, 1, 2], False, family=True) == "<112>" and zone_text([1, 1, 2], False, "unicode", family=True) == "⟨112⟩"
    # planes: i = -(h + k)
    assert plane_text([1, 0, 1], True) == "10-11" and plane_text([1, 1, 1], False, brackets="plane family") == "{111}"


def test_fcc_111_first_layer_reflections_project_onto_one_third_422():
    # fcc [111]: -200 lies in layer N = -2, 1-1-1 in N = -1; projected along [111]: g - (N/3)(1,1,1)
    a = 0.35447  # any cubic a: the projection of indices does not depend on it
    for hkl in ([-2, 0, 0], [1, -1, -1], [-1, -1, 1], [1, -3, 1]):
        n_layer = sum(hkl)
        by_hand = [3 * h - n_layer for h in hkl]  # 3 * (h - N/3)
        den, ints = projected_plane(np.eye(3) * a * a, hkl, [1, 1, 1])
        assert den == 3 and (ints * 3 // den).tolist() == by_hand
    # and the spacing of that position: d = a / |1/3 (4,2,2)| = 3a / sqrt(24)
    den, ints = projected_plane(np.eye(3) * a * a, [-2, 0, 0], [1, 1, 1])
    assert a / (np.linalg.norm(ints) / den) == pytest.approx(3 * a / math.sqrt(24))


def test_hexagonal_projection_uses_the_metric():
    # Co-hcp along [100] = [2-1-10]: the real axis a = a^2 a* - (a^2/2) b* in reciprocal components, so
    # a* projected normal to a is a* - (a* . a / a . a) a = (1/2) b*  (derived by hand)
    a, c = 0.25071, 0.40695
    g = np.array([[a * a, -a * a / 2, 0], [-a * a / 2, a * a, 0], [0, 0, c * c]])
    den, ints = projected_plane(g, [1, 0, 0], [1, 0, 0])
    assert den == 2 and ints.tolist() == [0, 1, 0]
    # along [001] a first-layer reflection (h k 1) projects onto (h k 0)
    assert projected_plane(g, [1, 0, 1], [0, 0, 1])[1].tolist() == [1, 0, 0]
    with pytest.raises(InputError):
        projected_plane(g, [1, 0, 0], [0, 0, 0])


def test_fraction_prefix_per_medium():
    assert (fraction_text(3), fraction_text(3, "unicode"), fraction_text(1, "unicode")) == ("1/3", "⅓", "")
    assert fraction_text(5, "unicode") == "1/5"  # no vulgar-fraction character: written out


def test_units_keep_significant_figures():
    nm, ang = UNITS["nm"], units_named("angstrom")
    assert units_named("Å") is ang and units_named("A") is ang
    assert nm.length_text(0.217115) == "0.2171" and ang.length_text(0.217115) == "2.171"  # 1 nm = 10 Å
    assert nm.reciprocal_text(4.60566) == "4.606" and ang.reciprocal_text(4.60566) == "0.4606"
    assert ang.label() == "Å" and ang.label("plain") == "A" and ang.inverse_label() == "1/Å"
    assert nm.length_text(None) == "-" and nm.length_text(float("nan")) == "-"
    with pytest.raises(InputError):
        units_named("furlong")


def test_wavelength_is_always_in_pm():
    from scipy import constants as k

    # relativistic lambda = h / sqrt(2 m0 e V (1 + eV / 2 m0 c^2)) at 200 kV (CODATA via scipy.constants)
    v = 200e3
    lam_m = k.h / math.sqrt(2 * k.m_e * k.e * v * (1 + k.e * v / (2 * k.m_e * k.c ** 2)))
    assert wavelength_text(lam_m * 1e9) == "2.5079 pm"


def test_notes_get_overbars_but_keep_numbers():
    note = "tilt 15.8 deg about the 20-2 row (11-20 in Co-hcp): [1-102] at 28.1 deg; -100 px; 2026-12-02; 10 %"
    uni = person_text(note, "unicode")
    assert "20\u0305" not in uni and "202\u0305 row" in uni and "[11\u030502]" in uni and "(112\u03050 in" in uni
    assert "-100 px" in uni and "2026-12-02" in uni and "15.8 deg" in uni  # terminal keeps 'deg'
    assert person_text(note, "plain") == note
    html = person_text("<b> [1-102] at 28.1 deg", "html")
    assert html.startswith("&lt;b&gt;") and '<span class="ob">1</span>' in html and "28.1&deg;" in html


@given(st.lists(st.integers(-40, 40), min_size=3, max_size=4))
def test_every_style_round_trips_to_the_same_indices(vals):
    import re

    uni = indices_text(vals, "unicode")
    wide = max(abs(v) for v in vals) >= 10
    groups = uni.split(" ") if wide else re.findall(r"\d\u0305?", uni)
    back = [-int(g.replace("\u0305", "")) if "\u0305" in g else int(g) for g in groups]
    assert back == vals
    plain = indices_text(vals)
    if max(abs(v) for v in vals) >= 10:
        assert [int(t) for t in plain.split()] == vals
    else:
        assert [int(t) for t in re.findall(r"-?\d", plain)] == vals
    assert text_width(uni) == len(plain.replace("-", ""))


def test_tables_line_up_with_long_zones_and_overbars():
    rows = [["1", indices_text([17, -13, -4, 18], "unicode"), "0.97"], ["2", indices_text([0, 0, 0, 1], "unicode"), "0.5"]]
    lines = table_lines([("rank", ">"), ("zone", "<"), ("score", ">")], rows)
    ends = {text_width(line) for line in lines}
    assert len(ends) == 1  # right-aligned last column ends in one terminal column on every line
    starts = [text_width(line[:line.index(z[:2])]) for line, z in zip(lines[1:], [r[1] for r in rows])]
    assert starts[0] == starts[1]
    assert pad("ab", 4, ">") == "  ab"


def test_terminal_style_follows_the_stream_encoding():
    class S:
        def __init__(self, enc):
            self.encoding = enc

    assert terminal_style(S("UTF-8")) == "unicode" and terminal_style(S("utf_8")) == "unicode"
    assert terminal_style(S("ascii")) == "plain" and terminal_style(S(None)) == "plain"
