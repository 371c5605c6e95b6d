"""Issue 15.18: the simulated diagram marks +x/+y, labels every spot that fits, and shows g1, g2, ratio and angle.

Check values: Si [011], g1 = 11-1, g2 = -11-1, R2/R1 = 1.000 at 70.53 deg (standard-pattern table, shared
check-value sheet section 5; the angle is cos^-1(1/3), written here); Co-hcp [2-1-10], 01-10 and 0002 at 90 deg with
R2/R1 = d(01-10)/d(0002) = 0.21712 / 0.20347 = 1.067 (sheet section 7, from a = 0.25071, c = 0.40695 nm).
"""

import itertools
import math

import numpy as np
import pytest
from matplotlib.text import Text

from saed.crystal import builtin_phase
from saed.report.render_pattern import diagram_figure
from saed.report.text_boxes import renderer_of as _renderer
from saed.simulate.zone import zone_pattern


def _texts(fig):
    r = _renderer(fig)
    fig.canvas.draw()  # lay out legends and annotations as a saved file has them
    return [(t.get_text(), t.get_window_extent(r)) for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]


@pytest.mark.parametrize("phase, zone, rotation, ratio, angle", [
    ("Si", [0, 1, 1], 20.0, 1.000, math.degrees(math.acos(1 / 3))),
    ("Co-hcp", [2, -1, -1, 0], 0.0, 0.21712 / 0.20347, 90.0),
])
def test_diagram_marks_axes_g1_g2_ratio_angle(phase, zone, rotation, ratio, angle):
    zp = zone_pattern(builtin_phase(phase), zone)
    fig = diagram_figure(zp, in_plane_rotation_deg=rotation)
    texts = _texts(fig)
    words = [t for t, _ in texts]
    assert "+x" in words and "+y" in words
    assert "g1" in words and "g2" in words
    caption = next(t for t in words if t.startswith("g1 = "))
    assert f"R2/R1 = d1/d2 = {ratio:.3f}" in caption
    assert f"{angle:.1f}\N{DEGREE SIGN}" in caption
    # no two texts overlap
    for (a, ba), (b, bb) in itertools.combinations(texts, 2):
        assert not (min(ba.x1, bb.x1) - max(ba.x0, bb.x0) > 0.5 and min(ba.y1, bb.y1) - max(ba.y0, bb.y0) > 0.5), (a, b)


def test_every_spot_in_view_is_labelled_when_there_is_room():
    zp = zone_pattern(builtin_phase("Si"), [0, 1, 1])
    fig = diagram_figure(zp, in_plane_rotation_deg=20.0)
    ax = fig.axes[0]
    labelled = [t for t, _ in ax._saed_labels]
    xy = zp.xy_rotated_inv_nm(20.0)
    ext = zp.max_g_inv_nm
    inner = (np.abs(xy) <= 0.92 * ext).all(axis=1) & zp.zolz & (zp.allowed | zp.double_diffraction)
    # the Si [011] pattern is open: every spot well inside the frame gets its label, plus 000, g1 and g2
    assert len(labelled) == int(inner.sum()) + 3
