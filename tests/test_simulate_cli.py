"""``saed simulate`` through saed.cli.main: the JSON contract, pictures, and one-line errors with exit 2."""

from __future__ import annotations

import json

import numpy as np
import pytest

from saed.cli import main

CONTRACT_TOP = {"phase", "zone_axis", "voltage_kv", "wavelength_nm", "reflections"}
CONTRACT_REFLECTION = {"hkl", "hkil", "g_inv_nm", "d_nm", "x_inv_nm", "y_inv_nm", "intensity",
                       "kinematically_forbidden", "double_diffraction"}


def exit_code(argv) -> int:
    """main's return value, or the status of the SystemExit argparse raises for a bad option."""
    try:
        return main(argv)
    except SystemExit as exc:
        return exc.code


def _run_json(capsys, *argv):
    rc = main(["simulate", *argv, "--json", "-"])
    out = capsys.readouterr().out
    assert rc == 0
    return json.loads(out)


def test_simulate_json_contract_si_011(capsys):
    doc = _run_json(capsys, "Si", "--zone", "0", "1", "1")
    assert CONTRACT_TOP <= set(doc)
    assert doc["zone_axis"] == [0, 1, 1]
    # lambda at 200 kV: 0.0025079 nm (Williams & Carter Table 1.1, recalled; CODATA value 2.5079 pm)
    assert doc["wavelength_nm"] == pytest.approx(0.0025079, rel=1e-4)
    refl = doc["reflections"]
    assert all(CONTRACT_REFLECTION <= set(r) for r in refl)
    strongest = max(r["intensity"] for r in refl)
    assert strongest == pytest.approx(1.0)
    by_hkl = {tuple(r["hkl"]): r for r in refl}
    r111 = by_hkl[(1, 1, -1)]
    # d(111) = a / sqrt 3 = 0.5431021 / 1.7320508 = 0.31356 nm (CODATA a of Si, scipy.constants)
    assert r111["d_nm"] == pytest.approx(0.31356, abs=1e-5)
    assert r111["intensity"] == pytest.approx(1.0)
    r200 = by_hkl[(2, 0, 0)]
    assert r200["kinematically_forbidden"] and r200["double_diffraction"] and r200["intensity"] == 0
    a, b = r200["double_diffraction_route"]
    assert list(np.add(a, b)) == [2, 0, 0]
    assert doc["pattern"]["ratio"] == pytest.approx(1.0) and doc["pattern"]["angle_deg"] == pytest.approx(70.529, abs=1e-3)


@pytest.mark.parametrize("zone", [["2", "-1", "-1", "0"], ["2-1-10"], ["1", "0", "0"]])
def test_simulate_hexagonal_zone_forms(capsys, zone):
    doc = _run_json(capsys, "Co-hcp", "--zone", *zone, "--max-g", "6")
    assert doc["zone_axis"] == [1, 0, 0] and doc["zone_axis_4"] == [2, -1, -1, 0]
    r = {tuple(x["hkil"]): x for x in doc["reflections"]}
    assert r[(0, 0, 0, 1)]["double_diffraction"]


def test_simulate_tilt_and_thickness(capsys):
    doc = _run_json(capsys, "Cu", "--zone", "001", "--tilt", "0.5", "--tilt-toward", "2", "0", "0",
                    "--thickness", "30")
    assert doc["tilt_deg"] == 0.5 and doc["thickness_nm"] == 30.0 and doc["tilt_toward_hkl"] == [2, 0, 0]
    assert doc["laue_circle"]["radius_inv_nm"] > 0
    by = {tuple(r["hkl"]): r for r in doc["reflections"]}
    assert by[(2, 0, 0)]["intensity"] > by[(-2, 0, 0)]["intensity"]


def test_simulate_table_and_pictures(tmp_path, capsys):
    png, tif, dia = tmp_path / "p.png", tmp_path / "p.tif", tmp_path / "d.png"
    rc = main(["simulate", "Si", "--zone", "0", "1", "1", "--image", str(png), "--diagram", str(dia)])
    out = capsys.readouterr().out
    # UTF-8 stream: negative indices carry a combining overline (U+0305)
    assert rc == 0 and "double diffraction 111\u0305 + 11\u03051" in out and "70.53" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and dia.stat().st_size > 10000
    rc = main(["simulate", "Si", "--zone", "0", "1", "1", "--image", str(tif), "--scale", "0.02",
               "--image-size", "512"])
    assert rc == 0
    from saed.image.io import read_image, read_image_calibration

    img = read_image(tif)
    assert img.shape == (512, 512)
    assert read_image_calibration(tif) == pytest.approx(0.02, rel=1e-6)
    # the saturated central beam is centred on the frame centre (255.5, 255.5)
    rr, cc = np.nonzero(img >= 0.99 * img.max())
    assert img.max() == 65535 and abs(rr.mean() - 255.5) < 0.01 and abs(cc.mean() - 255.5) < 0.01


@pytest.mark.parametrize("argv, words", [
    (["Si", "--zone", "0", "0", "0"], "[000]"),
    (["Si", "--zone", "0", "1.5", "1"], "integers"),
    (["Si", "--zone", "0", "one", "1"], "not an index"),
    (["Si", "--zone", "0", "1"], "3 indices"),
    (["Co-hcp", "--zone", "1", "1", "1", "0"], "U+V+T"),
    (["Si", "--zone", "2", "-1", "-1", "0"], "hexagonal"),
    (["Si", "--zone", "0", "1", "1", "--max-g", "0"], "must be positive"),
    (["Si", "--zone", "0", "1", "1", "--max-g", "-2"], "must be positive"),
    (["Si", "--zone", "0", "1", "1", "--thickness", "0"], "must be positive"),
    (["Si", "--zone", "0", "1", "1", "--thickness", "-10"], "must be positive"),
    (["Si", "--zone", "0", "1", "1", "--tilt", "2"], "--tilt-toward"),
    (["Si", "--zone", "0", "1", "1", "--tilt-toward", "2", "0", "0"], "--tilt DEG"),
    (["Si", "--zone", "0", "1", "1", "--image", "x.jpg"], ".png, .tif"),
    (["Unobtainium", "--zone", "0", "1", "1"], "unknown phase"),
])
def test_simulate_bad_input_one_line_exit_2(capsys, argv, words):
    rc = exit_code(["simulate", *argv])
    err = capsys.readouterr().err
    assert rc == 2
    assert words in err
    assert err.count("\n") == 1 and "Traceback" not in err


def test_simulate_bad_input_from_argparse_exits_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["simulate", "Si", "--zone", "0", "1", "1", "--max-g", "abc"])
    assert exc.value.code == 2
    assert capsys.readouterr().err.count("\n") == 1
