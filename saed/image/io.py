"""Reading recorded patterns: TIFF, PNG, JPEG, ``.npy`` and microscope formats, as 2-D float32 arrays, never rescaled.

Every problem with a file (missing, truncated, not an image, colour, NaN, empty, all zero, one pixel
wide, a frame that does not exist) is raised as one :class:`saed.errors.ImageError` whose message
names the file and the problem.

Formats
-------
* TIFF (tifffile): 8/16/32-bit unsigned and signed integers, 16/32/64-bit floats, one page or many
  (each page is a frame; ``frame`` picks one). A page whose data would reach beyond the end of the
  file is reported as truncated rather than read as zeros.
* PNG and JPEG (Pillow, which matplotlib already depends on): 8-bit grey, 16-bit grey, 32-bit
  integer and float grey. Colour images are accepted only when every channel is equal (a grey image
  saved as RGB); an alpha channel is ignored.
* ``.npy`` (numpy, no pickles): a 2-D array, or a stack whose last two axes are the detector
  (``frame`` is the flat index over the leading axes). Read through a memory map, so a large stack
  costs only the frame asked for.
* Microscope formats (DM3/DM4, EMD, SER/EMI, MRC and the others rosettasciio reads): through
  :mod:`saed.image.microscope`, lazily (only the frame asked for is decoded).

The format is told by the file's first bytes (a TIFF named ``.npy`` is read as a TIFF), then by
the suffix. Before a frame is decoded its memory need is estimated and refused with the numbers when
it will not fit (:mod:`saed.image.memory`).

Pixel convention (CONTRACT.md): the array is indexed ``[row, column]``, i.e. ``[y, x]``.
"""

from __future__ import annotations

import contextlib
import logging
import math
import re
import struct
import tokenize
import warnings
import zlib
from pathlib import Path

import numpy as np

from saed.calibration import PLAUSIBLE_SCALE_INV_NM_PER_PX
from saed.errors import ImageError
from saed.image.memory import check_frame_memory
from saed.image.metadata import FileMetadata
from saed.units import RECIPROCAL_UNITS_INV_NM, normalise_unit

__all__ = ["read_image", "read_pattern", "read_metadata", "read_image_calibration", "count_frames", "read_mask_image", "check_image",
           "MIN_SIDE_PX", "MAX_PIXELS", "RECIPROCAL_UNITS_INV_NM", "readable_formats"]

logger = logging.getLogger(__name__)

#: The smallest image side that can hold a diffraction pattern (pixels): below 32 the border and
#: beam-stop masks leave too little to measure (a 16x16 frame fails after reading, 24x24 finds no spots).
MIN_SIDE_PX = 32
#: The largest frame read (pixels): 16384 x 16384. Larger is almost surely a corrupt header.
MAX_PIXELS = 16384 * 16384


_TIFF_SUFFIXES = (".tif", ".tiff")
_PIL_SUFFIXES = (".png", ".jpg", ".jpeg")
_NPY_SUFFIXES = (".npy",)
# What third-party decoders raise on corrupt bytes (Pillow raises SyntaxError for broken PNG chunks,
# numpy's .npy header parser SyntaxError or tokenize.TokenError); found by fuzzing (tests/test_image_io.py).
_FLOAT32_MAX = float(np.finfo(np.float32).max)
_DECODE_ERRORS = (ValueError, OSError, EOFError, KeyError, IndexError, TypeError, AttributeError,
                  struct.error, zlib.error, SyntaxError, OverflowError, RuntimeError, ZeroDivisionError,
                  NotImplementedError, UnicodeDecodeError, tokenize.TokenError)


def readable_formats() -> str:
    """The formats saed reads, for messages."""
    from saed.image.microscope import microscope_format_names

    return f"TIFF, PNG, JPEG, .npy, {microscope_format_names()}"


def _kind(path: Path) -> str:
    """'tiff', 'pil', 'npy' or 'microscope': by the first bytes, then by the suffix."""
    from saed.image.microscope import MICROSCOPE_SUFFIXES, is_microscope_file

    suffix = path.suffix.lower()
    try:
        with open(path, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise ImageError(f"{path}: cannot read the file ({exc.strerror or exc.__class__.__name__})") from None
    if head[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return "tiff"
    if head.startswith(b"\x89PNG") or head.startswith(b"\xff\xd8"):
        return "pil"
    if head.startswith(b"\x93NUMPY"):
        return "npy"
    if suffix in MICROSCOPE_SUFFIXES or is_microscope_file(path, head):
        return "microscope"
    if suffix in _TIFF_SUFFIXES:
        return "tiff"
    if suffix in _PIL_SUFFIXES:
        return "pil"
    if suffix in _NPY_SUFFIXES:
        return "npy"
    raise ImageError(f"{path}: not an image format saed reads (suffix {suffix or 'none'!r}; it reads "
                     f"{readable_formats()})")


def _check_file(path) -> Path:
    p = Path(path)
    if not p.exists():
        raise ImageError(f"{path}: no such file")
    if p.is_dir():
        raise ImageError(f"{path}: is a folder, not an image file")
    if p.stat().st_size == 0:
        raise ImageError(f"{path}: the file is empty (0 bytes)")
    return p


def _check_frame(path, frame, n: int) -> int:
    if frame is None:
        if n > 1:
            logger.info("%s holds %d frames; reading frame 0 (choose with --frame)", path, n)
        return 0
    f = int(frame)
    if not 0 <= f < n:
        what = "1 frame" if n == 1 else f"{n} frames (0-{n - 1})"
        raise ImageError(f"{path}: frame {f} does not exist; the file holds {what}")
    return f


def _check_shape(path, shape) -> None:
    shape = tuple(int(s) for s in shape)
    if any(s == 0 for s in shape):
        raise ImageError(f"{path}: the image is empty (shape {shape})")
    if math.prod(shape) > MAX_PIXELS:
        raise ImageError(f"{path}: the image is too large ({'x'.join(map(str, shape))} pixels; at most 16384x16384)")


# --------------------------------------------------------------------------- TIFF

class _DemoteTifffile(logging.Filter):
    """Pass tifffile's complaints about a damaged file on as debug messages of this module, so the
    microscopist sees one line (our ImageError), not tifffile's internals as well."""

    def filter(self, record: logging.LogRecord) -> bool:
        logger.debug("tifffile: %s", record.getMessage())
        return False


@contextlib.contextmanager
def _quiet_tifffile():
    tl = logging.getLogger("tifffile")
    flt = _DemoteTifffile()
    tl.addFilter(flt)
    try:
        yield
    finally:
        tl.removeFilter(flt)


def _open_tiff(path: Path):
    import tifffile

    try:
        return tifffile.TiffFile(path)
    except (tifffile.TiffFileError, *_DECODE_ERRORS) as exc:
        raise ImageError(f"{path}: not a readable TIFF ({_short(exc)})") from None


def _tiff_frame(path: Path, frame, *, colour_ok: bool = False) -> np.ndarray:
    import tifffile

    size = path.stat().st_size
    with _quiet_tifffile(), _open_tiff(path) as tif:
        try:
            n = len(tif.pages)
            if n == 0:
                raise ImageError(f"{path}: the TIFF holds no image")
            k = _check_frame(path, frame, n)
            page = tif.pages[k]
            if not hasattr(page, "asarray"):
                raise ImageError(f"{path}: frame {k} of the TIFF is not an image")
            _check_shape(path, page.shape)
            offsets, counts = page.dataoffsets, page.databytecounts
            if not offsets or not counts:
                raise ImageError(f"{path}: the TIFF page has no image data")
            end = max(int(o) + int(c) for o, c in zip(offsets, counts))
            if end > size:
                raise ImageError(f"{path}: the TIFF is truncated (image data runs to byte {end}, the file has {size})")
            check_frame_memory(path, page.shape[:2], np.dtype(page.dtype).itemsize if page.dtype else 4)
            data = page.asarray()
            photometric = int(page.photometric) if page.photometric is not None else 1
            planar_first = page.planarconfig == 2
        except ImageError:
            raise
        except (tifffile.TiffFileError, *_DECODE_ERRORS) as exc:
            raise ImageError(f"{path}: the TIFF cannot be decoded ({_short(exc)})") from None
        except MemoryError:
            raise ImageError(f"{path}: the TIFF is too large to read into memory") from None
    if data.ndim == 3:
        if planar_first:
            data = np.moveaxis(data, 0, -1)
        if not colour_ok:
            data = _grey_from_channels(path, data, photometric_rgb=photometric in (2, 6))
    return data


# --------------------------------------------------------------------------- PNG / JPEG

def _pil_frame(path: Path, frame, *, colour_ok: bool = False) -> np.ndarray:
    from PIL import Image

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path) as im:
                n = int(getattr(im, "n_frames", 1))
                k = _check_frame(path, frame, n)
                if k:
                    im.seek(k)
                _check_shape(path, (im.height, im.width))
                check_frame_memory(path, (im.height, im.width), 4)
                mode = im.mode
                if mode == "P":
                    im = im.convert("RGBA")
                    mode = "RGBA"
                elif mode == "1":
                    im = im.convert("L")
                    mode = "L"
                elif mode in ("CMYK", "YCbCr", "LAB", "HSV") and not colour_ok:
                    raise ImageError(f"{path}: a colour image ({mode}); save the pattern as a greyscale image")
                data = np.asarray(im)
    except ImageError:
        raise
    except (Image.DecompressionBombError, Image.DecompressionBombWarning):
        raise ImageError(f"{path}: the image header claims an implausibly large size") from None
    except _DECODE_ERRORS as exc:
        raise ImageError(f"{path}: not a readable PNG or JPEG ({_short(exc)})") from None
    except MemoryError:
        raise ImageError(f"{path}: the image is too large to read into memory") from None
    if data.ndim == 3 and not colour_ok:
        data = _grey_from_channels(path, data, photometric_rgb=True)
    return data


# --------------------------------------------------------------------------- .npy

def _open_npy(path: Path) -> np.ndarray:
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except ValueError as exc:
        text = str(exc)
        if "pickle" in text.lower():
            raise ImageError(f"{path}: the .npy holds Python objects, not a numeric image") from None
        raise ImageError(f"{path}: not a readable .npy (truncated or corrupt: {_short(exc)})") from None
    except (*_DECODE_ERRORS, MemoryError) as exc:
        raise ImageError(f"{path}: not a readable .npy ({_short(exc)})") from None
    if not isinstance(arr, np.ndarray):
        raise ImageError(f"{path}: the .npy file holds no array")
    return arr


def _npy_frames(path: Path, arr: np.ndarray) -> int:
    if arr.ndim < 2:
        raise ImageError(f"{path}: the .npy array has shape {arr.shape}; an image needs two axes (rows, columns)")
    return int(math.prod(arr.shape[:-2]))


def _npy_frame(path: Path, frame) -> np.ndarray:
    arr = _open_npy(path)
    n = _npy_frames(path, arr)
    if n == 0:
        raise ImageError(f"{path}: the .npy stack is empty (shape {arr.shape})")
    k = _check_frame(path, frame, n)
    _check_shape(path, arr.shape[-2:])
    check_frame_memory(path, arr.shape[-2:], arr.dtype.itemsize)
    try:
        data = np.array(arr.reshape((-1,) + arr.shape[-2:])[k])
    except (*_DECODE_ERRORS, MemoryError) as exc:
        raise ImageError(f"{path}: the .npy data cannot be read ({_short(exc)})") from None
    return data


# --------------------------------------------------------------------------- shared checks

def _grey_from_channels(path, data: np.ndarray, *, photometric_rgb: bool) -> np.ndarray:
    """(rows, cols, channels) -> (rows, cols): accepted only when the colour channels are equal."""
    c = data.shape[-1]
    if c == 1:
        return data[..., 0]
    if c == 2:  # grey + alpha
        return data[..., 0]
    colour = data[..., :3] if c in (3, 4) and photometric_rgb else data
    first = colour[..., 0]
    for i in range(1, colour.shape[-1]):
        if not np.array_equal(first, colour[..., i]):
            raise ImageError(f"{path}: a colour image ({c} channels that differ); save the pattern as a greyscale image")
    return first


def check_image(data, *, name: str = "image") -> np.ndarray:
    """The checks :func:`read_image` applies, for an array from elsewhere; returns 2-D float32.

    Raises ImageError (message starting with `name`) for a non-numeric, non-2-D, empty, too small,
    NaN/infinite, all-zero or constant array.
    """
    return _finish(name, np.asarray(data))


def _finish(path, data: np.ndarray) -> np.ndarray:
    """Dtype and content checks shared by every format; returns a C-contiguous 2-D float32 copy."""
    if data.dtype.kind == "c":
        raise ImageError(f"{path}: complex-valued data ({data.dtype}) is not an intensity image")
    if data.dtype.kind not in "biuf":
        raise ImageError(f"{path}: data of type {data.dtype} is not an intensity image")
    if data.ndim != 2:
        raise ImageError(f"{path}: expected a 2-D image, got shape {data.shape}")
    rows, cols = data.shape
    if rows == 0 or cols == 0:
        raise ImageError(f"{path}: the image is empty (shape {data.shape})")
    if min(rows, cols) < MIN_SIDE_PX:
        raise ImageError(f"{path}: the image is {rows}x{cols} pixels; a pattern needs at least "
                         f"{MIN_SIDE_PX} pixels in each direction")
    if data.dtype.kind == "f":
        finite = np.isfinite(data)
        if not finite.all():
            bad = data.size - int(np.count_nonzero(finite))
            raise ImageError(f"{path}: {bad} pixels are NaN or infinite; replace them (e.g. by 0) or mask them")
        big = float(np.max(np.abs(data)))
        if big > _FLOAT32_MAX:  # checked before the cast, which would overflow (with a numpy warning)
            raise ImageError(f"{path}: pixel values up to {big:.3g} exceed the range of an intensity image "
                             f"({_FLOAT32_MAX:.3g}); rescale the pattern before saving it")
    img = np.ascontiguousarray(data, dtype=np.float32)
    lo, hi = float(img.min()), float(img.max())
    if hi == 0.0 and lo == 0.0:
        raise ImageError(f"{path}: every pixel is zero (an empty exposure?)")
    if hi == lo:
        raise ImageError(f"{path}: every pixel has the same value {hi:g} (saturated or blank exposure)")
    return img


def _short(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    if len(text) > 90:
        text = text[:87] + "..."
    return f"{exc.__class__.__name__}: {text}" if text else exc.__class__.__name__


# --------------------------------------------------------------------------- public

def count_frames(path) -> int:
    """Number of frames in an image file: TIFF pages, animated PNG frames, or the product of the leading axes of a ``.npy``.

    Raises
    ------
    ImageError
        The file is missing, empty, not an image, or corrupt.
    """
    p = _check_file(path)
    kind = _kind(p)
    if kind == "microscope":
        from saed.image.microscope import count_microscope_frames

        return count_microscope_frames(p)
    if kind == "tiff":
        import tifffile

        with _quiet_tifffile(), _open_tiff(p) as tif:
            try:
                return len(tif.pages)
            except (tifffile.TiffFileError, *_DECODE_ERRORS) as exc:
                raise ImageError(f"{path}: the TIFF cannot be decoded ({_short(exc)})") from None
    if kind == "npy":
        return _npy_frames(p, _open_npy(p))
    from PIL import Image

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(p) as im:
                return int(getattr(im, "n_frames", 1))
    except (Image.DecompressionBombError, Image.DecompressionBombWarning):
        raise ImageError(f"{path}: the image header claims an implausibly large size") from None
    except _DECODE_ERRORS as exc:
        raise ImageError(f"{path}: not a readable PNG or JPEG ({_short(exc)})") from None


def read_image(path, *, frame: int | None = None) -> np.ndarray:
    """Read one frame of a recorded pattern as a 2-D float32 array of the stored values.

    Parameters
    ----------
    path : str or Path
        TIFF, PNG, JPEG, ``.npy`` or a microscope format (:mod:`saed.image.microscope`); the format
        is told by the first bytes, then by the suffix.
    frame : int, optional
        Which frame of a multi-page TIFF, animated PNG or ``.npy`` stack (flat index over the leading
        axes); default the first. Asking for a frame that does not exist is an error.

    Returns
    -------
    ndarray of shape (rows, cols), float32
        The stored values, not rescaled (a 16-bit count of 4000 stays 4000.0). Indexed ``[y, x]``.

    Raises
    ------
    ImageError
        One line naming the file and the problem: missing, empty, truncated, not an image, colour,
        complex, smaller than 32 pixels in a direction, NaN, infinite or out-of-range pixels, every
        pixel zero or equal, a frame out of range, or a frame too large for the memory available.

    Examples
    --------
    >>> import tempfile, os
    >>> d = tempfile.mkdtemp(); p = os.path.join(d, "p.npy")
    >>> np.save(p, np.arange(1024, dtype=np.uint16).reshape(32, 32))
    >>> img = read_image(p); img.dtype, img.shape, float(img[31, 31])
    (dtype('float32'), (32, 32), 1023.0)
    """
    return _finish(path, _read_raw(path, frame))


def _read_raw(path, frame, *, colour_ok: bool = False) -> np.ndarray:
    return _read_raw_and_metadata(path, frame, colour_ok=colour_ok)[0]


def _read_raw_and_metadata(path, frame, *, colour_ok: bool = False, metadata: bool = False):
    p = _check_file(path)
    kind = _kind(p)
    if kind == "microscope":
        from saed.image.microscope import read_frame

        return read_frame(p, frame)
    if kind == "tiff":
        data = _tiff_frame(p, frame, colour_ok=colour_ok)
    elif kind == "npy":
        data = _npy_frame(p, frame)
    else:
        data = _pil_frame(p, frame, colour_ok=colour_ok)
    if not metadata:
        return data, None
    n = count_frames(p)
    fmt = {"tiff": "TIFF", "npy": ".npy"}.get(kind, "PNG/JPEG")
    scale = read_image_calibration(p) if kind == "tiff" else None
    notes = (f"frame {frame if frame is not None else 0} of {n} (choose with --frame)",) if n > 1 else ()
    return data, FileMetadata(format=fmt, frame_shape=data.shape[:2], n_frames=n, scan_shape=(n,) if n > 1 else (),
                              scale_inv_nm_per_px=scale, scale_unit="TIFF resolution tags" if scale else None,
                              mode="diffraction" if scale else None, notes=notes)


def read_metadata(path) -> FileMetadata:
    """What a file says about itself, without decoding its pixels (microscope formats, TIFF tags).

    The frame shape of a PNG/JPEG/TIFF is read from its header; ``.npy`` from its header too.
    """
    p = _check_file(path)
    kind = _kind(p)
    if kind == "microscope":
        from saed.image.microscope import read_frames

        return read_frames(p)[1]
    n = count_frames(p)
    if kind == "npy":
        shape = _open_npy(p).shape[-2:]
        return FileMetadata(format=".npy", frame_shape=shape, n_frames=n, scan_shape=_open_npy(p).shape[:-2])
    if kind == "tiff":
        import tifffile

        with _quiet_tifffile(), _open_tiff(p) as tif:
            try:
                shape = tif.pages[0].shape[:2]
            except (tifffile.TiffFileError, *_DECODE_ERRORS) as exc:
                raise ImageError(f"{path}: the TIFF cannot be decoded ({_short(exc)})") from None
        scale = read_image_calibration(p)
        return FileMetadata(format="TIFF", frame_shape=shape, n_frames=n, scan_shape=(n,) if n > 1 else (),
                            scale_inv_nm_per_px=scale, scale_unit="TIFF resolution tags" if scale else None,
                            mode="diffraction" if scale else None)
    return FileMetadata(format="PNG/JPEG", frame_shape=(0, 0), n_frames=n)


def read_pattern(path, *, frame: int | None = None) -> tuple[np.ndarray, FileMetadata]:
    """:func:`read_image` and what the file says about itself: ``(image, FileMetadata)``.

    For microscope formats the metadata are the file's own (scale, voltage, camera length, pixel
    pitch, binning, exposure...); for a TIFF, the reciprocal scale of its resolution tags
    (:func:`read_image_calibration`); PNG, JPEG and ``.npy`` carry none.

    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "p.npy")
    >>> np.save(p, np.arange(1024, dtype=np.uint16).reshape(32, 32))
    >>> img, meta = read_pattern(p); img.shape, meta.format, meta.scale_inv_nm_per_px
    ((32, 32), '.npy', None)
    """
    data, meta = _read_raw_and_metadata(path, frame, metadata=True)
    return _finish(path, data), meta


def read_mask_image(path, *, shape: tuple[int, int]) -> np.ndarray:
    """Read a mask image: True where a pixel is to be ignored (any non-zero value, in any channel).

    Any format :func:`read_image` reads; colour is allowed (a region painted in any colour is
    masked). The mask must have exactly `shape` (rows, cols) of the pattern.

    Raises
    ------
    ImageError
        Unreadable file, or a shape different from the pattern's.
    """
    data = _read_raw(path, None, colour_ok=True)
    if data.ndim == 3:
        data = data.max(axis=-1) if data.shape[-1] != 4 else data[..., :3].max(axis=-1)
    if data.dtype.kind == "f" and not np.isfinite(data).all():
        raise ImageError(f"{path}: the mask has NaN or infinite pixels")
    if data.ndim != 2 or tuple(data.shape) != tuple(shape):
        raise ImageError(f"{path}: the mask is {'x'.join(map(str, data.shape))} pixels but the pattern is "
                         f"{shape[0]}x{shape[1]}; draw the mask on the same image")
    return np.asarray(data != 0)


_UNIT_RE = re.compile(r"^\s*unit\s*=\s*(.+?)\s*$", re.MULTILINE)


def _zero_denominator(value) -> bool:
    try:
        return float(value[1]) == 0.0
    except (TypeError, ValueError, IndexError):
        return True


def read_image_calibration(path) -> float | None:
    """The detector scale (1/nm per pixel) stored in a TIFF's resolution tags, or None.

    Accepted: a TIFF whose ImageJ description gives a reciprocal-length ``unit`` (``1/nm``, ``nm^-1``,
    ``1/A``, ``1/Å``, ``A^-1``, ``1/um``, ...; see :data:`RECIPROCAL_UNITS_INV_NM`) together with
    XResolution = YResolution = pixels per that unit, which is how ImageJ/Fiji and tifffile store a
    calibrated diffraction pattern. The scale is then ``unit_in_inv_nm / XResolution``.

    Not accepted (returns None): real-space units or inch/centimetre ResolutionUnit (a printing
    resolution, or an image-mode calibration in nm, says nothing about reciprocal space), unequal X and
    Y resolutions (non-square pixels), and scales outside the plausible range of
    :data:`saed.calibration.PLAUSIBLE_SCALE_INV_NM_PER_PX` (each logged as a warning). PNG, JPEG and
    ``.npy`` files carry no calibration: None.

    Raises
    ------
    ImageError
        The file is missing or not a readable image.
    """
    p = _check_file(path)
    if _kind(p) != "tiff":
        return None
    import tifffile

    with _quiet_tifffile(), _open_tiff(p) as tif:
        try:
            page = tif.pages[0]
            meta = tif.imagej_metadata or {}
            desc = page.description or ""
            tags = {name: page.tags.get(name) for name in ("XResolution", "YResolution")}
            # tifffile's own reader turns the rationals into pixels per unit (a missing tag reads as 1)
            px_per_unit_x, px_per_unit_y = page.get_resolution()
        except (tifffile.TiffFileError, *_DECODE_ERRORS) as exc:
            raise ImageError(f"{path}: the TIFF cannot be decoded ({_short(exc)})") from None
    unit = meta.get("unit")
    if unit is None:
        m = _UNIT_RE.search(desc)
        unit = m.group(1) if m else None
    if unit is None or tags["XResolution"] is None:
        return None
    factor = RECIPROCAL_UNITS_INV_NM.get(normalise_unit(str(unit)))
    if factor is None:
        logger.debug("%s: resolution unit %r is not a reciprocal length; no calibration taken", path, unit)
        return None
    if tags["YResolution"] is None:
        px_per_unit_y = px_per_unit_x
    # a zero denominator is a broken tag (tifffile would read n/0 as n): refused like any unusable value
    broken = any(t is not None and _zero_denominator(t.value) for t in tags.values())
    px_per_unit_x, px_per_unit_y = float(px_per_unit_x), float(px_per_unit_y)
    if broken or not (math.isfinite(px_per_unit_x) and px_per_unit_x > 0
                      and math.isfinite(px_per_unit_y) and px_per_unit_y > 0):
        logger.warning("%s: unusable resolution tags (%r, %r); no calibration taken", path,
                       *(None if t is None else t.value for t in tags.values()))
        return None
    if abs(px_per_unit_x - px_per_unit_y) > 1e-3 * max(px_per_unit_x, px_per_unit_y):
        logger.warning("%s: X and Y resolutions differ (%g, %g px per %s); no calibration taken",
                       path, px_per_unit_x, px_per_unit_y, unit)
        return None
    scale = factor / px_per_unit_x
    lo, hi = PLAUSIBLE_SCALE_INV_NM_PER_PX
    if not lo <= scale <= hi:
        logger.warning("%s: resolution tags give %g 1/nm per px, outside the plausible %g-%g; no calibration taken",
                       path, scale, lo, hi)
        return None
    return scale
