"""Finding the frames to index: image files, folders of them, and multi-frame stacks.

Nothing here reads pixel data: a stack is inspected through its header (the ``.npy``
header through a memory map, the TIFF page count), so discovering a stack larger than
memory costs almost nothing. Pixels are read one frame at a time by the workers
(:func:`saed.image.io.read_image` with ``frame=``).

What is accepted
----------------
* an image file (TIFF, PNG, JPEG, ``.npy``): one frame, or a stack of frames;
* a ``.npy`` stack of 3 axes ``(frame, row, col)`` or 4 axes ``(scan_y, scan_x, row, col)``:
  frame numbers are the flat index over the leading axes; a 4-axis stack carries its own
  scan shape;
* a multi-page TIFF: one frame per page;
* a folder: its image files in natural order (``p2`` before ``p10``), and with
  ``recursive=True`` those of its subfolders too.

What is skipped (and reported, one :class:`Skipped` each): files in a folder that are not
images, image files that cannot be read, and stacks of the wrong shape. Hidden files
(``.name``) and the run's own outputs (``exclude``) are passed over silently. A path that
does not exist is an :class:`~saed.errors.InputError`: it is almost always a typing slip.
"""

from __future__ import annotations

import logging
import math
import os
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

from saed.errors import ImageError, InputError

__all__ = ["FrameSource", "Skipped", "Inputs", "discover_inputs", "inspect_source", "first_frame_shape", "check_frame_sizes",
           "IMAGE_SUFFIXES",
           "MAX_STACK_AXES"]

logger = logging.getLogger(__name__)

#: File suffixes taken as images when a folder is searched (HDF5 files and Zarr stores as stacks; microscope
#: formats through saed.image.microscope; an .emi in a folder is left out: its .ser files are taken instead).
IMAGE_SUFFIXES = (".tif", ".tiff", ".png", ".jpg", ".jpeg", ".npy", ".h5", ".hdf5", ".hdf", ".nxs", ".zarr",
                  ".dm3", ".dm4", ".emd", ".ser", ".mrc", ".hspy", ".blo", ".mib", ".tvips", ".de5")
#: A ``.npy`` stack has at most this many axes: (scan_y, scan_x, row, col).
MAX_STACK_AXES = 4


@dataclass(frozen=True)
class FrameSource:
    """One input file and how many frames it holds.

    ``name`` is the path as the user gave or the folder search found it (the CSV ``image``
    column); ``path`` is its resolved form (symlinks followed; what the workers open and, with
    ``file_id`` -- size and modification time, see :func:`saed.batch.results.file_identity` --
    what resume matches on); ``stack`` is True for a ``.npy``, HDF5 or Zarr array whose frames are
    read in slices (:func:`saed.batch.stacks.read_frames`); ``stack_shape`` is the shape of the leading axes of a stack (``(n,)`` for a
    3-axis ``.npy`` or a multi-page TIFF, ``(ny, nx)`` for a 4-axis ``.npy``, ``()`` for
    a single image); ``frame_shape`` is (rows, cols) when the header gives it (``.npy``).
    """

    name: str
    path: str
    n_frames: int
    stack_shape: tuple[int, ...] = ()
    frame_shape: tuple[int, int] | None = None
    file_id: str = ""
    stack: bool = False

    @property
    def scan_shape(self) -> tuple[int, int] | None:
        """(ny, nx) when the file is a 4-axis scan stack, else None."""
        return tuple(self.stack_shape) if len(self.stack_shape) == 2 else None


@dataclass(frozen=True)
class Skipped:
    """A path passed over, and why (one line for a microscopist)."""

    path: str
    reason: str

    def __str__(self) -> str:
        return f"skipped {self.path}: {self.reason}"


@dataclass(frozen=True)
class Inputs:
    """Everything found: the sources in order, and what was skipped."""

    sources: tuple[FrameSource, ...]
    skipped: tuple[Skipped, ...]

    @property
    def n_frames(self) -> int:
        return sum(s.n_frames for s in self.sources)


def _natural_key(name: str):
    """Sort key that orders embedded numbers by value: p2 < p10."""
    return [(0, int(t), "") if t.isdigit() else (1, 0, t.lower()) for t in re.split(r"(\d+)", name) if t]


def inspect_source(name: str) -> FrameSource:
    """Look at one image file without reading its pixels; ImageError if it cannot be used.

    Examples
    --------
    >>> import tempfile, os, numpy as np
    >>> p = os.path.join(tempfile.mkdtemp(), "scan.npy")
    >>> np.save(p, np.zeros((3, 4, 32, 32), np.uint16))
    >>> s = inspect_source(p); s.n_frames, s.scan_shape
    (12, (3, 4))
    """
    from saed.batch.results import file_identity
    from saed.batch.stacks import inspect_stack, is_array_store
    from saed.image.io import MIN_SIDE_PX, count_frames

    try:
        path, fid = file_identity(name)
    except OSError as exc:
        raise ImageError(f"{name}: cannot read the file ({exc.strerror or exc.__class__.__name__})") from None
    if is_array_store(name):
        info = inspect_stack(name)
        full = path if "::" in path or not info.dataset else f"{path}::{info.dataset}"
        return FrameSource(name, full, math.prod(info.lead_shape), info.lead_shape, info.frame_shape, fid, True)
    if Path(path).suffix.lower() == ".npy" or _starts_like_npy(path):
        shape = _npy_shape(name, path)
        if len(shape) < 2 or len(shape) > MAX_STACK_AXES:
            raise ImageError(f"{name}: a .npy of shape {shape} is neither an image (rows, cols), a stack "
                             f"(frames, rows, cols) nor a scan (scan_y, scan_x, rows, cols)")
        if min(shape[-2:]) < MIN_SIDE_PX:
            raise ImageError(f"{name}: a .npy of shape {shape} has a {shape[-2]}x{shape[-1]} detector; the last "
                             f"two axes must be the detector rows and columns (at least {MIN_SIDE_PX} each)")
        lead = tuple(shape[:-2])
        n = math.prod(lead)
        if n == 0:
            raise ImageError(f"{name}: the .npy stack of shape {shape} holds no frames")
        return FrameSource(name, path, n, lead, tuple(shape[-2:]), fid, bool(lead))
    from saed.image.microscope import MICROSCOPE_SUFFIXES

    if Path(path).suffix.lower() in MICROSCOPE_SUFFIXES:  # its scan axes and frame size, from the header
        from saed.image.io import read_metadata

        meta = read_metadata(path)
        n = count_frames(path)  # over every image of the file
        if min(meta.frame_shape) < MIN_SIDE_PX:
            raise ImageError(f"{name}: its {meta.frame_shape[0]}x{meta.frame_shape[1]} frames are smaller than "
                             f"{MIN_SIDE_PX} pixels in a direction")
        if n != meta.n_frames or len(meta.scan_shape) > 2:  # several images, or more than two scan axes
            return FrameSource(name, path, n, (n,) if n > 1 else (), None, fid)
        # one stack or scan: its frames are read in slices of the lazy array (saed.batch.stacks.read_frames)
        return FrameSource(name, path, n, meta.scan_shape, meta.frame_shape, fid, stack=n > 1)
    with warnings.catch_warnings():
        # Pillow warns (then raises) on corrupt metadata; the file is reported as skipped, the warning adds nothing
        warnings.simplefilter("ignore", UserWarning)
        n = count_frames(path)
    if n < 1:
        raise ImageError(f"{name}: the file holds no image")
    return FrameSource(name, path, n, (n,) if n > 1 else (), None, fid)


def _starts_like_npy(path: str) -> bool:
    try:
        with open(path, "rb") as fh:
            return fh.read(6) == b"\x93NUMPY"
    except OSError:
        return False


def _npy_shape(name: str, path: str) -> tuple[int, ...]:
    import numpy as np

    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except FileNotFoundError:
        raise ImageError(f"{name}: no such file") from None
    except (ValueError, OSError, EOFError) as exc:
        raise ImageError(f"{name}: not a readable .npy ({exc.__class__.__name__}: "
                         f"{' '.join(str(exc).split())[:80]})") from None
    if not isinstance(arr, np.ndarray):
        raise ImageError(f"{name}: the .npy file holds no array")
    if arr.dtype.kind not in "biuf":
        raise ImageError(f"{name}: the .npy holds {arr.dtype} data, not intensities")
    shape = tuple(int(s) for s in arr.shape)
    del arr
    return shape


def discover_inputs(paths, *, recursive: bool = False, exclude=()) -> Inputs:
    """Expand `paths` (files and folders) into frame sources, in the order given.

    Parameters
    ----------
    paths : sequence of str
        Files and folders as the user typed them.
    recursive : bool
        Also search the subfolders of a folder (otherwise each subfolder is reported as skipped).
    exclude : sequence of str
        Files never taken as inputs (the run's own CSV and map), compared by absolute path.

    Returns
    -------
    Inputs
        Sources (a file named twice is taken once) and skipped paths with reasons.

    Raises
    ------
    InputError
        No paths, or a path that does not exist.
    """
    if not paths:
        raise InputError("no input given: name image files, stacks or folders")
    from saed.batch.stacks import is_array_store, split_dataset

    excluded = {os.path.abspath(p) for p in exclude if p}
    sources, skipped, seen = [], [], set()

    def take(name: str, *, in_folder: bool) -> None:
        path = os.path.realpath(split_dataset(name)[0]) + ("::" + split_dataset(name)[1] if "::" in name else "")
        if path in seen or os.path.abspath(name) in excluded or path in excluded:
            return
        seen.add(path)
        if in_folder and Path(name).suffix.lower() not in IMAGE_SUFFIXES:
            skipped.append(Skipped(name, f"not an image file ({Path(name).suffix or 'no suffix'})"))
            return
        try:
            sources.append(inspect_source(name))
        except ImageError as exc:
            skipped.append(Skipped(name, _strip_name(str(exc), name)))

    def walk(folder: str) -> None:
        try:
            entries = sorted(os.listdir(folder), key=_natural_key)
        except OSError as exc:
            skipped.append(Skipped(folder, f"cannot list the folder ({exc.strerror or exc.__class__.__name__})"))
            return
        for entry in entries:
            if entry.startswith("."):
                continue
            full = os.path.join(folder, entry)
            if os.path.isdir(full) and not is_array_store(full):
                if recursive:
                    walk(full)
                else:
                    skipped.append(Skipped(full, "a subfolder (add --recursive to search it)"))
            else:
                take(full, in_folder=True)

    for given in paths:
        file, ds = split_dataset(str(given))
        name = os.path.normpath(file) + (f"::{ds}" if ds else "")
        if os.path.isdir(file) and not is_array_store(file):
            walk(name)
        elif os.path.exists(file):
            take(name, in_folder=False)
        else:
            raise InputError(f"{given}: no such file or folder")
    for s in skipped:
        logger.info("%s", s)
    return Inputs(tuple(sources), tuple(skipped))


def first_frame_shape(sources, *, max_sources: int = 20) -> tuple[int, int] | None:
    """(rows, cols) of the first frame of `sources` that can be read (header or pixels); None if none can."""
    from saed.image.io import read_image

    for src in list(sources)[:max_sources]:
        if src.frame_shape is not None:
            return src.frame_shape
        for k in range(min(src.n_frames, 3)):
            try:
                return read_image(src.path, frame=k).shape
            except ImageError:
                continue
    return None


def _strip_name(message: str, name: str) -> str:
    """'path: reason' -> 'reason' (the Skipped line names the path itself)."""
    for prefix in (f"{name}: ", f"{os.path.abspath(name)}: "):
        if message.startswith(prefix):
            return message[len(prefix):]
    return message


def _header_shape(src: FrameSource) -> tuple[int, int] | None:
    """(rows, cols) of a source's frames from its header (TIFF first page, PNG/JPEG size), or None."""
    if src.frame_shape is not None:
        return tuple(src.frame_shape)
    suffix = Path(src.path).suffix.lower()
    try:
        if suffix in (".tif", ".tiff"):
            import tifffile

            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                with tifffile.TiffFile(src.path) as tif:
                    shape = tif.pages[0].shape
            return (int(shape[0]), int(shape[1])) if len(shape) >= 2 else None
        from PIL import Image

        with Image.open(src.path) as im:
            return int(im.size[1]), int(im.size[0])
    except Exception:  # noqa: BLE001 - a header that cannot be read: the frame's own row will say why
        return None


def check_frame_sizes(sources) -> tuple[int, int] | None:
    """The one frame size of all `sources` (from headers; None if none can be read).

    Raises
    ------
    InputError
        A source whose frames have another size than the first's (one run needs one frame size:
        the tables, the mask and the scan's image stage are sized for it).
    """
    first = None
    for src in sources:
        shape = _header_shape(src)
        if shape is None:
            continue
        if first is None:
            first = (src, shape)
        elif shape != first[1]:
            raise InputError(f"{src.name}: frames of {shape[0]}x{shape[1]} pixels, but {first[0].name} has "
                             f"{first[1][0]}x{first[1][1]}; one run needs one frame size (index them in separate runs)")
    return None if first is None else first[1]
