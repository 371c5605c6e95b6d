"""The per-frame table as an array set for notebooks: a Zarr store (``.zarr``) or an HDF5 file (``.h5``).

One array per column, one entry per frame in input order (row-major over a scan), written in
blocks as the CSV is read, so a table of a million frames is never held whole::

    frame            (n,)   int64    flat frame index in its file
    source           (n,)   int32    index into the ``sources`` attribute (the files, as typed)
    phase            (n,)   int16    index into the ``phases`` attribute; -1 no solution, -2 error, -3 not done
    zone_axis        (n, 3) int16    3-index zone axis (conventional cell); 0 0 0 where not indexed
    zone_axis_4      (n, 4) int16    Miller-Bravais zone for hexagonal phases, else 0 0 0 0
    score            (n,)   float32  figure of merit (NaN where not indexed)
    in_plane_rotation_deg, scale_inv_nm_per_px, runner_up_score (n,) float32 (NaN where absent)
    n_spots          (n,)   int32    -1 where unknown
    orientation      (n, 3, 3) float32  U: crystal Cartesian -> detector frame (NaN where not indexed)

For a scan the attribute ``scan_shape`` is ``[ny, nx]``: ``a.reshape(ny, nx, ...)`` gives the maps.
The statuses and notes stay in the CSV (text). The set is written to a temporary name next to
the target and then moved into place, so an earlier set is replaced only by a complete one.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np

from saed.errors import InputError

__all__ = ["write_array_set", "PHASE_NONE", "PHASE_ERROR", "PHASE_NOT_DONE"]

PHASE_NONE, PHASE_ERROR, PHASE_NOT_DONE = -1, -2, -3
_BLOCK = 65536

_COLUMNS = (("frame", (), "int64", 0), ("source", (), "int32", -1), ("phase", (), "int16", PHASE_NOT_DONE),
            ("zone_axis", (3,), "int16", 0), ("zone_axis_4", (4,), "int16", 0), ("score", (), "float32", np.nan),
            ("in_plane_rotation_deg", (), "float32", np.nan), ("scale_inv_nm_per_px", (), "float32", np.nan),
            ("runner_up_score", (), "float32", np.nan), ("n_spots", (), "int32", -1),
            ("orientation", (3, 3), "float32", np.nan))


class _Writer:
    def __init__(self, path: Path, n: int, attrs: dict, kind: str):
        self.kind = kind
        self.path = path
        if self.kind == "zarr":
            import zarr

            self.root = zarr.open_group(str(path), mode="w")
            self.arrays = {name: self.root.create_array(name=name, shape=(n,) + tail, dtype=dt,
                                                        chunks=(min(max(n, 1), _BLOCK),) + tail, fill_value=fill)
                           for name, tail, dt, fill in _COLUMNS}
            self.root.attrs.update(attrs)
        else:
            import h5py

            self.root = h5py.File(str(path), "w")
            self.arrays = {name: self.root.create_dataset(name, shape=(n,) + tail, dtype=dt,
                                                          chunks=(min(max(n, 1), _BLOCK),) + tail if n else None,
                                                          fillvalue=fill)
                           for name, tail, dt, fill in _COLUMNS}
            for k, v in attrs.items():
                self.root.attrs[k] = v

    def write(self, start: int, block: dict) -> None:
        for name, values in block.items():
            self.arrays[name][start:start + len(values)] = values

    def close(self) -> None:
        if self.kind == "hdf5":
            self.root.close()


def _empty_block(n: int) -> dict:
    return {name: np.full((n,) + tail, fill, dtype=dt) for name, tail, dt, fill in _COLUMNS}


def write_array_set(rows, sources, path, *, phases: dict, phase_order=(), scan_shape=None) -> int:
    """Write the rows of `sources` (any iterable of Row, read once) to the array set at `path`; returns the frames.

    Frames without a row are written as not done (phase -3). `phases` maps names to Phase
    objects (for the orientation matrices); `phase_order` fixes the phase numbering.
    """
    from saed.index.orientmap import orientations
    from saed.batch.scan import sequenced

    path = Path(path)
    if path.suffix.lower() not in (".zarr", ".h5", ".hdf5"):
        raise InputError(f"{path}: an array set is a .zarr store or an .h5 file")
    n = sum(s.n_frames for s in sources)
    names = list(phase_order) + sorted(p for p in phases if p not in phase_order)
    pidx = {p: i for i, p in enumerate(names)}
    starts = []
    acc = 0
    for s in sources:
        starts.append(acc)
        acc += s.n_frames
    attrs = {"format": "saed-batch-arrays-1", "phases": names, "sources": [s.name for s in sources],
             "source_start": starts, "scan_shape": list(scan_shape) if scan_shape else []}
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    _remove(tmp)
    try:
        w = _Writer(tmp, n, attrs, "zarr" if path.suffix.lower() == ".zarr" else "hdf5")
        try:
            # frame and source numbers for every position, block by block
            for b0 in range(0, n, _BLOCK):
                seq = np.arange(b0, min(n, b0 + _BLOCK))
                src = np.searchsorted(np.asarray(starts), seq, side="right") - 1
                w.write(b0, {"frame": seq - np.asarray(starts)[src], "source": src.astype(np.int32)})
            block, seqs = [], []

            def flush():
                if not block:
                    return
                order = np.argsort(seqs)
                _write_rows(w, [block[i] for i in order], [seqs[i] for i in order], pidx, phases, orientations)
                block.clear()
                seqs.clear()

            for seq, r in sequenced(rows, sources):
                block.append(r)
                seqs.append(seq)
                if len(block) >= _BLOCK:
                    flush()
            flush()
        finally:
            w.close()
        _swap(tmp, path)
    except OSError as exc:
        _remove(tmp)
        raise InputError(f"{path}: cannot write the array set ({exc.strerror or exc.__class__.__name__})") from None
    except BaseException:
        _remove(tmp)
        raise
    return n


def _write_rows(w: _Writer, rows, seqs, pidx: dict, phases: dict, orientations) -> None:
    """Write `rows` at positions `seqs` (sorted), in runs of consecutive positions."""
    seqs = np.asarray(seqs)
    data = _empty_block(len(rows))
    for i, r in enumerate(rows):
        if r.is_error:
            data["phase"][i] = PHASE_ERROR
        elif r.status != "ok" or not r.phase:
            data["phase"][i] = PHASE_NONE
        else:
            data["phase"][i] = pidx.get(r.phase, PHASE_NONE)
            if r.zone_axis is not None and len(r.zone_axis) == 3:
                data["zone_axis"][i] = r.zone_axis
            if r.zone_axis_4 is not None and len(r.zone_axis_4) == 4:
                data["zone_axis_4"][i] = r.zone_axis_4
        for name in ("score", "in_plane_rotation_deg", "scale_inv_nm_per_px", "runner_up_score"):
            v = getattr(r, name)
            if v is not None:
                data[name][i] = v
        data["n_spots"][i] = -1 if r.n_spots is None else r.n_spots
    for name, k in pidx.items():
        sel = (data["phase"] == k) & np.any(data["zone_axis"] != 0, axis=1)
        ph = phases.get(name)
        if ph is not None and sel.any():
            data["orientation"][sel] = orientations(ph, data["zone_axis"][sel],
                                                    np.nan_to_num(data["in_plane_rotation_deg"][sel]))
    del data["frame"], data["source"]
    # runs of consecutive positions
    breaks = np.flatnonzero(np.diff(seqs) != 1) + 1
    for a, b in zip(np.r_[0, breaks], np.r_[breaks, len(seqs)]):
        w.write(int(seqs[a]), {name: v[a:b] for name, v in data.items()})


def _remove(p: Path) -> None:
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    elif p.exists() or p.is_symlink():
        p.unlink()


def _swap(tmp: Path, path: Path) -> None:
    """Move `tmp` to `path`; an existing set is moved aside first and removed only after."""
    if path.is_dir() and not path.is_symlink():
        old = path.with_name(f".{path.name}.{os.getpid()}.old")
        _remove(old)
        os.replace(path, old)
        os.replace(tmp, path)
        _remove(old)
    else:
        os.replace(tmp, path)
