"""Issue 15.15: index overlays -- --dpi, PDF/SVG, a legend in plain words with the mask, the runner-up when ambiguous.

The ambiguous case is the bundled grain D: fcc cobalt [112], whose spots hcp cobalt [01-10] matches to 0.6 % in
ratio (shared check-value sheet section 7: the two cannot be told apart from one pattern).
"""

from pathlib import Path

import pytest
from PIL import Image

from saed.cli import build_parser, main

EXAMPLES = Path(__file__).resolve().parent.parent / "example_images"


def _width(path):
    with Image.open(path) as im:
        return im.size[0]


def _index(tmp_path, name, *extra):
    tif = EXAMPLES / f"{name}.tif"
    return main(["index", str(tif), "--calibration", str(EXAMPLES / f"{name}.json"), "--phase", "Co-fcc",
                 "--phase", "Co-hcp", *extra])


def test_help_names_pdf_svg_and_dpi():
    p = build_parser("index")
    sub = next(a for a in p._actions if a.__class__.__name__ == "_SubParsersAction").choices["index"]
    text = " ".join(sub.format_help().split())
    assert ".pdf" in text and ".svg" in text and "--dpi" in text and "default 150" in text


def test_ambiguous_answer_draws_the_runner_up_beside_the_best(tmp_path, capsys):
    out = tmp_path / "d.png"
    assert _index(tmp_path, "grain_D_fcc_or_hcp", "--overlay", str(out), "--dpi", "60") == 0
    assert _width(out) == 2 * 8 * 60  # two 8-inch panels at 60 dpi


def test_dpi_default_one_panel_when_clear_and_pdf(tmp_path, capsys):
    png = tmp_path / "a.png"
    assert _index(tmp_path, "grain_A_fcc", "--overlay", str(png)) == 0
    assert _width(png) == 8 * 150  # a clear answer: one 8-inch panel at the default 150 dpi
    pdf = tmp_path / "a.pdf"
    assert _index(tmp_path, "grain_A_fcc", "--overlay", str(pdf)) == 0
    assert pdf.read_bytes()[:5] == b"%PDF-"


@pytest.mark.parametrize("dpi", ["10", "5000"])
def test_bad_dpi_one_line(tmp_path, capsys, dpi):
    assert _index(tmp_path, "grain_A_fcc", "--overlay", str(tmp_path / "x.png"), "--dpi", dpi) == 2
    err = capsys.readouterr().err
    assert "--dpi" in err and err.count("\n") == 1 and not (tmp_path / "x.png").exists()


def test_legend_is_plain_words_and_names_the_mask(tmp_path, capsys):
    svg = tmp_path / "d.svg"
    assert _index(tmp_path, "grain_D_fcc_or_hcp", "--overlay", str(svg)) == 0
    text = svg.read_text()
    assert text.startswith("<?xml")
    assert "sqrt" not in text and "~" not in text.split("<svg", 1)[1].split(">", 1)[0]
    assert "where this solution puts a spot" in text
    assert "masked (beam stop" in text  # grain D has a beam stop
    assert "runner-up" in text


def test_spots_overlay_takes_dpi_too(tmp_path, capsys):
    png = tmp_path / "s.png"
    tif = EXAMPLES / "grain_A_fcc.tif"
    assert main(["spots", str(tif), "--calibration", str(EXAMPLES / "grain_A_fcc.json"), "--overlay", str(png),
                 "--dpi", "40"]) == 0
    assert _width(png) == 9 * 40  # the spots overlay is 9 inches wide


def test_the_legend_sits_under_the_pattern_not_on_its_spots():
    """Every legend line is drawn in the strip below the pattern panels (on grain B the spots fill the
    frame, and a legend in the corner covered four of them)."""
    from saed.calibrate.resolve import resolve_calibration
    from saed.crystal import builtin_phase
    from saed.image.io import read_pattern
    from saed.image.measure import inspect_file
    from saed.index import index_pattern, prepare_phases
    from saed.report.index_overlay import overlay_figure

    tif = EXAMPLES / "grain_B_hcp.tif"
    img, meta = read_pattern(tif)
    cal = resolve_calibration(tif, meta).calibration
    ins = inspect_file(tif, cal, image=img)
    res = index_pattern(ins.measured, prepare_phases([builtin_phase("Co-hcp"), builtin_phase("Co-fcc")],
                                                     max_g_inv_nm=12.0))
    fig = overlay_figure(img, res, ignored=ins.ignored)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    panel_bottom = min(ax.get_window_extent(renderer).y0 for ax in fig.axes)
    legend = [t for t in fig.texts if t.get_text().startswith(("circle:", "square:", "diamond:", "violet shade:"))]
    assert len(legend) >= 3
    for t in legend:
        assert t.get_window_extent(renderer).y1 <= panel_bottom + 0.5, t.get_text()
    for ax in fig.axes:  # and nothing of the legend is left inside a panel
        assert not [t for t in ax.texts if t.get_text().startswith(("circle:", "square:"))]
