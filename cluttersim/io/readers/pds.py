"""PDS3 and PDS4 products, read with the Planetary Data Reader (``pdr``, optional extra ``[pds]``).

A product is opened from its label: a detached PDS3 ``.lbl``, a PDS4 ``.xml``, or a
PDS3 file with an attached label (``--format pds3``). The echoes are an array
object (a radargram image, PDS3 ``IMAGE`` or PDS4 ``Array_2D*``) or a table's
vector column (one echo per row: PDS3 ``ITEMS``, which ``pdr`` spreads into
columns ``NAME_0``, ``NAME_1``, ...). Geometry and timing are the columns of the
product's tables (and of ``geometry``, a second product, when given) and the
keywords of its label(s) — constants for every trace, such as a window start
keyword to which a per-row shift column adds (see :mod:`.fields`). Units come
from each column's ``UNIT`` (PDS3) or ``unit`` (PDS4) and from a keyword's
``<units>`` (PDS3) or ``unit`` attribute (PDS4). Scaling factors, offsets and
special constants of arrays are applied by ``pdr`` (special constants → NaN).

The array's orientation follows the tables: the axis whose length is the
number of table rows holds the traces; when that does not decide, an array
object is read as drawn (rows are samples, delay down) and a table's vector
column as one echo per row. ``--axis-order`` overrides.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ...errors import ObservedDataError
from . import Lookup, infer_axis_order
from .fields import DEFAULT_NAMES, missing_field


def _import_pdr(path):
    try:
        import pdr
    except ImportError:
        raise ObservedDataError(
            f"{path}: reading PDS3/PDS4 products needs the optional package pdr: pip install 'cluttersim[pds]'"
        ) from None
    return pdr


def _open(path: Path):
    pdr = _import_pdr(path)
    if not path.exists():
        raise ObservedDataError(f"{path}: PDS product (label) not found")
    try:
        return pdr.read(str(path))
    except Exception as exc:  # pdr raises many kinds for a label it cannot parse
        raise ObservedDataError(f"{path}: not a PDS3/PDS4 label pdr can read ({type(exc).__name__}: {exc})") from None


def _objects(data, path: Path):
    """{name: ndarray or DataFrame} of the product's data objects (labels left out)."""
    out = {}
    for key in data.keys():
        if key.lower() == "label":
            continue
        try:
            obj = data[key]
        except Exception as exc:
            raise ObservedDataError(f"{path}: cannot read object {key} ({type(exc).__name__}: {exc})") from None
        if isinstance(obj, np.ndarray) and obj.ndim == 2 and obj.dtype.fields is None:
            try:
                scaled = data.get_scaled(key)
            except Exception:
                scaled = obj
            out[key] = np.ma.filled(np.ma.asarray(scaled).astype(np.float64), np.nan)
        elif hasattr(obj, "columns"):
            out[key] = obj
    return out


def _pds3_units(data, obj_name: str) -> dict:
    """Column name → UNIT from a PDS3 table object's COLUMN definitions."""
    units = {}
    try:
        block = data.metadata[obj_name]
    except Exception:
        return units
    for key, col in getattr(block, "items", lambda: [])():
        if key == "COLUMN" and hasattr(col, "get"):
            if col.get("NAME") is not None and col.get("UNIT") is not None:
                units[str(col.get("NAME"))] = str(col.get("UNIT"))
    return units


def _pds3_keywords(meta, lookup: Lookup) -> None:
    """Every numeric keyword of a PDS3 label (nested objects included) as a constant."""
    stack = [meta]
    while stack:
        block = stack.pop(0)
        for key, value in getattr(block, "items", lambda: [])():
            if isinstance(value, dict) and "value" in value and "units" in value:
                value, unit = value["value"], value["units"]
            elif hasattr(value, "items"):
                stack.append(value)
                continue
            else:
                unit = None
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                lookup.add(key, float(value), unit)


def _pds4_label(path: Path):
    import xml.etree.ElementTree as ET

    try:
        return ET.parse(path).getroot()
    except (ET.ParseError, OSError):
        return None


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _pds4_units_and_keywords(root, lookup: Lookup) -> dict:
    """Field name → unit of PDS4 table fields; numeric leaf elements become constants in ``lookup``."""
    units = {}
    if root is None:
        return units
    for el in root.iter():
        name = _local(el.tag)
        if name.startswith("Field_"):
            fname = next((c.text for c in el if _local(c.tag) == "name"), None)
            funit = next((c.text for c in el if _local(c.tag) == "unit"), None)
            if fname and funit:
                units[fname.strip()] = funit.strip()
        elif len(el) == 0 and el.text and name not in ("offset", "elements", "records", "fields", "groups", "axes",
                                                       "field_number", "field_location", "field_length",
                                                       "sequence_number", "object_length"):  # fmt: skip
            try:
                value = float(el.text.strip())
            except ValueError:
                continue
            lookup.add(name, value, el.get("unit"))
    return units


def _fill(lookup: Lookup, path: Path, file_format: str, data, objects: dict) -> None:
    """Add the tables' columns (with units), then the label's keywords, to ``lookup``."""
    root = _pds4_label(path) if data.standard == "PDS4" else None
    pds4_units = _pds4_units_and_keywords(root, Lookup(str(path))) if root is not None else {}
    for name, obj in objects.items():
        if not hasattr(obj, "columns"):
            continue
        units = _pds3_units(data, name) if data.standard == "PDS3" else pds4_units
        for col in obj.columns:
            values = obj[col].to_numpy()
            if np.issubdtype(values.dtype, np.number):
                lookup.add(str(col), values.astype(np.float64), units.get(str(col)))
    if data.standard == "PDS3":
        _pds3_keywords(data.metadata, lookup)
        direction = data.metaget("POSITIVE_LONGITUDE_DIRECTION")
    else:
        _pds4_units_and_keywords(root, lookup)
        direction = next((el.text for el in root.iter() if _local(el.tag) == "longitude_direction"), None) \
            if root is not None else None  # fmt: skip
    if direction is not None and "west" in str(direction).lower():
        lookup.west_longitudes = True  # the label says longitudes count westward


def read_pds(path, file_format: str, mapping: dict, *, geometry=None, axis_order=None):
    """The :class:`~cluttersim.io.readers.Lookup` and the (trace, sample) echoes of a PDS3/PDS4 product."""
    path = Path(path)
    data = _open(path)
    objects = _objects(data, path)
    if not objects:
        raise ObservedDataError(f"{path}: no array or table found through this PDS label; expected a PDS3/PDS4 label "
                                "pointing at the radargram (or --format pds3 for a file with an attached label)")  # fmt: skip
    lookup = Lookup(str(path))
    tables = {k: v for k, v in objects.items() if hasattr(v, "columns")}
    arrays = {k: v for k, v in objects.items() if isinstance(v, np.ndarray)}
    values, kind, data_name = _echo_array(path, mapping, arrays, tables)
    _fill(lookup, path, file_format, data, {k: v for k, v in tables.items()})
    rows = {len(t) for t in tables.values()}
    if geometry is not None:
        gpath = Path(geometry)
        gdata = _open(gpath)
        gobjects = _objects(gdata, gpath)
        _fill(lookup, gpath, "", gdata, gobjects)
        rows |= {len(t) for t in gobjects.values() if hasattr(t, "columns")}
        lookup.source = f"{path} (+ {gpath.name})"
    if axis_order is None:
        axis_order = infer_axis_order(values.shape, rows, "samples-traces" if kind == "array" else "traces-samples")
    if axis_order == "samples-traces":
        values = values.T
    # the echo column's own pieces are no geometry
    if kind == "column":
        for key in [k for k in lookup.entries if re.fullmatch(re.escape(data_name) + r"_\d+", k)]:
            del lookup.entries[key]
    return lookup, values


def _echo_array(path: Path, mapping: dict, arrays: dict, tables: dict):
    """The echoes as stored (2-D), whether they came from an array object or a table column, and the name."""
    wanted = (mapping["data"].name,) if "data" in mapping else DEFAULT_NAMES["pds"]["data"]
    for name in wanted:
        for key, arr in arrays.items():
            if key.lower() == name.lower():
                return arr, "array", key
        for tname, table in tables.items():
            pieces = [c for c in table.columns if re.fullmatch(re.escape(name) + r"_\d+", str(c), flags=re.I)]
            if len(pieces) > 1:
                pieces.sort(key=lambda c: int(str(c).rsplit("_", 1)[1]))
                return table[pieces].to_numpy(dtype=np.float64), "column", str(pieces[0]).rsplit("_", 1)[0]
    if "data" not in mapping and len(arrays) == 1:
        key, arr = next(iter(arrays.items()))
        return arr, "array", key
    found = list(arrays) + sorted({re.sub(r"_\d+$", "", str(c)) for t in tables.values() for c in t.columns})
    if "data" not in mapping and len(arrays) > 1:
        raise ObservedDataError(f"{path}: {len(arrays)} 2-D arrays ({', '.join(arrays)}); name the echoes with --map data=NAME")
    raise missing_field(str(path), "data", wanted, found)
