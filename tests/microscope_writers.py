"""Test helpers that write small microscope files with known pixels and metadata.

saed reads these formats only through rosettasciio; these writers exist so the tests can build
their own inputs from the published descriptions of each layout, independently of the reader:

* DM3 / DM4 ("tag file"): the layout described by Chris Boothroyd ("The DM3 file format",
  Ernst Ruska-Centre notes, 2002) and by Bernd Heymann's DM3/DM4 notes (from memory): a
  big-endian header (version, root length, byte-order flag), then a tree of tag groups (tag type
  20) and data tags (21) whose data follow a ``%%%%`` marker and an info array of type codes
  (2 short, 3 long, 4 ushort, 5 ulong, 6 float, 7 double, 8 bool, 9 char, 10 octet, 11 long long,
  20 array, 15 struct, 18 string). DM4 widens every count and size to 8 bytes and gives each tag a
  total size before its contents. Data are in the byte order of the flag (1 = little endian).
* SER (TIA series file): the layout published by FEI and described by Boothroyd ("SER file
  format", 2001; from memory): header 0x4949, series id 0x0197, version 0x0210, data type 0x4122
  (2-D elements), tag type 0x4152 (time only), element counts, offset-array offset, dimension
  array; each element: calibration offset/delta/element for X and Y (f8, f8, i4), data type code,
  sizes X and Y, then the pixels. Rows are stored bottom-up (the reader flips them).
* EMD: HDF5 written with h5py, both the Berkeley layout (emdatasets.com spec 0.2: root attributes
  ``version_major``/``version_minor``, a ``data/<name>`` group with ``emd_group_type = 1``, a
  ``data`` dataset and ``dim1``, ``dim2`` vectors with ``name`` and ``units`` attributes, and a
  ``microscope`` group of attributes) and the instrument maker's layout (a ``Version`` JSON
  dataset, ``Data/Image/<id>/Data`` as (rows, cols, frames) and ``Data/Image/<id>/Metadata`` as
  JSON text in uint8 columns; optics in SI units).
* MRC: written with the ``mrcfile`` library (MRC2014).
"""

from __future__ import annotations

import json
import struct

import numpy as np

# ----------------------------------------------------------------------------- DM3 / DM4

#: numpy dtype -> (DM image data type code, tag element type code), from the DM scripting manual's
#: table of image data types (from memory): 1 int16, 2 float32, 6 uint8, 7 int32, 9 int8,
#: 10 uint16, 11 uint32, 12 float64.
_DM_IMAGE_TYPES = {
    np.dtype("int16"): (1, 2), np.dtype("float32"): (2, 6), np.dtype("uint8"): (6, 10),
    np.dtype("int32"): (7, 3), np.dtype("int8"): (9, 9), np.dtype("uint16"): (10, 4),
    np.dtype("uint32"): (11, 5), np.dtype("float64"): (12, 7),
}
_SIMPLE = {2: "h", 3: "i", 4: "H", 5: "I", 6: "f", 7: "d", 8: "?", 9: "b", 10: "B", 11: "q", 12: "Q"}


class DMData:
    """A data tag: `code` is the element type; `values` a scalar, a list (array), or raw bytes."""

    def __init__(self, code: int, values, *, raw: bytes | None = None, count: int | None = None):
        self.code, self.values, self.raw, self.count = code, values, raw, count


def dm_string(text: str) -> DMData:
    """A text tag as DM writes it: an array of 16-bit characters."""
    return DMData(4, [ord(c) for c in text])


def _dm_encode(node, *, v4: bool, le: bool) -> bytes:
    q = ">q" if v4 else ">i"
    bo = "<" if le else ">"
    d: DMData = node
    if isinstance(d.values, list) or d.raw is not None:
        n = d.count if d.count is not None else (len(d.values) if d.raw is None else len(d.raw) // struct.calcsize(_SIMPLE[d.code]))
        info = [20, d.code, n]
        payload = d.raw if d.raw is not None else struct.pack(bo + _SIMPLE[d.code] * len(d.values), *d.values)
    else:
        info = [d.code]
        payload = struct.pack(bo + _SIMPLE[d.code], d.values)
    head = b"%%%%" + struct.pack(q, len(info)) + b"".join(struct.pack(q, v) for v in info)
    return head + payload


def _unnamed(children) -> dict:
    """A group of unnamed entries (DM writes lists, e.g. the image list, as groups with empty names)."""
    return {"\x00" * k: c for k, c in enumerate(children)}  # distinct dict keys, renamed below


def dm_tree(data: np.ndarray, *, scale=1.0, units="", origin=0.0, voltage_v=None, mode=None,
            illumination="TEM", camera_length_mm=None, pixel_size_um=None, binning=None,
            exposure_s=None, microscope=None, name="pattern", date=None, time=None,
            frame_units="") -> dict:
    """The tag tree of a DM file holding one image (2-D), stack (3-D) or 4-D scan `data` ([..., rows, cols])."""
    data = np.ascontiguousarray(data)
    dm_type, el_type = _DM_IMAGE_TYPES[data.dtype]
    dims = list(data.shape[::-1])  # DM lists X (columns) first
    cal_dims = []
    for k in range(len(dims)):
        if k < 2:
            cal_dims.append({"Origin": DMData(6, float(origin)), "Scale": DMData(6, float(scale)),
                             "Units": dm_string(units)})
        else:
            cal_dims.append({"Origin": DMData(6, 0.0), "Scale": DMData(6, 1.0), "Units": dm_string(frame_units)})
    image_tags: dict = {}
    mi: dict = {}
    if voltage_v is not None:
        mi["Voltage"] = DMData(7, float(voltage_v))
    if illumination is not None:
        mi["Illumination Mode"] = dm_string(illumination)
    if mode is not None:
        mi["Imaging Mode"] = dm_string(mode)
    if camera_length_mm is not None:
        mi["Indicated Magnification"] = DMData(7, float(camera_length_mm))
    if microscope is not None:
        mi["Name"] = dm_string(microscope)
    if mi:
        image_tags["Microscope Info"] = mi
    acq: dict = {}
    if binning is not None or exposure_s is not None:
        hl = {}
        if binning is not None:
            hl["Binning"] = DMData(3, [int(binning), int(binning)])
        if exposure_s is not None:
            hl["Exposure (s)"] = DMData(7, float(exposure_s))
        acq["Parameters"] = {"High Level": hl}
    if pixel_size_um is not None:
        acq["Device"] = {"CCD": {"Pixel Size (um)": DMData(7, [float(pixel_size_um)] * 2)}, "Name": dm_string("camera")}
    if acq:
        image_tags["Acquisition"] = acq
    if date is not None:
        image_tags["DataBar"] = {"Acquisition Date": dm_string(date), "Acquisition Time": dm_string(time or "")}
    image = {
        "ImageData": {
            "Calibrations": {
                "Brightness": {"Origin": DMData(6, 0.0), "Scale": DMData(6, 1.0), "Units": dm_string("")},
                "Dimension": _unnamed(cal_dims),
                "DisplayCalibratedUnits": DMData(8, True),
            },
            "Data": DMData(el_type, None, raw=data.astype(data.dtype.newbyteorder("<")).tobytes()),
            "DataType": DMData(3, dm_type),
            "Dimensions": _unnamed([DMData(5, int(d)) for d in dims]),
            "PixelDepth": DMData(5, int(data.dtype.itemsize)),
        },
        "ImageTags": image_tags,
        "Name": dm_string(name),
    }
    return {"ApplicationBounds": DMData(5, [0, 0, 100, 100]), "ImageList": _unnamed([image]),
            "DocumentObjectList": _unnamed([{"AnnotationType": DMData(3, 20)}])}


def _dm_children_bytes(node: dict, *, v4: bool, le: bool) -> bytes:
    out = bytearray()
    for name, child in node.items():
        label = b"" if (name == "" or set(name) == {"\x00"}) else name.encode("latin-1")
        if isinstance(child, dict):
            body = struct.pack(">BB", 0, 1) + struct.pack(">q" if v4 else ">i", len(child)) + \
                _dm_children_bytes(child, v4=v4, le=le)
            kind = 20
        else:
            body = _dm_encode(child, v4=v4, le=le)
            kind = 21
        out += struct.pack(">bh", kind, len(label)) + label
        if v4:
            out += struct.pack(">q", len(body))
        out += body
    return bytes(out)


def dm_bytes(tree: dict, *, version: int = 4, little_endian: bool = True) -> bytes:
    """Serialise a tag tree (dicts are groups; keys made of NUL characters are unnamed entries)."""
    v4 = version == 4
    body = struct.pack(">BB", 0, 1) + struct.pack(">q" if v4 else ">i", len(tree)) + \
        _dm_children_bytes(tree, v4=v4, le=little_endian)
    tail = b"\x00" * 8
    size = len(body) + len(tail)
    head = struct.pack(">i", version) + (struct.pack(">q", size) if v4 else struct.pack(">i", size)) + \
        struct.pack(">i", 1 if little_endian else 0)
    return head + body + tail


def write_dm(path, data, *, version: int = 4, **tags) -> None:
    """Write `data` as a DM3 (`version` 3) or DM4 file with the metadata of :func:`dm_tree`."""
    with open(path, "wb") as fh:
        fh.write(dm_bytes(dm_tree(np.asarray(data), **tags), version=version))


# ----------------------------------------------------------------------------- SER (TIA)

_SER_TYPES = {np.dtype("uint8"): 1, np.dtype("uint16"): 2, np.dtype("uint32"): 3, np.dtype("int8"): 4,
              np.dtype("int16"): 5, np.dtype("int32"): 6, np.dtype("float32"): 7, np.dtype("float64"): 8}


def write_ser(path, frames, *, delta=1.0, units_1d="") -> None:
    """Write a TIA series of 2-D elements: `frames` (n, rows, cols) or (rows, cols); `delta` is the
    calibration step per pixel in SI units (m or 1/m, which the .ser itself does not say)."""
    frames = np.asarray(frames)
    if frames.ndim == 2:
        frames = frames[None]
    n, rows, cols = frames.shape
    dtype = frames.dtype
    desc, unit = b"Number", units_1d.encode()
    dim = struct.pack("<IddI", n, 0.0, 1.0, 0) + struct.pack("<I", len(desc)) + desc + \
        struct.pack("<I", len(unit)) + unit
    header_len = 30 + len(dim)
    offsets_at = header_len
    first = offsets_at + 8 * n  # offset array (4 bytes each) then tag-offset array (4 bytes each)
    element_len = 2 * (8 + 8 + 4) + 2 + 4 + 4 + rows * cols * dtype.itemsize
    data_offsets = [first + k * element_len for k in range(n)]
    tag_start = first + n * element_len
    tag_offsets = [tag_start + k * 8 for k in range(n)]
    head = struct.pack("<HHHIIII", 0x4949, 0x0197, 0x0210, 0x4122, 0x4152, n, n) + \
        struct.pack("<II", offsets_at, 1)
    out = bytearray(head + dim)
    out += struct.pack(f"<{n}I", *data_offsets) + struct.pack(f"<{n}I", *tag_offsets)
    for k in range(n):
        out += struct.pack("<ddI", 0.0, float(delta), 0) + struct.pack("<ddI", 0.0, float(delta), 0)
        out += struct.pack("<HII", _SER_TYPES[dtype], cols, rows)
        out += np.ascontiguousarray(frames[k][::-1]).astype(dtype.newbyteorder("<")).tobytes()  # bottom-up rows
    for k in range(n):
        out += struct.pack("<HHI", 0x4152, 0, 1_700_000_000 + k)
    with open(path, "wb") as fh:
        fh.write(bytes(out))


def write_emi(path, *, mode="TEM Diffraction", high_tension_kv=None, camera_length_m=None,
              microscope="Tecnai-like", date="Tue Dec 01 22:10:00 2026") -> None:
    """A minimal .emi companion: the XML <ObjectInfo> block TIA writes, with the experimental description."""
    rows = []
    if high_tension_kv is not None:
        rows.append(("High tension", f"{high_tension_kv:g}", "kV"))
    if camera_length_m is not None:
        rows.append(("Camera length", f"{camera_length_m:g}", "m"))
    rows.append(("Mode", mode, ""))
    rows.append(("Microscope", microscope, ""))
    data = "".join(f"<Data><Label>{a}</Label><Value>{b}</Value><Unit>{c}</Unit></Data>" for a, b, c in rows)
    xml = (f"<ObjectInfo><AcquireDate>{date}</AcquireDate><ExperimentalDescription><Root>{data}</Root>"
           f"</ExperimentalDescription><AcquireInfo><CameraNamePath>cam</CameraNamePath></AcquireInfo></ObjectInfo>")
    with open(path, "wb") as fh:
        fh.write(b"\x00" * 64 + xml.encode() + b"\x00" * 16)


# ----------------------------------------------------------------------------- EMD

def write_emd_berkeley(path, data, *, scale=1.0, units="[n_m^-1]", microscope_attrs=None) -> None:
    """EMD 0.2 (Berkeley): data[rows, cols] (or [n, rows, cols]) with dim vectors in `units`."""
    import h5py

    data = np.asarray(data)
    with h5py.File(path, "w") as f:
        f.attrs["version_major"] = 0
        f.attrs["version_minor"] = 2
        g = f.create_group("data/pattern")
        g.attrs["emd_group_type"] = 1
        # The Berkeley layout stores the axes in the reverse order (dim1 = x, the columns)
        arr = np.ascontiguousarray(np.transpose(data))
        g.create_dataset("data", data=arr)
        for k, size in enumerate(arr.shape):
            d = g.create_dataset(f"dim{k + 1}", data=np.arange(size) * (scale if k < 2 else 1.0))
            d.attrs["name"] = ["x", "y", "n"][k]
            d.attrs["units"] = units if k < 2 else ""
        if microscope_attrs:
            m = f.create_group("microscope")
            for key, value in microscope_attrs.items():
                m.attrs[key] = value


def write_emd_maker(path, data, *, pixel_size=1.0, pixel_unit="1/m", voltage_v=200000.0, camera_length_m=None,
                    binning=1, exposure_s=0.5, instrument="TEM-200", unix_time=1_764_700_000) -> None:
    """The instrument maker's EMD layout: Version JSON, Data/Image/<id>/{Data (rows, cols, frames), Metadata}."""
    import h5py

    data = np.asarray(data)
    stack = data[None] if data.ndim == 2 else data
    uid = "6fdbde41eecc4e2b8b2d1e6f0a0e9b7c"
    meta = {
        "BinaryResult": {"PixelSize": {"width": repr(float(pixel_size)), "height": repr(float(pixel_size))},
                         "PixelUnitX": pixel_unit, "PixelUnitY": pixel_unit,
                         "Offset": {"x": "0", "y": "0"}, "DetectorIndex": "0"},
        "Optics": {"AccelerationVoltage": repr(float(voltage_v))},
        "Acquisition": {"AcquisitionStartDatetime": {"DateTime": str(unix_time)}},
        "Detectors": {"Detector-0": {"DetectorName": "BM-Camera", "ExposureTime": repr(float(exposure_s)),
                                     "Binning": {"width": str(binning), "height": str(binning)}}},
        "Instrument": {"InstrumentClass": "TEM", "InstrumentModel": instrument},
        "Scan": {},
    }
    if camera_length_m is not None:
        meta["Optics"]["CameraLength"] = repr(float(camera_length_m))
    text = np.frombuffer(json.dumps(meta).encode() + b"\x00" * 8, dtype=np.uint8)
    with h5py.File(path, "w") as f:
        f.create_dataset("Version", data=np.array([json.dumps({"format": "Velox", "version": "11"}).encode()]))
        g = f.create_group(f"Data/Image/{uid}")
        g.create_dataset("Data", data=np.ascontiguousarray(np.moveaxis(stack, 0, -1)), chunks=stack.shape[1:] + (1,))
        g.create_dataset("Metadata", data=np.repeat(text[:, None], stack.shape[0], axis=1))


# ----------------------------------------------------------------------------- MRC

def write_mrc(path, data, *, voxel_size_angstrom=None) -> None:
    import mrcfile

    with mrcfile.new(path, overwrite=True) as m:
        m.set_data(np.asarray(data))
        if voxel_size_angstrom is not None:
            m.voxel_size = voxel_size_angstrom
