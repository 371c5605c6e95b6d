"""Scans stored as one array: ``.npy``, HDF5 and Zarr stacks, and microscope files, opened lazily.

A stack is ``(frame, row, col)`` or ``(scan_y, scan_x, row, col)``; the last two axes are the
detector and the scan shape comes from the file. Nothing is read when a stack is opened: the
Dask array wraps the file's own chunks (an HDF5 dataset's chunks, a Zarr array's chunks, a
``.npy`` memory map cut into blocks of frames), and :func:`read_frames` computes only the slice a
task needs, so a scan larger than memory streams through a worker in pieces of a few frames.

A stack or 4-D scan in a microscope format (``.hspy``, EMD, DM, MRC, ...: whatever
:mod:`saed.image.microscope` reads through rosettasciio) is opened by rosettasciio as a lazy Dask
array (or a memory map) with the scan shape the file records, and sliced the same way.

Which array of an HDF5 file or a Zarr group: name it after the file with ``::``
(``scan.h5::/entry/data``); otherwise the file must hold exactly one numeric array of 3 or 4
axes (the message lists them when there are several).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from saed.errors import ImageError

__all__ = ["HDF5_SUFFIXES", "ZARR_SUFFIXES", "is_array_store", "split_dataset", "StackInfo", "inspect_stack",
           "open_stack", "read_frames"]

HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".nxs")
ZARR_SUFFIXES = (".zarr",)
#: Frames per Dask block of a ``.npy`` memory map (the file has no chunks of its own).
NPY_BLOCK_FRAMES = 64


def split_dataset(name: str) -> tuple[str, str]:
    """``'scan.h5::/entry/data'`` -> ``('scan.h5', '/entry/data')``; no ``::`` -> (name, '').

    >>> split_dataset("a/scan.h5::/entry/data"), split_dataset("scan.zarr")
    (('a/scan.h5', '/entry/data'), ('scan.zarr', ''))
    """
    if "::" in name:
        path, _, ds = name.partition("::")
        return path, ds
    return name, ""


def is_array_store(path: str) -> bool:
    """True for an HDF5 file or a Zarr store (by suffix), with or without a ``::dataset`` part."""
    p, _ = split_dataset(str(path))
    suffix = Path(p.rstrip("/")).suffix.lower()
    return suffix in HDF5_SUFFIXES or suffix in ZARR_SUFFIXES


@dataclass(frozen=True)
class StackInfo:
    """A stack's leading (scan) shape, detector shape, dtype and the array's name in its file."""

    lead_shape: tuple[int, ...]
    frame_shape: tuple[int, int]
    dtype: str
    dataset: str


def _kind(path: str) -> str:
    suffix = Path(path.rstrip("/")).suffix.lower()
    if suffix in HDF5_SUFFIXES:
        return "hdf5"
    if suffix in ZARR_SUFFIXES:
        return "zarr"
    return "npy"


def _h5_arrays(f) -> list[tuple[str, object]]:
    import h5py

    found = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset) and obj.dtype.kind in "biuf" and obj.ndim in (3, 4):
            found.append(("/" + name, obj))

    f.visititems(visit)
    return found


def _zarr_arrays(root) -> list[tuple[str, object]]:
    import zarr

    if isinstance(root, zarr.Array):
        return [("", root)] if root.ndim in (3, 4) and root.dtype.kind in "biuf" else []
    found = []
    for name, arr in root.arrays():
        if arr.ndim in (3, 4) and arr.dtype.kind in "biuf":
            found.append(("/" + name, arr))
    for name, grp in root.groups():
        found += [("/" + name + n, a) for n, a in _zarr_arrays(grp)]
    return found


def _pick(name: str, dataset: str, arrays: list, what: str):
    if dataset:
        for n, a in arrays:
            if n.strip("/") == dataset.strip("/"):
                return n, a
        raise ImageError(f"{name}: no numeric array of 3 or 4 axes named {dataset!r} in the {what}"
                         + (f" (it has {', '.join(n for n, _ in arrays[:5])})" if arrays else ""))
    if not arrays:
        raise ImageError(f"{name}: the {what} holds no numeric array of 3 or 4 axes (frames, rows, cols) or "
                         "(scan_y, scan_x, rows, cols)")
    if len(arrays) > 1:
        names = ", ".join(n for n, _ in arrays[:5])
        raise ImageError(f"{name}: the {what} holds {len(arrays)} stacks ({names}); name one as FILE::DATASET")
    return arrays[0]


class _Slicer:
    """An array-like view of a stack for Dask: shape, dtype and slicing only.

    ``dask.array.from_array`` copies any input that has a ``copy`` method -- for a memory-mapped
    ``.npy`` that is reading the whole scan -- so the file's array is handed over through this.
    """

    def __init__(self, array):
        self._a = array
        self.shape = tuple(array.shape)
        self.dtype = array.dtype
        self.ndim = len(self.shape)

    def __getitem__(self, index):
        return np.asarray(self._a[index])


class _Opened:
    """An open stack: the array-like (h5py Dataset, zarr Array, or memmap) and what keeps it open."""

    def __init__(self, name: str, path: str, dataset: str):
        kind = _kind(path)
        self.handle = None
        try:
            if kind == "hdf5":
                import h5py

                self.handle = h5py.File(path, "r")
                self.dataset, self.array = _pick(name, dataset, _h5_arrays(self.handle), "HDF5 file")
                self.file_chunks = self.array.chunks
            elif kind == "zarr":
                import zarr

                root = zarr.open(path, mode="r")
                self.dataset, self.array = _pick(name, dataset, _zarr_arrays(root), "Zarr store")
                self.file_chunks = self.array.chunks
            else:
                arr = np.load(path, mmap_mode="r", allow_pickle=False)
                if not isinstance(arr, np.ndarray):
                    raise ImageError(f"{name}: the .npy file holds no array")
                self.dataset, self.array, self.file_chunks = "", arr, None
        except ImageError:
            self.close()
            raise
        except (OSError, ValueError, KeyError, TypeError, EOFError) as exc:
            self.close()
            raise ImageError(f"{name}: cannot open the stack ({exc.__class__.__name__}: "
                             f"{' '.join(str(exc).split())[:100]})") from None
        if self.array.dtype.kind not in "biuf":
            self.close()
            raise ImageError(f"{name}: the stack holds {self.array.dtype} data, not intensities")

    def close(self):
        if self.handle is not None:
            self.handle.close()
            self.handle = None


def inspect_stack(name: str) -> StackInfo:
    """Shape, dtype and array name of the stack `name` (``FILE`` or ``FILE::DATASET``), reading no pixels."""
    from saed.image.io import MIN_SIDE_PX

    path, dataset = split_dataset(name)
    if not os.path.exists(path):
        raise ImageError(f"{name}: no such file")
    op = _Opened(name, path, dataset)
    try:
        shape = tuple(int(s) for s in op.array.shape)
        dtype = str(op.array.dtype)
        ds = op.dataset
    finally:
        op.close()
    if len(shape) < 2 or len(shape) > 4:
        raise ImageError(f"{name}: an array of shape {shape} is neither an image (rows, cols), a stack "
                         f"(frames, rows, cols) nor a scan (scan_y, scan_x, rows, cols)")
    if min(shape[-2:]) < MIN_SIDE_PX:
        raise ImageError(f"{name}: an array of shape {shape} has a {shape[-2]}x{shape[-1]} detector; the last two "
                         f"axes must be the detector rows and columns (at least {MIN_SIDE_PX} each)")
    if math.prod(shape[:-2]) == 0:
        raise ImageError(f"{name}: the stack of shape {shape} holds no frames")
    return StackInfo(shape[:-2], shape[-2:], dtype, ds)


def open_stack(name: str):
    """The stack `name` as a lazy Dask array (nothing read), and the object to close when done.

    Blocks follow the file's own chunks along the scan axes and span whole frames; a ``.npy``
    (no chunks of its own) is cut into blocks of :data:`NPY_BLOCK_FRAMES` frames.
    """
    import dask.array as da

    path, dataset = split_dataset(name)
    op = _Opened(name, path, dataset)
    shape = op.array.shape
    if op.file_chunks is not None:
        chunks = tuple(op.file_chunks[:-2]) + tuple(shape[-2:])
    else:
        lead = shape[:-2]
        per = max(1, NPY_BLOCK_FRAMES // max(1, math.prod(lead[1:]) if len(lead) > 1 else 1))
        chunks = (per,) + tuple(lead[1:]) + tuple(shape[-2:])
    # a fixed name: Dask would otherwise hash the whole array (read every byte) to name it
    token = f"saed-stack-{abs(hash((name, tuple(shape), str(op.array.dtype)))):x}"
    return da.from_array(_Slicer(op.array), chunks=chunks, name=token, lock=False, asarray=True, fancy=False), op


def _runs(lead_shape: tuple[int, ...], frames) -> list[tuple[tuple[int, ...], int, int, list[int]]]:
    """Group flat frame numbers into runs along the last scan axis: (outer index, start, stop, frames)."""
    last = lead_shape[-1]
    runs: list = []
    for k in frames:
        outer = tuple(int(v) for v in np.unravel_index(k // last, lead_shape[:-1])) if len(lead_shape) > 1 else ()
        j = k % last
        if runs and runs[-1][0] == outer and runs[-1][2] == j:
            runs[-1][2] = j + 1
            runs[-1][3].append(k)
        else:
            runs.append([outer, j, j + 1, [k]])
    return [tuple(r) for r in runs]


def _is_microscope(path: str) -> bool:
    from saed.image.microscope import MICROSCOPE_SUFFIXES

    return Path(path).suffix.lower() in MICROSCOPE_SUFFIXES


class _NothingToClose:
    def close(self):
        pass


def _microscope_stack(path: str):
    """A microscope file's stack or scan as rosettasciio opens it (a lazy Dask array or a memory map,
    shape ``scan_shape + (rows, cols)``), and the object to close (rosettasciio keeps the file itself)."""
    from saed.image.microscope import read_frames as open_microscope_file

    data, _meta = open_microscope_file(path)
    return data, _NothingToClose()


def read_frames(name: str, frames) -> dict[int, np.ndarray | ImageError]:
    """The frames `frames` (flat indices) of the stack `name`, each as a 2-D array, or the ImageError reading it.

    Consecutive frames along the last scan axis are read as one slice: of the lazy Dask array for an
    HDF5 or Zarr stack and for a stack or scan in a microscope format (rosettasciio opens it lazily,
    :func:`saed.image.microscope.read_frames`; computed in this process, synchronously), of the memory map for a ``.npy``
    (which has no chunks for Dask to follow; this also spares a worker that restarts the Dask-array
    import). A task of 64 frames costs one or two reads.
    """
    path, dataset = split_dataset(name)
    if _is_microscope(path):
        arr, op = _microscope_stack(path)
        compute = hasattr(arr, "compute")
    elif _kind(path) == "npy":
        op = _Opened(name, path, dataset)
        arr, compute = _Slicer(op.array), False
    else:
        arr, op = open_stack(name)
        compute = True
    out: dict = {}
    try:
        lead = tuple(arr.shape[:-2])
        n = math.prod(lead)
        inside = [k for k in frames if 0 <= k < n]
        for k in frames:
            if not 0 <= k < n:
                out[k] = ImageError(f"frame {k} is out of range (the stack holds {n} frames)")
        for outer, j0, j1, ks in _runs(lead, inside):
            try:
                block = arr[outer + (slice(j0, j1),)]
                if compute:
                    block = block.compute(scheduler="synchronous")
            except Exception as exc:  # noqa: BLE001 - any decoder failure of a block: error rows for its frames
                err = ImageError(f"the stack cannot be read here ({exc.__class__.__name__}: "
                                 f"{' '.join(str(exc).split())[:80]})")
                for k in ks:
                    out[k] = err
                continue
            for i, k in enumerate(ks):
                out[k] = np.asarray(block[i])
    finally:
        op.close()
    return out
