"""Echograms in MATLAB files: v5 (``scipy.io.loadmat``) and v7.3 (HDF5, ``h5py``).

The usual layout of airborne ice-radar echograms (common practice): ``Data``, a
matrix of fast time × traces; ``Time``, the two-way delay of each fast-time
sample (s); ``Latitude``, ``Longitude`` (deg) and ``Elevation`` (m, antenna
height), one per trace; optionally ``GPS_time`` (s). Other names through
``--map`` (see :mod:`.fields`). Variables may sit in a struct (``name.field``).

MATLAB stores arrays column-major; a v7.3 file's HDF5 datasets therefore hold
each array transposed (a fast time × traces matrix is read by h5py as traces ×
fast time): they are transposed back here, so both versions give the arrays as
MATLAB shows them. The matrix's orientation then follows the per-trace vectors
(the axis whose length is theirs holds the traces); ``--axis-order`` overrides.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ...errors import ObservedDataError
from . import Lookup, infer_axis_order
from .fields import DEFAULT_NAMES, missing_field

_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def is_v73(path: Path) -> bool:
    """True for a v7.3 MAT-file: an HDF5 file (its signature at byte 512, after the 128-byte
    text header and user block, or at 0)."""
    with open(path, "rb") as fh:
        head = fh.read(520)
    return head[:8] == _HDF5_SIGNATURE or head[512:520] == _HDF5_SIGNATURE


def _variables_v5(path: Path) -> dict:
    from scipy.io import loadmat

    try:
        raw = loadmat(path, squeeze_me=False, struct_as_record=False)
    except Exception as exc:  # scipy's MatReadError, ValueError, OSError...: all mean "cannot read it"
        raise ObservedDataError(f"{path}: not a readable MATLAB file ({type(exc).__name__}: {exc})") from None
    out = {}

    def walk(prefix, value):
        if hasattr(value, "_fieldnames"):  # a struct
            for f in value._fieldnames:
                walk(f"{prefix}.{f}", getattr(value, f))
        elif isinstance(value, np.ndarray) and value.dtype == object and value.size == 1:
            walk(prefix, value.item())
        elif isinstance(value, np.ndarray) and np.issubdtype(value.dtype, np.number):
            out[prefix] = value

    for name, value in raw.items():
        if not name.startswith("__"):
            walk(name, value)
    return out


def _variables_v73(path: Path) -> dict:
    import h5py

    out = {}
    try:
        with h5py.File(path, "r") as f:
            def visit(name, obj):
                if isinstance(obj, h5py.Dataset) and obj.dtype.kind in "iufc" and not name.startswith("#"):
                    out[name.replace("/", ".")] = np.asarray(obj[()]).T  # column-major on disk
                elif isinstance(obj, h5py.Dataset) and obj.dtype.names == ("real", "imag"):
                    v = obj[()]
                    out[name.replace("/", ".")] = (v["real"] + 1j * v["imag"]).T
            f.visititems(visit)
    except OSError as exc:
        raise ObservedDataError(f"{path}: not a readable MATLAB v7.3 (HDF5) file ({exc})") from None
    return out


def read_matlab(path, file_format: str, mapping: dict, *, geometry=None, axis_order=None):
    """The :class:`~cluttersim.io.readers.Lookup` and the (trace, sample) echoes of a MATLAB file."""
    path = Path(path)
    if not path.exists():
        raise ObservedDataError(f"{path}: MATLAB file not found")
    if geometry is not None:
        raise ObservedDataError(f"{path}: --geometry applies to PDS products; name MATLAB variables with --map")
    variables = _variables_v73(path) if is_v73(path) else _variables_v5(path)
    lowered = {k.lower(): k for k in variables}
    wanted = (mapping["data"].name,) if "data" in mapping else DEFAULT_NAMES["matlab"]["data"]
    key = next((lowered[w.lower()] for w in wanted if w.lower() in lowered), None)
    if key is None:
        raise missing_field(str(path), "data", wanted, variables)
    matrix = variables.pop(key)
    if matrix.ndim != 2:
        raise ObservedDataError(f"{path}: {key} has shape {matrix.shape}; expected a 2-D matrix (fast time × traces)")
    lookup = Lookup(str(path))
    for name, value in variables.items():
        v = np.squeeze(value)
        if v.ndim <= 1:
            lookup.add(name, v if v.ndim == 1 else float(v.real))
    # the traces lie along the axis as long as the latitude vector (else: as any vector)
    lat_names = (mapping["lat"].name,) if "lat" in mapping else DEFAULT_NAMES["matlab"]["lat"]
    lat = next((lookup.get(n) for n in lat_names if lookup.get(n) is not None), None)
    lengths = {np.asarray(lat[1]).size} if lat is not None else {np.asarray(v).size for v, _ in lookup.entries.values()}
    if axis_order is None:  # default: the layout's fast time × traces
        axis_order = infer_axis_order(matrix.shape, lengths, "samples-traces")
    values = matrix.T if axis_order == "samples-traces" else matrix
    return lookup, np.asarray(values)
