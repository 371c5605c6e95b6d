"""Microscope file formats (DM3/DM4, EMD, SER/EMI, MRC, ...) read through rosettasciio.

saed has no binary parser of its own for these formats: rosettasciio (imported here, lazily) decodes
the file into arrays, axes and the file's own tag tree; this module only picks the image, keeps
stacks and scans lazy (memory map or Dask array: a frame is decoded when asked for), and translates
the tags that matter for a diffraction calibration into a :class:`~saed.image.metadata.FileMetadata`
in saed's units.

The one reader function is :func:`read_frames`: ``(frames, metadata)`` where ``frames`` has shape
``scan_shape + (rows, cols)`` and is not decoded yet. :func:`read_frame` decodes one frame.

Where each value comes from, per format (tag paths as rosettasciio hands them over):

* DM3/DM4: axis scale and units of the two detector axes; ``Microscope Info``: ``Voltage`` (V),
  ``Imaging Mode`` (DIFFRACTION / IMAGING), ``Indicated Magnification`` which DM fills with the camera
  length (mm) in diffraction mode (rosettasciio maps it so), ``STEM Camera Length`` (mm), ``Name``;
  ``Acquisition``: ``Device.CCD.Pixel Size (um)`` (the sensor pitch), ``Parameters.High Level.Binning``
  and ``Exposure (s)``; ``DataBar`` date and time.
* EMD, instrument maker's layout: ``BinaryResult.PixelSize`` / ``PixelUnitX`` (converted by
  rosettasciio into the axis scale), ``Optics.AccelerationVoltage`` (V), ``Optics.CameraLength`` (m),
  ``Detectors.Detector-N``: ``Binning``, ``ExposureTime`` (s), ``DetectorName``;
  ``Instrument.InstrumentModel``; ``Acquisition.AcquisitionStartDatetime`` (Unix time).
* EMD, Berkeley layout: the ``dim`` vectors' units; the free-form ``microscope`` attributes
  ``voltage``/``high_tension``/``accelerating_voltage`` (kV; a value above 5000 is taken as volts),
  ``camera_length`` (mm), ``pixel_size``/``pixel_pitch`` (µm), ``binning``, ``exposure`` (s).
* SER with its EMI: TIA stores SI units; the EMI's ``Mode`` says diffraction or image, hence 1/m or
  m. ``High tension`` (kV), ``Camera length`` (m), ``Microscope``, ``AcquireDate``. A SER read
  without its EMI does not say whether its scale is in m or 1/m: the scale is not used.
* MRC: the header's pixel size is a real-space size (Å) and the format cannot say that the data are a
  diffraction pattern: the scale is not used; the FEI extended header's exposure is read.
* Any other format rosettasciio reads: axis units, and its standard ``Acquisition_instrument.TEM``
  metadata (``beam_energy`` kV, ``camera_length`` mm) when present.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import functools
import logging
import math
import re
import struct
import warnings
import zlib
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from saed.errors import ImageError
from saed.image.memory import address_space_guard, available_memory_bytes, check_frame_memory, format_bytes
from saed.image.metadata import FileMetadata
from saed.units import real_length_factor_nm, reciprocal_factor_inv_nm, unit_kind

__all__ = ["MICROSCOPE_SUFFIXES", "read_frames", "read_frame", "count_microscope_frames", "is_microscope_file",
           "microscope_format_names"]

logger = logging.getLogger(__name__)

#: Suffix -> (format name shown to the user, rosettasciio plugin module). The first group is
#: tested in saed (tests/test_microscope_formats.py); the rest is what rosettasciio reads besides.
MICROSCOPE_SUFFIXES = {
    ".dm3": ("DM3", "rsciio.digitalmicrograph"), ".dm4": ("DM4", "rsciio.digitalmicrograph"),
    ".emd": ("EMD", "rsciio.emd"), ".ser": ("SER", "rsciio.tia"), ".emi": ("EMI", "rsciio.tia"),
    ".mrc": ("MRC", "rsciio.mrc"),
    ".de5": ("DE5", "rsciio.emd"), ".hspy": ("HSPY", "rsciio.hspy"), ".blo": ("blockfile", "rsciio.blockfile"),
    ".mib": ("MIB", "rsciio.quantumdetector"), ".tvips": ("TVIPS", "rsciio.tvips"), ".unf": ("SEMPER", "rsciio.semper"),
}

#: Formats whose pixels are stored uncompressed: the declared size cannot exceed the file.
_UNCOMPRESSED = {"DM3", "DM4", "MRC", "SER", "blockfile", "MIB", "TVIPS", "SEMPER"}

_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
_SER_MAGIC = b"II\x97\x01"


def microscope_format_names() -> str:
    """'DM3, DM4, EMD, ...' for messages."""
    seen = []
    for name, _ in MICROSCOPE_SUFFIXES.values():
        if name not in seen:
            seen.append(name)
    return ", ".join(seen)


def is_microscope_file(path, head: bytes = b"") -> bool:
    """True for a suffix in :data:`MICROSCOPE_SUFFIXES`, or an HDF5 / SER file by its first bytes."""
    return Path(path).suffix.lower() in MICROSCOPE_SUFFIXES or head.startswith((_HDF5_MAGIC, _SER_MAGIC))


def _format_of(path: Path) -> tuple[str, str]:
    suffix = path.suffix.lower()
    if suffix in MICROSCOPE_SUFFIXES:
        return MICROSCOPE_SUFFIXES[suffix]
    with open(path, "rb") as fh:
        head = fh.read(8)
    if head.startswith(_HDF5_MAGIC):
        return "EMD", "rsciio.emd"
    return "SER", "rsciio.tia"


# --------------------------------------------------------------------------- errors and noise

def _decode_errors() -> tuple[type[BaseException], ...]:
    """What rosettasciio and the libraries under it raise on a corrupt file (found by fuzzing)."""
    errs: list[type[BaseException]] = [ValueError, OSError, EOFError, KeyError, IndexError, TypeError,
                                       AttributeError, struct.error, zlib.error, NotImplementedError,
                                       UnicodeDecodeError, OverflowError, RuntimeError, ZeroDivisionError,
                                       RecursionError, SyntaxError, LookupError, AssertionError, UnboundLocalError]
    import rsciio.exceptions as rx

    errs += [rx.DM3TagError, rx.DM3DataTypeError, rx.DM3TagTypeError, rx.DM3TagIDError, rx.DM3FileVersionError,
             rx.ByteOrderError]
    with contextlib.suppress(ImportError):
        from xml.etree.ElementTree import ParseError

        errs.append(ParseError)
    return tuple(errs)


class _Demote(logging.Filter):
    def filter(self, record: logging.LogRecord) -> bool:
        logger.debug("rosettasciio: %s", record.getMessage())
        return False


@contextlib.contextmanager
def _quiet():
    """rosettasciio's log messages and warnings become debug messages of this module: one line for the user."""
    targets = [logging.getLogger(n) for n in ("rsciio", "h5py", "dask")]
    flt = _Demote()
    for t in targets:
        t.addFilter(flt)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            yield
        for w in caught:
            logger.debug("rosettasciio warning: %s", w.message)
    finally:
        for t in targets:
            t.removeFilter(flt)


def _short(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    if len(text) > 90:
        text = text[:87] + "..."
    return f"{exc.__class__.__name__}: {text}" if text else exc.__class__.__name__


# --------------------------------------------------------------------------- the file's datasets

@dataclass(frozen=True)
class _Dataset:
    data: object  # lazy array, scan_shape + (rows, cols)
    metadata: FileMetadata


def _plain(value):
    """numpy scalars -> Python; bytes -> str."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.generic):
        return value.item()
    return value


def _get(tree, *keys):
    node = tree
    for k in keys:
        if not isinstance(node, dict) or k not in node:
            return None
        node = node[k]
    return _plain(node)


def _num(value) -> float | None:
    value = _plain(value)
    if isinstance(value, (list, tuple)) and value:
        value = value[0]
    if isinstance(value, bool):
        return None
    if isinstance(value, str):
        m = re.match(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)", value)
        value = m.group(1) if m else None
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _mode_from_text(text) -> str | None:
    if not isinstance(text, str):
        return None
    t = text.upper()
    if "DIFF" in t or t.strip() in ("SAD", "LAD"):
        return "diffraction"
    if "IMAG" in t or "MAG" in t:
        return "image"
    return None


def _dm_metadata(om: dict) -> dict:
    tags = _get(om, "ImageList", "TagGroup0", "ImageTags") or {}
    mi = tags.get("Microscope Info", {}) if isinstance(tags, dict) else {}
    acq = tags.get("Acquisition", {}) if isinstance(tags, dict) else {}
    out: dict = {}
    v = _num(mi.get("Voltage"))
    out["voltage_kv"] = v / 1e3 if v is not None else None
    mode = _mode_from_text(_plain(mi.get("Imaging Mode")))
    out["mode"] = mode
    cl = _num(mi.get("STEM Camera Length"))
    if mode == "diffraction" and _num(mi.get("Indicated Magnification")) is not None:
        cl = _num(mi.get("Indicated Magnification"))
    out["camera_length_mm"] = cl
    out["pixel_pitch_um"] = _num(_get(acq, "Device", "CCD", "Pixel Size (um)"))
    out["binning"] = _num(_get(acq, "Parameters", "High Level", "Binning"))
    out["exposure_s"] = _num(_get(acq, "Parameters", "High Level", "Exposure (s)")) or \
        _num(_get(acq, "Parameters", "Detector", "exposure_s"))
    name = _plain(mi.get("Name")) or _get(tags, "Session Info", "Microscope")
    out["instrument"] = str(name) if name else None
    date, time = _get(tags, "DataBar", "Acquisition Date"), _get(tags, "DataBar", "Acquisition Time")
    out["acquired"] = " ".join(str(x) for x in (date, time) if x) or None
    return out


def _velox_metadata(om: dict) -> dict:
    out: dict = {}
    v = _num(_get(om, "Optics", "AccelerationVoltage"))
    out["voltage_kv"] = v / 1e3 if v is not None else None
    cl = _num(_get(om, "Optics", "CameraLength"))
    out["camera_length_mm"] = cl * 1e3 if cl is not None else None
    det = None
    index = _get(om, "BinaryResult", "DetectorIndex")
    dets = om.get("Detectors") if isinstance(om.get("Detectors"), dict) else {}
    if index is not None:
        det = dets.get(f"Detector-{index}")
    if det is None and len(dets) == 1:
        det = next(iter(dets.values()))
    det = det if isinstance(det, dict) else {}
    out["binning"] = _num(_get(det, "Binning", "width"))
    out["exposure_s"] = _num(det.get("ExposureTime"))
    model = _get(om, "Instrument", "InstrumentModel")
    name = det.get("DetectorName")
    out["instrument"] = " / ".join(str(x) for x in (model, name) if x) or None
    t = _num(_get(om, "Acquisition", "AcquisitionStartDatetime", "DateTime"))
    if t is not None:
        with contextlib.suppress(OverflowError, OSError, ValueError):
            out["acquired"] = _dt.datetime.fromtimestamp(t, _dt.timezone.utc).isoformat(timespec="seconds")
    return out


def _berkeley_metadata(om: dict) -> dict:
    attrs = {str(k).lower(): _plain(v) for k, v in (om.get("microscope") or {}).items()}
    out: dict = {}
    for key in ("voltage", "high_tension", "accelerating_voltage", "voltage_kv"):
        v = _num(attrs.get(key))
        if v is not None:
            out["voltage_kv"] = v / 1e3 if v > 5000 else v
            break
    out["camera_length_mm"] = _num(attrs.get("camera_length") or attrs.get("camera_length_mm"))
    out["pixel_pitch_um"] = _num(attrs.get("pixel_size") or attrs.get("pixel_pitch") or attrs.get("pixel_pitch_um"))
    out["binning"] = _num(attrs.get("binning"))
    out["exposure_s"] = _num(attrs.get("exposure") or attrs.get("exposure_s"))
    name = attrs.get("microscope") or attrs.get("name")
    out["instrument"] = str(name) if name else None
    return out


def _tia_metadata(om: dict) -> dict:
    desc = _get(om, "ObjectInfo", "ExperimentalDescription") or {}
    out: dict = {}
    out["voltage_kv"] = _num(desc.get("High tension_kV"))
    cl = _num(desc.get("Camera length_m"))
    out["camera_length_mm"] = cl * 1e3 if cl is not None else None
    out["mode"] = _mode_from_text(desc.get("Mode"))
    name = desc.get("Microscope")
    out["instrument"] = str(name) if name else None
    date = _get(om, "ObjectInfo", "AcquireDate")
    out["acquired"] = str(date) if date else None
    return out


def _mrc_metadata(om: dict) -> dict:
    fei = om.get("fei_header") if isinstance(om.get("fei_header"), dict) else {}
    return {"exposure_s": _num(fei.get("exp_time"))}


def _standard_metadata(md: dict) -> dict:
    tem = _get(md, "Acquisition_instrument", "TEM") or {}
    out: dict = {}
    if isinstance(tem, dict):
        out["voltage_kv"] = _num(tem.get("beam_energy"))
        out["camera_length_mm"] = _num(tem.get("camera_length"))
        name = tem.get("microscope")
        out["instrument"] = str(name) if name else None
    return out


def _signal_axes(axes: list, ndim: int) -> tuple[dict, dict]:
    """The (y, x) axis dicts of the detector: the last two array axes."""
    by_index = {}
    for k, ax in enumerate(axes):
        by_index[int(ax.get("index_in_array", k))] = ax
    return by_index.get(ndim - 2, {}), by_index.get(ndim - 1, {})


def _scale_fields(path, fmt: str, ay: dict, ax: dict, units_stated: bool) -> dict:
    """scale_inv_nm_per_px / real_pixel_size_nm from the detector axes, with notes."""
    notes = []
    unit = _plain(ax.get("units")) or _plain(ay.get("units")) or ""
    unit = "" if unit is None else str(unit)
    sx, sy = _num(ax.get("scale")), _num(ay.get("scale"))
    out = {"scale_unit": unit or None}
    if not unit or sx is None or sx <= 0:
        return {**out, "notes": notes}
    kind = unit_kind(unit)
    if sy is not None and sy > 0 and abs(sx - sy) > 1e-3 * max(sx, sy):
        notes.append(f"the file's X and Y scales differ ({sx:g}, {sy:g} {unit}); not used as a calibration")
        return {**out, "notes": notes}
    if not units_stated:
        notes.append(f"the {fmt} header's pixel size ({sx:g} {unit}) does not say whether the data are an image or "
                     "a diffraction pattern; not used as a calibration")
        return {**out, "notes": notes}
    if kind == "reciprocal":
        out["scale_inv_nm_per_px"] = sx * reciprocal_factor_inv_nm(unit)
    elif kind == "real":
        out["real_pixel_size_nm"] = sx * real_length_factor_nm(unit)
    elif unit.strip():
        notes.append(f"the file's scale unit {unit!r} is neither a reciprocal nor a real-space length; not used")
    return {**out, "notes": notes}


def _build_metadata(path: Path, fmt: str, plugin: str, entry: dict, *, units_stated: bool, title: str,
                    count: int) -> FileMetadata:
    data = entry["data"]
    shape = tuple(int(s) for s in data.shape)
    om = entry.get("original_metadata") or {}
    md = entry.get("metadata") or {}
    fields = _standard_metadata(md)
    if plugin == "rsciio.digitalmicrograph":
        fields.update({k: v for k, v in _dm_metadata(om).items() if v is not None})
    elif plugin == "rsciio.emd" and "BinaryResult" in om:
        fmt = "EMD (instrument-maker layout)"
        fields.update({k: v for k, v in _velox_metadata(om).items() if v is not None})
    elif plugin == "rsciio.emd":
        fmt = "EMD (Berkeley layout)"
        fields.update({k: v for k, v in _berkeley_metadata(om).items() if v is not None})
    elif plugin == "rsciio.tia":
        fields.update({k: v for k, v in _tia_metadata(om).items() if v is not None})
    elif plugin == "rsciio.mrc":
        fields.update({k: v for k, v in _mrc_metadata(om).items() if v is not None})
    ay, ax = _signal_axes(entry.get("axes") or [], len(shape))
    scale = _scale_fields(path, fmt, ay, ax, units_stated)
    notes = list(scale.pop("notes"))
    if fields.get("mode") is None:
        if "scale_inv_nm_per_px" in scale:
            fields["mode"] = "diffraction"
        elif "real_pixel_size_nm" in scale:
            fields["mode"] = "image"
    if count > 1:
        notes.append(f"the file holds {count} images; this is {title!r}")
    known = {f for f in FileMetadata.__dataclass_fields__}
    fields = {k: v for k, v in fields.items() if k in known}
    return FileMetadata(format=fmt, frame_shape=shape[-2:], n_frames=int(math.prod(shape[:-2])),
                        scan_shape=shape[:-2], units_stated=units_stated, image_name=title or None,
                        notes=tuple(notes), **scale, **fields)


def _rsciio_entries(path: Path, fmt: str, plugin: str) -> tuple[list[dict], bool]:
    """rosettasciio's dicts for the file, lazily; and whether the format states its units."""
    import importlib

    reader = importlib.import_module(plugin).file_reader
    units_stated = plugin != "rsciio.mrc"
    emi = _emi_of(path)
    if plugin == "rsciio.tia" and emi is not None:
        if emi.is_file():
            entries = reader(str(emi), lazy=True)
            mine = [e for e in entries if _get(e.get("metadata") or {}, "General", "original_filename") == path.name]
            return (mine or entries), True
        return reader(str(path), lazy=True), False
    return reader(str(path), lazy=True), units_stated


def _open(path: Path) -> tuple[list[_Dataset], str]:
    """The file's image datasets (lazy), cached per (path, modification time, size): a batch reading
    frame after frame of one stack decodes the header once."""
    st = path.stat()
    resolved = str(path.resolve())
    emi = _emi_of(path)  # a SER's metadata live in the EMI beside it: its appearance changes what is read
    emi_stamp = emi.stat().st_mtime_ns if emi is not None and emi.is_file() else None
    try:
        datasets, fmt = _open_cached(resolved, st.st_mtime_ns, st.st_size, emi_stamp)
    except ImageError as exc:  # name the file as the user typed it
        raise ImageError(str(exc).replace(resolved, str(path), 1)) from None
    return list(datasets), fmt


def _emi_of(path: Path) -> Path | None:
    """``NAME.emi`` for ``NAME_1.ser`` (TIA numbers the series files of one acquisition)."""
    if path.suffix.lower() != ".ser":
        return None
    return path.with_name(re.sub(r"_\d+$", "", path.stem) + ".emi")


@functools.lru_cache(maxsize=4)
def _open_cached(resolved: str, _mtime_ns: int, size: int, _emi_stamp) -> tuple[tuple[_Dataset, ...], str]:
    datasets, fmt = _open_uncached(Path(resolved), size)
    return tuple(datasets), fmt


def _open_uncached(path: Path, size: int) -> tuple[list[_Dataset], str]:
    fmt, plugin = _format_of(path)
    if plugin == "rsciio.tia":
        avail = available_memory_bytes()
        if avail is not None and size > avail:  # the library reads a series whole
            raise ImageError(f"{path}: a {format_bytes(size)} SER series does not fit in the {format_bytes(avail)} "
                             "of memory available")
    err = None
    with _quiet():  # the decoder's complaints, and files it leaves open on errors, stay inside
        try:
            with address_space_guard(max(1 << 30, 4 * size)):
                entries, units_stated = _rsciio_entries(path, fmt, plugin)
        except ImportError as exc:
            err = f"{path}: reading {fmt} files needs a library that is not installed ({_short(exc)})"
        except MemoryError:
            err = f"{path}: the {fmt} header declares more data than can be held in memory (a corrupt or truncated file?)"
        except _decode_errors() as exc:
            err = f"{path}: not a readable {fmt} file ({_short(exc)})"
        # (the error is held as text only: the failed decoder's frames, and a file it left open, are
        # released here, while its warnings are still caught)
    if err is not None:
        raise ImageError(err)
    images = []
    for e in entries or []:
        data = e.get("data")
        shape = getattr(data, "shape", ())
        if len(shape) >= 2 and getattr(data, "dtype", None) is not None:
            images.append(e)
    if not images:
        raise ImageError(f"{path}: the {fmt} file holds no image (only spectra or metadata)")
    titles = [str(_get(e.get("metadata") or {}, "General", "title") or f"image {k}") for k, e in enumerate(images)]
    datasets = []
    for e, title in zip(images, titles):
        meta = _build_metadata(path, fmt, plugin, e, units_stated=units_stated, title=title, count=len(images))
        data = e["data"]
        if fmt in _UNCOMPRESSED:
            declared = int(math.prod(int(s) for s in data.shape)) * int(np.dtype(data.dtype).itemsize)
            if declared > size:
                raise ImageError(f"{path}: the {fmt} header declares {'x'.join(str(int(s)) for s in data.shape)} "
                                 f"pixels ({format_bytes(declared)}) but the file has {format_bytes(size)}: "
                                 "truncated or corrupt")
        datasets.append(_Dataset(data, meta))
    return datasets, fmt


def _check_dtype(path, dtype) -> None:
    dt = np.dtype(dtype)
    if dt.kind == "c":
        raise ImageError(f"{path}: complex-valued data ({dt}) is not an intensity image")
    if dt.names is not None:
        raise ImageError(f"{path}: an RGB or compound image ({dt}); save the pattern as a greyscale image")
    if dt.kind not in "biuf":
        raise ImageError(f"{path}: data of type {dt} is not an intensity image")


def _default_frame(datasets: list[_Dataset]) -> int:
    """Without --frame: the first frame of the first image recorded in diffraction, else frame 0
    (a file from a scanning session may hold a real-space survey image before the pattern)."""
    start = 0
    for d in datasets:
        if d.metadata.mode == "diffraction":
            return start
        start += d.metadata.n_frames
    return 0


def _locate(path, datasets: list[_Dataset], frame) -> tuple[_Dataset, int]:
    total = sum(d.metadata.n_frames for d in datasets)
    if frame is None:
        frame = _default_frame(datasets)
        if total > 1:
            logger.info("%s holds %d frames; reading frame %d (choose with --frame)", path, total, frame)
    f = int(frame)
    if not 0 <= f < total:
        what = "1 frame" if total == 1 else f"{total} frames (0-{total - 1})"
        raise ImageError(f"{path}: frame {f} does not exist; the file holds {what}")
    for d in datasets:
        if f < d.metadata.n_frames:
            return d, f
        f -= d.metadata.n_frames
    raise ImageError(f"{path}: frame {frame} does not exist")  # unreachable: total checked above


def read_frames(path, *, image: int | None = None):
    """Open a microscope file: ``(frames, metadata)`` with the frames not decoded yet.

    Parameters
    ----------
    path : str or Path
        A file in one of :data:`MICROSCOPE_SUFFIXES` (or HDF5 / SER by content).
    image : int, optional
        Which image of a file that holds several (default: the first recorded in diffraction, else the
        first).

    Returns
    -------
    frames : dask array or memory map of shape ``scan_shape + (rows, cols)``
        Lazy: indexing and ``numpy.asarray`` decode only what is asked for.
    metadata : FileMetadata

    Raises
    ------
    ImageError
        Unreadable, truncated or corrupt file, or one holding no image (one line naming the file).
    """
    p = Path(path)
    datasets, _fmt = _open(p)
    if image is None:  # the image holding the default frame (the first recorded in diffraction)
        k, start, first = 0, 0, _default_frame(datasets)
        while start + datasets[k].metadata.n_frames <= first:
            start += datasets[k].metadata.n_frames
            k += 1
    else:
        k = int(image)
    if not 0 <= k < len(datasets):
        raise ImageError(f"{path}: image {k} does not exist; the file holds {len(datasets)}")
    return datasets[k].data, datasets[k].metadata


def count_microscope_frames(path) -> int:
    """Frames in all images of a microscope file (stacks and scans flattened)."""
    datasets, _ = _open(Path(path))
    return sum(d.metadata.n_frames for d in datasets)


def read_frame(path, frame=None) -> tuple[np.ndarray, FileMetadata]:
    """Decode one frame (flat index over every image of the file, then over scan axes) and its metadata.

    The frame's size is checked against the memory available before it is decoded.
    """
    p = Path(path)
    datasets, fmt = _open(p)
    ds, k = _locate(path, datasets, frame)
    meta = ds.metadata
    _check_dtype(path, ds.data.dtype)
    rows, cols = meta.frame_shape
    from saed.image.io import MAX_PIXELS, MIN_SIDE_PX

    if rows * cols > MAX_PIXELS:
        raise ImageError(f"{path}: the image is too large ({rows}x{cols} pixels; at most 16384x16384)")
    if min(rows, cols) < MIN_SIDE_PX:
        raise ImageError(f"{path}: the image is {rows}x{cols} pixels; a pattern needs at least "
                         f"{MIN_SIDE_PX} pixels in each direction")
    check_frame_memory(path, (rows, cols), np.dtype(ds.data.dtype).itemsize)
    index = np.unravel_index(k, meta.scan_shape) if meta.scan_shape else ()
    try:
        with _quiet():
            block = ds.data[tuple(int(i) for i in index)]
            if hasattr(block, "compute"):
                block = block.compute(scheduler="synchronous")
            arr = np.asarray(block)  # a memory-map view for DM/MRC: no copy before the float32 conversion
    except MemoryError:
        raise ImageError(f"{path}: the frame is too large to read into memory") from None
    except _decode_errors() as exc:
        raise ImageError(f"{path}: the {fmt} pixel data cannot be read (truncated or corrupt: {_short(exc)})") from None
    if arr.shape != (rows, cols):
        raise ImageError(f"{path}: the {fmt} frame has shape {arr.shape}, not the declared {rows}x{cols}")
    if meta.n_frames > 1 or len(datasets) > 1:
        shown = frame if frame is not None else _default_frame(datasets)
        meta = replace(meta, notes=meta.notes + (f"frame {shown} of {sum(d.metadata.n_frames for d in datasets)} "
                                                 "(choose with --frame)",))
    return arr, meta
