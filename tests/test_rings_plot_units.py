"""Issue 15 leftover: ``saed rings --plot`` and ``saed calibrate --plot`` honour ``--units angstrom``.

The axes of the picture are checked where they are drawn: the Au 111 ring must sit, on the d-spacing
axis and on the g axis, at the value the check sheet gives, in the unit asked for.

Check values: Au a = 0.40782 nm (shared check-value sheet section 2, Pearson's handbook), so
d(111) = a / sqrt(3) = 0.235455 nm; 1 nm = 10 Å (SI definition of the ångström, BIPM SI brochure,
non-SI units accepted for use: 1 Å = 0.1 nm).
"""

import math

import numpy as np
import pytest
import tifffile
from matplotlib.text import Text

import saed.report.rings_plot as rings_plot
from saed import physics
from saed.cli import main
from saed.crystal import builtin_phase
from saed.crystal.notation import UNITS
from saed.rings.identify import identify_phases
from saed.rings.match import ObservedRings
from saed.rings.measure import measure_rings
from saed.synth.rings import ring_pattern

SCALE = physics.scale_from_camera_inv_nm_per_px(100.0, 14.0, 200.0)  # 0.055823 1/nm per px (worked example)
AU_A_NM = 0.40782
AU_D111_NM = AU_A_NM / math.sqrt(3)
ANGSTROM_PER_NM = 10.0


@pytest.fixture(scope="module")
def au(tmp_path_factory):
    pat = ring_pattern([builtin_phase("Au")], shape_px=(384, 384), scale_inv_nm_per_px=SCALE, rng=11)
    path = tmp_path_factory.mktemp("units") / "au.tif"
    tifffile.imwrite(path, np.round(pat.image).astype(np.uint16))
    measured = measure_rings(pat.image)
    obs = ObservedRings.from_profile_rings(measured.rings, radius_px_of_bins=measured.profile.radius_px)
    ident = identify_phases(obs, [builtin_phase("Au")], scale_inv_nm_per_px=SCALE)
    return path, pat.image, measured, ident


def _texts(fig):
    return [t.get_text() for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]


def _secondary_axes(fig):
    """(profile axes, d-spacing axes on top, g axes under the strips)."""
    prof = [ax for ax in fig.axes if ax.get_ylabel() == "mean counts / px"][0]
    every = [c for ax in fig.axes for c in [ax, *ax.child_axes]]  # secondary axes are children of their axes
    sec = [ax for ax in every if ax.get_xlabel().startswith(("d-spacing", "g = 1/d"))]
    top = [ax for ax in sec if ax.get_xlabel().startswith("d-spacing")][0]
    bottom = [ax for ax in sec if ax.get_xlabel().startswith("g = 1/d")][0]
    return prof, top, bottom


@pytest.mark.parametrize("unit, d111, g111, d_label, g_label", [
    ("nm", AU_D111_NM, 1 / AU_D111_NM, "d-spacing (nm)", "g = 1/d (1/nm)"),
    ("angstrom", ANGSTROM_PER_NM * AU_D111_NM, 1 / (ANGSTROM_PER_NM * AU_D111_NM), "d-spacing (Å)", "g = 1/d (1/Å)"),
])
def test_ring_plot_axes_read_au111_in_the_unit_asked_for(au, unit, d111, g111, d_label, g_label):
    _, image, measured, ident = au
    fig = rings_plot.rings_figure(measured, ident.solutions, image, scale_inv_nm_per_px=SCALE, title="au",
                                  units=UNITS[unit])
    fig.canvas.draw()
    prof, top, bottom = _secondary_axes(fig)
    assert top.get_xlabel() == d_label and bottom.get_xlabel() == g_label
    # Where the Au 111 ring lies (r = 1 / (d s), Bragg's law in the small-angle limit) ...
    r111_px = 1.0 / (AU_D111_NM * SCALE)
    x_screen = prof.transData.transform((r111_px, 1.0))[0]
    # ... both secondary axes must read the check value.
    assert top.transData.transform((d111, 1.0))[0] == pytest.approx(x_screen, abs=0.5)
    strip = bottom  # the g axis shares the strips' radius axis, which shares the profile's
    assert strip.transData.transform((g111, 1.0))[0] == pytest.approx(x_screen, abs=0.5)
    ticks = top.get_xticks()
    assert len(ticks) >= 2
    if unit == "angstrom":  # the same round d values as in nm, ten times larger
        nm_fig = rings_plot.rings_figure(measured, ident.solutions, image, scale_inv_nm_per_px=SCALE, title="au")
        nm_ticks = _secondary_axes(nm_fig)[1].get_xticks()
        assert ticks == pytest.approx(ANGSTROM_PER_NM * np.asarray(nm_ticks))
        assert not any("nm" in t for t in _texts(fig))


def _capture_figures(monkeypatch):
    """Keep every ring figure the CLI builds, to inspect what it saved."""
    figs = []
    original = rings_plot.rings_figure

    def keep(*a, **kw):
        fig = original(*a, **kw)
        figs.append(fig)
        return fig

    monkeypatch.setattr(rings_plot, "rings_figure", keep)
    return figs


@pytest.mark.parametrize("command", ["rings", "calibrate"])
def test_cli_plot_follows_units_angstrom(au, command, tmp_path, monkeypatch, capsys):
    path = au[0]
    figs = _capture_figures(monkeypatch)
    png = tmp_path / f"{command}.png"
    if command == "rings":
        argv = ["rings", str(path), "--scale", f"{SCALE:.7f}", "--phase", "Au"]
    else:
        argv = ["calibrate", str(path), "--standard", "Au", "--no-history"]
    assert main(argv + ["--plot", str(png), "--units", "angstrom"]) == 0
    capsys.readouterr()
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    (fig,) = figs
    _, top, bottom = _secondary_axes(fig)
    assert top.get_xlabel() == "d-spacing (Å)" and bottom.get_xlabel() == "g = 1/d (1/Å)"
    assert top.transData.transform((ANGSTROM_PER_NM * AU_D111_NM, 1.0))[0] == pytest.approx(
        bottom.transData.transform((1 / (ANGSTROM_PER_NM * AU_D111_NM), 1.0))[0], abs=0.5)
    assert not any("nm" in t for t in _texts(fig))


def test_every_family_on_a_shared_ring_gets_its_overbars(monkeypatch, capsys):
    """Co-hcp 10-15 and 21-32 share a ring (d = 0.0762 nm): both are written with overbars on a UTF-8
    terminal, not only the first (issue 15.2)."""
    import saed.cli.cmd_rings as cmd_rings
    import saed.crystal.notation as notation

    monkeypatch.setattr(notation, "terminal_style", lambda stream=None: "unicode")
    sol = {"rings_matched": [{"ring": 14, "d_nm": 0.07611, "d_nm_calc": 0.07621, "phase": "Co-hcp",
                              "families": ["10-15", "21-32"]}], "rings_unexplained": []}
    cmd_rings._print_ring_table(sol, UNITS["nm"], "nm")
    row = capsys.readouterr().out.splitlines()[-1]
    assert row.split()[-1] == "101\u03055/213\u03052"
