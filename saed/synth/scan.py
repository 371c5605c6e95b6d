"""A synthetic scan of the coating: grains of fcc and hcp cobalt and chromium, and a patch of vacuum.

Our own demo scenario (a cobalt-chromium wear-resistant coating at 200 kV): a cross-section
scanned on an ``(ny, nx)`` grid, one 256 x 256 pattern per probe position. The grains are the
cells of a Voronoi partition of the grid (seeded), each with a phase, a zone axis and an in-plane
rotation; one cell is vacuum (direct beam and haze only). Every grain's pattern is rendered a few
times with different detector noise, and each position takes one of those renderings, so
neighbouring frames of a grain are alike but not identical.

The ground truth (phase and zone axis per position) comes back with the frames, for tests and
benchmarks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ScanGrain", "COATING_GRAINS", "ScanTruth", "coating_scan", "write_scan_npy"]


@dataclass(frozen=True)
class ScanGrain:
    """One grain: phase name (``""`` for vacuum), zone axis (3-index) and in-plane rotation."""

    phase: str
    zone_axis: tuple[int, int, int] | None
    rotation_deg: float = 0.0


#: The coating's grains (our scenario): fcc cobalt, some transformed to hcp, chromium, and vacuum.
COATING_GRAINS = (
    ScanGrain("Co-fcc", (0, 1, 1), 12.0), ScanGrain("Co-hcp", (0, 0, 1), 35.0), ScanGrain("Co-fcc", (0, 0, 1), 71.0),
    ScanGrain("Co-hcp", (1, 0, 0), 8.0), ScanGrain("Cr", (0, 0, 1), 52.0), ScanGrain("Co-fcc", (1, 1, 1), 23.0),
    ScanGrain("Co-hcp", (1, -1, 0), 64.0), ScanGrain("Cr", (1, 1, 1), 17.0), ScanGrain("", None, 0.0),
)


@dataclass(frozen=True)
class ScanTruth:
    """What each position holds: ``grain[iy, ix]`` indexes ``grains``."""

    grains: tuple[ScanGrain, ...]
    grain: np.ndarray


def _grain_map(shape, n_grains: int, rng) -> np.ndarray:
    ny, nx = shape
    seeds = rng.uniform([0, 0], [ny, nx], size=(n_grains, 2))
    yy, xx = np.mgrid[:ny, :nx]
    d = (yy[..., None] - seeds[:, 0]) ** 2 + (xx[..., None] - seeds[:, 1]) ** 2
    return np.argmin(d, axis=-1).astype(np.int32)


def _render(grain: ScanGrain, *, size: int, scale: float, rng) -> np.ndarray:
    from saed.crystal import builtin_phase
    from saed.synth.kinematic import synthetic_measured
    from saed.synth.detector import Detector, Scene, render_pattern

    centre = (size / 2 - 0.2, size / 2 - 0.7)
    scene = Scene(haze_electrons=200.0, haze_core_px=10.0)
    if grain.zone_axis is None:
        return render_pattern(np.zeros((0, 2)), np.zeros(0), center_px=centre, detector=Detector(shape=(size, size)),
                              scene=scene, rng=rng).image
    m, _ = synthetic_measured(builtin_phase(grain.phase), grain.zone_axis, scale_inv_nm_per_px=scale,
                              in_plane_rotation_deg=grain.rotation_deg, image_shape=(size, size), center_px=centre,
                              position_noise_px=0.0, rng=rng)
    el = m.spots.intensity / m.spots.intensity.max() * 3e4
    return render_pattern(np.stack([m.spots.x_px, m.spots.y_px], 1), el, center_px=m.center_px,
                          detector=Detector(shape=(size, size)), scene=scene, rng=rng).image


def coating_scan(shape=(32, 32), *, size: int = 256, scale_inv_nm_per_px: float = 0.08, grains=COATING_GRAINS,
                 variants: int = 4, seed: int = 0):
    """The renderings and the layout of a scan: ``(patterns, pick, truth)``.

    ``patterns[g][v]`` is rendering `v` of grain `g` (uint16, ``size`` x ``size``); the frame at
    (iy, ix) is ``patterns[truth.grain[iy, ix]][pick[iy, ix]]``. Rendering ``len(grains) * variants``
    patterns, not one per position, keeps a large scan cheap to make.
    """
    rng = np.random.default_rng(seed)
    grain = _grain_map(shape, len(grains), rng)
    patterns = [[_render(g, size=size, scale=scale_inv_nm_per_px, rng=rng) for _ in range(variants)] for g in grains]
    pick = rng.integers(0, variants, size=shape)
    return patterns, pick, ScanTruth(tuple(grains), grain)


def write_scan_npy(path, shape=(32, 32), **kwargs) -> ScanTruth:
    """Write a 4-D ``(ny, nx, size, size)`` uint16 ``.npy`` scan of the coating, row by row; returns its truth."""
    patterns, pick, truth = coating_scan(shape, **kwargs)
    ny, nx = shape
    size = patterns[0][0].shape[0]
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint16, shape=(ny, nx, size, size))
    for iy in range(ny):
        out[iy] = np.stack([patterns[truth.grain[iy, ix]][pick[iy, ix]] for ix in range(nx)])
    out.flush()
    del out
    return truth


def write_scan_hdf5(path, shape=(8, 8), *, dataset: str = "scan/frames", **kwargs) -> ScanTruth:
    """Write a 4-D ``(ny, nx, size, size)`` uint16 scan of the coating to an HDF5 file (gzip, one chunk per
    frame), with the truth beside it: ``scan/grain`` (ny, nx) and the grains as attributes."""
    import h5py

    patterns, pick, truth = coating_scan(shape, **kwargs)
    ny, nx = shape
    size = patterns[0][0].shape[0]
    with h5py.File(path, "w") as f:
        ds = f.create_dataset(dataset, shape=(ny, nx, size, size), dtype="uint16", chunks=(1, 1, size, size),
                              compression="gzip", compression_opts=9, shuffle=True)
        for iy in range(ny):
            ds[iy] = np.stack([patterns[truth.grain[iy, ix]][pick[iy, ix]] for ix in range(nx)])
        g = f.create_dataset("scan/grain", data=truth.grain)
        g.attrs["grains"] = [f"{gr.phase or 'vacuum'} {list(gr.zone_axis) if gr.zone_axis else ''} "
                             f"{gr.rotation_deg:g} deg" for gr in truth.grains]
    return truth
