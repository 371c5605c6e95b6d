"""What a person reads, across commands: 4-index hexagonal indices everywhere, overbars, the score legend,
the projected-HOLZ labels, --units angstrom, one wavelength style, aligned tables.

The outputs are read back as text (terminal, HTML, and the text of every figure saved as PNG or PDF) and
every index in them is parsed; nothing here re-uses saed's own formatter to build an expected string.
Check values: Co-hcp a = 0.25071 nm (tests/test_phases.py checks it against ASE), d(10-10) = a sqrt(3) / 2
(hexagonal plane spacing, 1/d^2 = 4/3 (h^2 + hk + k^2)/a^2 + l^2/c^2, common practice); 1 nm = 10 Å.
"""

import html
import json
import math
import re

import numpy as np
import pytest
import tifffile

from saed import physics
from saed.cli import main
from saed.crystal import builtin_phase
from saed.synth.rings import ring_pattern

EXAMPLES = __import__("importlib.resources").resources.files("saed").joinpath("data/examples")


def _plain(text: str) -> str:
    """Every way saed marks a negative index turned back into a minus sign (mathtext, HTML, U+0305)."""
    t = re.sub(r"\\bar\{(\d+)\}", r"-\1", text)
    t = re.sub(r"\\frac\{\d+\}\{\d+\}", "", t)
    t = t.replace(r"\langle", "<").replace(r"\rangle", ">").replace(r"\{", "{").replace(r"\}", "}")
    t = t.replace("\\,", "").replace("\\ ", " ").replace("$", "")
    t = re.sub(r'<span class="ob">(\d+)</span>', r"-\1", t)
    t = re.sub(r"((?:\d\u0305)+)", lambda m: _unbar(m, t), t)
    return html.unescape(t).replace("⟨", "<").replace("⟩", ">")


def _unbar(m, text: str) -> str:
    """Overlined digits: one negative index per digit in a compact group (1̅1̅1 = -1-11); a whole number
    when the run stands alone between spaces of a spaced group (17 1̅3̅ 4̅ 18 = 17 -13 -4 18)."""
    digits = m.group(1).replace("\u0305", "")
    before = text[m.start() - 1] if m.start() else " "
    after = text[m.end()] if m.end() < len(text) else " "
    if len(digits) >= 2 and before in " [(<{" and after in " ])>}" and " " in (before, after):
        return "-" + digits
    return "".join("-" + d for d in digits)


def _indices(group: str) -> list[int]:
    group = group.strip()
    return [int(v) for v in (group.split() if " " in group else re.findall(r"-?\d", group))]


def bracketed_groups(text: str) -> list[list[int]]:
    """Every [..], (..), <..>, {..} that holds nothing but indices."""
    text = _plain(text).replace("P63/mmc (194)", "P63/mmc")  # a space-group number, not a plane
    return [_indices(m.group(1)) for m in re.finditer(r"[\[(<{]((?:\s*-?\d+){1,6}\s*)[\])>}]", text)]


def bare_label(text: str) -> list[int] | None:
    """A label that is only indices ('01-11', '1/3(2-1-10)' counts by its bracket)."""
    t = _plain(text).strip()
    if re.fullmatch(r"-?\d(?:-?\d)+|-?\d+(?: -?\d+)+", t):
        return _indices(t)
    return None


@pytest.fixture
def figure_texts(monkeypatch):
    """The text of every matplotlib figure saved during the test (tick labels left out: they are numbers)."""
    from matplotlib.axis import Tick
    from matplotlib.figure import Figure
    from matplotlib.text import Text

    seen = []
    original = Figure.savefig

    def spy(self, *args, **kwargs):
        ticks = {id(t) for tick in self.findobj(Tick) for t in (tick.label1, tick.label2)}  # also secondary axes
        seen.extend(t.get_text() for t in self.findobj(Text) if t.get_text() and id(t) not in ticks)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", spy)
    return seen


@pytest.fixture(scope="module")
def hcp_example(tmp_path_factory):
    d = tmp_path_factory.mktemp("hcp")
    img, cal = d / "grain_B_hcp.tif", d / "grain_B_hcp.json"
    img.write_bytes(EXAMPLES.joinpath("grain_B_hcp.tif").read_bytes())
    cal.write_bytes(EXAMPLES.joinpath("grain_B_hcp.json").read_bytes())
    return img, cal


def _three_index(texts, *, labels=()) -> list[str]:
    bad = [f"{t!r}: {g}" for t in texts for g in bracketed_groups(t) if len(g) == 3]
    bad += [f"label {t!r}" for t in labels if (g := bare_label(t)) is not None and len(g) == 3]
    return bad


def _table_first_cells(text: str, head: str) -> list[str]:
    """First cell of every row under a header line that starts with `head`, up to the next blank line."""
    out, on = [], False
    for line in text.splitlines():
        s = line.strip()
        if s.startswith(head):
            on = True
            continue
        if on and (not s or s.startswith("...")):
            on = False
        elif on:
            out.append(s.split()[0])
    return out


def test_no_person_facing_output_prints_a_three_index_hexagonal_zone(hcp_example, tmp_path, capsys, figure_texts):
    img, cal = hcp_example
    texts, labels = [], []
    # index: terminal (overbars), HTML report, overlay PNG
    rep, ov = tmp_path / "rep", tmp_path / "o.png"
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--overlay", str(ov),
                 "--report", str(rep)]) == 0
    out = capsys.readouterr().out
    texts.append(out)
    labels += _table_first_cells(out, "hkl")
    page = (rep / "index.html").read_text()
    texts.append(re.sub(r'src="data:[^"]+"', "", page))
    labels += re.findall(r"<tr><td class='l'>(.*?)</td>", page)
    # simulate: terminal and the diagram
    assert main(["simulate", "Co-hcp", "--zone", "1", "0", "0", "--diagram", str(tmp_path / "d.png")]) == 0
    out = capsys.readouterr().out
    texts.append(out)
    labels += _table_first_cells(out, "hkl")
    labels += re.findall(r"g[12] (\S+) d", out)
    # tilt
    assert main(["tilt", "Co-hcp", "--zone", "0", "0", "0", "1", "--target", "1", "0", "-1", "3"]) == 0
    out = capsys.readouterr().out
    assert "°" not in out and "from beam deg" in out  # one angle style in the terminal
    texts.append(out)
    # rings: terminal and plot, on a Co-hcp ring pattern
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    rp = ring_pattern([builtin_phase("Co-hcp")], shape_px=(512, 512), scale_inv_nm_per_px=scale, rng=3)
    tifffile.imwrite(tmp_path / "r.tif", np.round(rp.image).astype(np.uint16))
    assert main(["rings", str(tmp_path / "r.tif"), "--phase", "Co-hcp", "--scale", f"{scale}",
                 "--plot", str(tmp_path / "r.png")]) == 0
    out = capsys.readouterr().out
    texts.append(out)
    # the best solution's ring table: the last column of each row is the hkl of that ring's lines
    fams = [line.split()[-1] for line in out.splitlines() if re.match(r"\s+\d+\s+\d", line) and "Co-hcp" in line]
    assert fams, out
    labels += [f for group in fams for f in group.split("/")]
    # atlas (PDF pages)
    assert main(["atlas", "Co-hcp", "--out", str(tmp_path / "a.pdf"), "--max-index", "1"]) == 0
    capsys.readouterr()
    labels += figure_texts
    texts += figure_texts
    # the check has something to check: hexagonal zones and labels were seen in every kind of output
    four = [g for t in texts for g in bracketed_groups(t) if len(g) == 4]
    assert len(four) > 20 and sum(1 for t in labels if (g := bare_label(t)) and len(g) == 4) > 20
    bad = _three_index(texts, labels=labels)
    assert bad == [], "\n".join(bad)


def test_the_check_would_catch_three_index_forms():
    # the detector itself: it must see the forms the issue found ("100" in rings, "[2 1 0]" in notes)
    assert _three_index(["Co-hcp [2 1 0] and [10-10]"]) == ["'Co-hcp [2 1 0] and [10-10]': [2, 1, 0]"]
    assert _three_index([], labels=["101", "10-11", "5 1/nm"]) == ["label '101'"]
    assert _three_index([r"$[2\,\bar{1}\,0]$", '(1<span class="ob">1</span>0)', "[1\u03050 0]"]) != []


def test_ratio_and_grain_print_no_three_index_hexagonal_zone(tmp_path, capsys):
    """The same check on the two commands that index by hand or by series: 'ratio' (d-spacings, radii with and
    without the camera constant) and 'grain' (terminal and HTML card), on Co-hcp alone (every zone is hexagonal)."""
    from test_grain import SCALE, _tilt_args, _hcp_series

    texts, labels = [], []
    # Co-hcp d(0002) = c/2 = 0.2035 nm, d(2-1-10) = a/2 = 0.1254 nm at 90 deg (a, c: data/phases.json, checked
    # against ASE in tests/test_phases.py); radii 10 and 16.23 mm are in the same ratio (camera constant 2.035 nm mm)
    for argv in (["0.2035", "0.1254", "90"], ["--radii", "10", "16.23", "90", "--camera-constant", "2.035"],
                 ["--radii", "10", "16.23", "90"]):
        assert main(["ratio", *argv, "--phase", "Co-hcp", "--top", "6"]) == 0
        out = capsys.readouterr().out
        texts.append(out)
        # g1, g2 (after the zone) and g1+g2 (third cell from the end) of every Co-hcp row of the table
        rows = [(m, line.split()) for line in out.splitlines()
                if (m := re.match(r"\s*\d+\s+Co-hcp\s+\[[^\]]*\]\s+(\S+)\s+(\S+)", line))]
        assert rows, out
        labels += [c.rstrip("*") for m, cells in rows for c in (m.group(1), m.group(2), cells[-3])]
    paths, tilts, _ = _hcp_series(tmp_path)
    rep = tmp_path / "rep"
    assert main(["grain", *map(str, paths), *_tilt_args(tilts), "--phase", "Co-hcp", "--scale", f"{SCALE}",
                 "--alpha-axis", "25", "--report", str(rep)]) == 0
    texts.append(capsys.readouterr().out)
    texts.append(re.sub(r'src="data:[^"]+"', "", (rep / "index.html").read_text()))
    four = [g for t in texts for g in bracketed_groups(t) if len(g) == 4]
    assert len(four) >= 8 and sum(1 for t in labels if (g := bare_label(t)) and len(g) == 4) >= 9, labels
    bad = _three_index(texts, labels=labels)
    assert bad == [], "\n".join(bad)


def test_html_report_uses_overbars_and_explains_score_and_tags(hcp_example, tmp_path):
    img, cal = hcp_example
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--phase", "Co-fcc",
                 "--report", str(tmp_path)]) == 0
    page = re.sub(r'src="data:[^"]+"', "", (tmp_path / "index.html").read_text())
    body = re.sub(r"<style>.*?</style>", "", page, flags=re.S)
    # no index group written with a minus sign: every negative index is an overbar
    raw = [m.group(0) for m in re.finditer(r"[\[(]((?:-?\d){3,4})[\])]", re.sub(r"<[^>]+>", "", body))
           if "-" in m.group(1)]
    assert raw == []
    assert '<span class="ob">1</span>' in body and ".ob{text-decoration:overline}" in page
    assert re.search(r'<abbr title="score: [^"]*not a probability">score</abbr>', body)
    assert re.search(r'<span class="tag clear" title="score at least 0.80[^"]*">clear</span>', body)
    assert "it ranks solutions, it is not a probability" in body


def test_terminal_overbars_fall_back_to_minus_signs_on_a_plain_stream(hcp_example, monkeypatch):
    import io
    import sys

    img, cal = hcp_example
    buf = io.TextIOWrapper(io.BytesIO(), encoding="ascii")
    monkeypatch.setattr(sys, "stdout", buf)
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp"]) == 0
    buf.flush()
    out = buf.buffer.getvalue().decode("ascii")  # an ASCII terminal gets nothing it cannot encode
    assert "answer: Co-hcp [2-1-10]" in out and "\u0305" not in out
    assert "score: how well the simulated pattern explains the measured spots" in out


def test_terminal_legend_says_what_score_and_the_tag_mean(hcp_example, capsys):
    img, cal = hcp_example
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--phase", "Co-fcc"]) == 0
    out = capsys.readouterr().out
    answer = re.search(r"answer: .*\((\w+), score (\d\.\d\d)\)", out)
    word = answer.group(1)
    legend = " ".join(out.split())
    assert "it ranks solutions, it is not a probability" in legend
    assert re.search(rf"\b{word}: ", out)  # the tag shown is explained
    assert "°" not in out  # one angle style in the terminal: 'deg'


def test_thin_fcc_111_extra_spots_are_labelled_as_one_third_422_positions(tmp_path, capsys):
    img, cal = tmp_path / "e.tif", tmp_path / "e.json"
    img.write_bytes(EXAMPLES.joinpath("grain_E_thin_fcc.tif").read_bytes())
    cal.write_bytes(EXAMPLES.joinpath("grain_E_thin_fcc.json").read_bytes())
    js = tmp_path / "r.json"
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-fcc", "--json", str(js)]) == 0
    out = _plain(capsys.readouterr().out)
    a_nm = 0.35447  # Co-fcc (data/phases.json)
    rows = [line.split() for line in out.splitlines() if "projected HOLZ (from" in line]
    assert len(rows) >= 6
    seen_422 = 0
    for row in rows:
        label, d_calc = row[0], float(row[4])
        m = re.fullmatch(r"⅓\(((?:-?\d){3})\)", label)
        assert m, label  # a one-third position, not a 3-D reflection label
        p = _indices(m.group(1))
        src = _indices(re.search(r"from (\S+)\)", " ".join(row)).group(1))
        n_layer = sum(src)
        assert n_layer != 0 and p == [3 * h - n_layer for h in src]  # 3 (g - (N/3)(1,1,1)) by hand
        assert d_calc == pytest.approx(3 * a_nm / math.sqrt(sum(v * v for v in p)), abs=6e-5)
        seen_422 += sorted(abs(v) for v in p) == [2, 2, 4]
    assert seen_422 >= 6
    # d calc of a 1/3{422} position is 3a/sqrt(24) = 0.2171 nm, not d(200) = a/2 = 0.1772 nm
    assert "0.2171" in out and "0.1772" not in out
    spots = json.loads(js.read_text())["solutions"][0]["indexed_spots"]
    holz = [s for s in spots if s.get("kind") == "holz-projection"]
    assert holz and all(len(s["hkl"]) == 3 for s in holz)  # the JSON keeps the 3-D reflection
    for s in holz:  # ... and adds where it lands: hkl - (N/3)(1,1,1), N = h + k + l, times 3
        assert s["projected_denominator"] == 3 and s["projected_hkl"] == [3 * h - sum(s["hkl"]) for h in s["hkl"]]
    assert all(s["projected_hkl"] is None and s["projected_denominator"] is None
               for s in spots if s["kind"] != "holz-projection")


def test_units_angstrom_in_terminal_and_html(hcp_example, tmp_path, capsys, figure_texts):
    a_nm = 0.25071
    d_1010_ang = 10 * a_nm * math.sqrt(3) / 2  # 2.1712 Å
    assert main(["simulate", "Co-hcp", "--zone", "2", "-1", "-1", "0", "--units", "angstrom"]) == 0
    out = _plain(capsys.readouterr().out)
    head = next(line for line in out.splitlines() if line.strip().startswith("hkl"))
    assert "d Å" in head and "g 1/Å" in head and "nm" not in head
    row = next(line for line in out.splitlines() if line.strip().startswith("01-10 "))
    assert float(row.split()[1]) == pytest.approx(d_1010_ang, abs=6e-4)
    img, cal = hcp_example
    assert main(["index", str(img), "--calibration", str(cal), "--phase", "Co-hcp", "--units", "angstrom",
                 "--report", str(tmp_path), "--overlay", str(tmp_path / "o.png")]) == 0
    # the overlay (drawn for --overlay and again for the report): scale bar and scale in 1/Å, score legend
    assert sum(re.fullmatch(r"[\d.]+ 1/Å", t) is not None for t in figure_texts) == 2
    assert not any("1/nm" in t for t in figure_texts)
    assert sum("not a probability" in t for t in figure_texts) == 2
    out = _plain(capsys.readouterr().out)
    assert "d meas Å" in out and "1/Å per px" in out and " nm" not in out.split("score:")[0]
    page = (tmp_path / "index.html").read_text()
    assert "<th>d meas Å</th>" in page and "<td>2.171</td>" in page
    figure_texts.clear()
    assert main(["spots", str(img), "--calibration", str(cal), "--units", "angstrom",
                 "--overlay", str(tmp_path / "s.png")]) == 0
    out = capsys.readouterr().out
    assert "d = 2.171 Å" in out and "1/Å per px" in out
    assert any("d 2.171 Å" in t for t in figure_texts) and not any("nm" in t for t in figure_texts)
    assert main(["phases", "Co-hcp", "--units", "angstrom"]) == 0
    assert "2.5071" in capsys.readouterr().out


def test_wavelength_is_printed_in_pm_by_every_command(tmp_path, capsys):
    assert main(["simulate", "Co-fcc", "--zone", "0", "0", "1"]) == 0
    assert "lambda 2.5079 pm" in capsys.readouterr().out
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    au = ring_pattern([builtin_phase("Au")], shape_px=(512, 512), scale_inv_nm_per_px=scale, rng=1)
    tifffile.imwrite(tmp_path / "au.tif", np.round(au.image).astype(np.uint16))
    assert main(["calibrate", str(tmp_path / "au.tif"), "--standard", "Au", "--pixel-pitch", "14",
                 "--no-history"]) == 0
    out = capsys.readouterr().out
    assert "lambda = 2.5079 pm" in out and "nm)" not in out.splitlines()[0]


def test_spots_table_puts_m_and_n_in_aligned_columns(hcp_example, capsys):
    img, cal = hcp_example
    assert main(["spots", str(img), "--calibration", str(cal)]) == 0
    lines = capsys.readouterr().out.splitlines()
    k = next(i for i, line in enumerate(lines) if line.split()[:2] == ["m", "n"])
    head = lines[k]
    m_end, n_end = head.index("m") + 1, head.index(" n ") + 2
    rows = [line for line in lines[k + 1:] if line.strip() and not line.strip().startswith("...")]
    assert len(rows) >= 10
    for row in rows:
        assert row[m_end - 1] != " " and row[m_end] == " " and row[n_end - 1] != " ", row


def test_calibrate_list_keeps_the_star_off_the_date_and_names_the_camera_constant_unit(tmp_path, capsys):
    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    au = ring_pattern([builtin_phase("Au")], shape_px=(512, 512), scale_inv_nm_per_px=scale, rng=1)
    tifffile.imwrite(tmp_path / "au.tif", np.round(au.image).astype(np.uint16))
    hist = tmp_path / "hist"
    assert main(["calibrate", str(tmp_path / "au.tif"), "--standard", "Au", "--pixel-pitch", "14",
                 "--history", str(hist)]) == 0
    capsys.readouterr()
    assert main(["calibrate", "--list", str(hist)]) == 0
    out = capsys.readouterr().out
    assert "lambda L nm mm" in out
    row = next(line for line in out.splitlines() if "*" in line and "Au" in line)
    assert re.search(r"\* \d{4}-\d\d-\d\d", row), row


def test_summary_table_stays_aligned_with_a_long_zone(hcp_example):
    # [17 -13 -4 18] is a real 4-index zone (17 - 13 - 4 = 0); the ranked table must not shift for it
    import dataclasses

    from saed.calibration import read_calibration_file
    from saed.crystal.notation import text_width
    from saed.image.measure import inspect_file
    from saed.index import index_pattern, prepare_phases
    from saed.report.index_summary import format_summary

    img, cal = hcp_example
    insp = inspect_file(img, read_calibration_file(cal))
    result = index_pattern(insp.measured, prepare_phases([builtin_phase("Co-hcp")]), top=3)
    best = result.solutions[0]
    long = dataclasses.replace(best, zone_axis_4=(17, -13, -4, 18), score=0.5)
    result = dataclasses.replace(result, solutions=(best, long))
    for style in ("unicode", "plain"):
        lines = format_summary(result, image="x.tif", style=style).splitlines()
        k = next(i for i, line in enumerate(lines) if line.startswith("rank"))
        head, rows = lines[k], lines[k + 1:k + 3]
        score_end = text_width(head[:head.index("score") + len("score")])
        for row, sol in zip(rows, result.solutions):
            cell = f"{sol.score:.2f}"
            assert text_width(row[:row.index(cell) + len(cell)]) == score_end, (style, row)
            zone_start = text_width(row[:row.index("[")])
            assert zone_start == text_width(head[:head.index("zone")]), (style, row)
        assert len({text_width(r) for r in [head] + rows}) == 1  # the last, right-aligned column ends together
        assert "17 -13 -4 18" in rows[1] or "17 1\u03053\u0305 4\u0305 18" in rows[1]


def test_atlas_and_diagram_in_angstrom(tmp_path, capsys, figure_texts):
    # Co-hcp [0001]: g1 a {10-10} spot, d = a sqrt(3)/2 = 2.171 Å (a = 0.25071 nm)
    assert main(["atlas", "Co-hcp", "--out", str(tmp_path / "a.pdf"), "--max-index", "1", "--units", "angstrom"]) == 0
    capsys.readouterr()
    text = " ".join(figure_texts)
    assert f"d {10 * 0.25071 * math.sqrt(3) / 2:.3f} Å" in text and "a = 2.5071 Å, c = 4.0695 Å" in text
    assert " nm" not in text.replace("1/nm", "")
    figure_texts.clear()
    assert main(["simulate", "Co-hcp", "--zone", "0", "0", "0", "1", "--units", "angstrom",
                 "--diagram", str(tmp_path / "d.png")]) == 0
    text = " ".join(figure_texts)
    assert "t = 500 Å" in text and "Å$^{-1}$" in text and " nm" not in text


@pytest.mark.parametrize("argv", [["index", "x.tif"], ["spots", "x.tif"], ["rings", "x.tif"], ["demo"],
                                  ["simulate", "Co-fcc", "--zone", "0", "0", "1"], ["phases"],
                                  ["calibrate", "x.tif", "--standard", "Au"], ["atlas", "Co-fcc", "--out", "a.pdf"],
                                  ["ratio", "0.2", "0.1", "60"], ["grain", "a.tif", "b.tif", "--tilt", "0,0"]])
def test_a_unit_that_is_not_offered_is_refused_in_one_line(argv, capsys):
    try:
        rc = main(argv + ["--units", "furlong"])
    except SystemExit as e:  # argparse's own exit
        rc = e.code
    err = capsys.readouterr().err
    assert rc == 2 and "--units" in err and "furlong" in err and "Traceback" not in err


def test_calibrate_table_overbars_labels_with_a_leading_minus(tmp_path, monkeypatch):
    # Si [011] standard: its {111} spots include 1-11-type labels with a leading minus ('-11-1');
    # the terminal table must overbar every negative index, the leading one included (common practice).
    import io
    import sys

    from saed.simulate.zone import zone_pattern
    from saed.synth.zone import detector_image

    scale = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)
    det = detector_image(zone_pattern(builtin_phase("Si"), [0, 1, 1]), shape_px=(768, 768),
                         scale_inv_nm_per_px=scale, center_px=(390.4, 377.7), in_plane_rotation_deg=23.0,
                         noise=True, rng=2)
    tifffile.imwrite(tmp_path / "si.tif", np.round(det.image).astype(np.uint16))
    buf = io.TextIOWrapper(io.BytesIO(), encoding="utf-8")
    monkeypatch.setattr(sys, "stdout", buf)
    assert main(["calibrate", str(tmp_path / "si.tif"), "--standard", "Si", "--zone", "0", "1", "1",
                 "--pixel-pitch", "14", "--no-history"]) == 0
    buf.flush()
    out = buf.buffer.getvalue().decode("utf-8")
    labels = [line.split()[1] for line in out.splitlines() if re.match(r"\s+\d+\.\d\d\s+\S*\d", line)]
    assert len(labels) >= 4, out
    assert not any("-" in lab for lab in labels), labels  # no minus sign left in an index label
    assert any(lab.startswith("1\u0305") for lab in labels), labels  # a leading negative index overbarred
