"""Issue 15.16: rings output -- a table per ring, a phase legend for the ring colours, a d-spacing axis, no overlaps.

Check values: Co-fcc d(111) = 0.20465 nm, d(200) = 0.17724 nm; Co-hcp d(10-11) = 0.19156 nm, d(10-12) = 0.14847 nm
(shared check-value sheet section 7, from a = 0.35447 nm fcc and a = 0.25071 / c = 0.40695 nm hcp, ICDD cards
recalled there).
"""

import itertools
import re

import numpy as np
import pytest
import tifffile
from matplotlib.text import Text

from saed import physics
from saed.cli import main
from saed.crystal import builtin_phase
from saed.rings.identify import identify_phases
from saed.rings.match import ObservedRings
from saed.rings.measure import measure_rings
from saed.report.rings_plot import rings_figure
from saed.report.text_boxes import renderer_of
from saed.synth.rings import ring_pattern

SCALE = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)


@pytest.fixture(scope="module")
def mixture(tmp_path_factory):
    pat = ring_pattern([builtin_phase("Co-fcc"), builtin_phase("Co-hcp")], shape_px=(640, 640),
                       scale_inv_nm_per_px=SCALE, rng=3)
    path = tmp_path_factory.mktemp("rings") / "mix.tif"
    tifffile.imwrite(path, np.round(pat.image).astype(np.uint16))
    return path, pat.image


def test_terminal_has_one_row_per_ring_with_d_phase_and_hkl(mixture, capsys):
    path, _ = mixture
    assert main(["rings", str(path), "--scale", f"{SCALE:.7f}", "--phase", "Co"]) == 0
    out = re.sub("(\\d)\u0305", r"-\1", capsys.readouterr().out)  # overbars (UTF-8 terminal) -> minus signs
    lines = out.splitlines()
    head = next(i for i, line in enumerate(lines) if "d meas nm" in line and "hkl" in line)
    rows = {}
    for line in lines[head + 1:]:
        parts = line.split()
        if not parts or not parts[0].isdigit():
            break
        rows[int(parts[0])] = parts
    assert len(rows) >= 6
    found = {(p[4], p[5]): float(p[2]) for p in rows.values() if len(p) >= 6 and p[2] != "-"}
    assert found[("Co-fcc", "111")] == pytest.approx(0.20465, abs=2e-5)
    assert found[("Co-fcc", "200")] == pytest.approx(0.17724, abs=2e-5)
    assert found[("Co-hcp", "10-12")] == pytest.approx(0.14847, abs=2e-5)  # 4-index, as the plot has it
    assert found[("Co-hcp", "10-11")] == pytest.approx(0.19156, abs=2e-5)
    assert not any(" 1:" in line and "2:" in line for line in lines)  # no run-on 'ring:hkl' line any more


def test_plot_has_phase_legend_d_axis_and_no_overlapping_text(mixture):
    path, image = mixture
    measured = measure_rings(image)
    obs = ObservedRings.from_profile_rings(measured.rings, radius_px_of_bins=measured.profile.radius_px)
    ident = identify_phases(obs, [builtin_phase("Co-fcc"), builtin_phase("Co-hcp")], scale_inv_nm_per_px=SCALE)
    fig = rings_figure(measured, ident.solutions, image, scale_inv_nm_per_px=SCALE, title="mix")
    fig.canvas.draw()
    r = renderer_of(fig)
    texts = [(t.get_text(), t.get_window_extent(r)) for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]
    words = [t for t, _ in texts]
    assert "Co-fcc" in words and "Co-hcp" in words  # the ring-colour legend
    assert "d-spacing (nm)" in words
    assert min(t.get_fontsize() for t in fig.findobj(Text) if t.get_text().strip()) >= 7
    bad = [(a, b) for (a, ba), (b, bb) in itertools.combinations(texts, 2)
           if min(ba.x1, bb.x1) - max(ba.x0, bb.x0) > 0.5 and min(ba.y1, bb.y1) - max(ba.y0, bb.y0) > 0.5]
    assert not bad, bad[:5]
