"""Nested Python data <-> HDF5 groups, datasets and attributes.

Used for the parts of a checkpoint whose shape is not fixed: the task definition, the
settings and the optimizer/objective ``resume_state``. The mapping is:

* Mapping -> group (keys become strings; '/' and a leading '.' are escaped)
* None, bool, int, float, str (and numpy scalars) -> attribute of the parent group
* numpy array -> dataset (string arrays as UTF-8)
* list/tuple of numbers or of strings -> dataset marked with its container type
* other lists/tuples (nested, mixed, of arrays or dicts) -> group with members '0', '1', ...
* :class:`Geometry` -> group marked 'geometry' (symbols, coordinates in bohr, charge, spin)
* enums and :class:`StateLabel` -> their string value

:func:`read_tree` returns the same structure (lists stay lists, tuples stay tuples,
Geometry stays Geometry).
"""

from __future__ import annotations

import enum
from typing import Any, Mapping

import h5py
import numpy as np

from ..geometry import Geometry
from ..states import StateLabel

__all__ = ["write_tree", "read_tree"]

_MARK = "__container__"  # attribute naming the Python container a group/dataset came from
_NONE = h5py.Empty("f")


def _escape(key: Any) -> str:
    text = str(key.value) if isinstance(key, enum.Enum) else str(key)
    text = text.replace("%", "%25").replace("/", "%2F")
    if not text or text.startswith("."):
        text = "%2E" + text[1:] if text else "%00"
    return text


def _unescape(text: str) -> str:
    if text == "%00":
        return ""
    if text.startswith("%2E"):
        text = "." + text[3:]
    return text.replace("%2F", "/").replace("%25", "%")


def _scalar(value: Any) -> Any:
    """Python/numpy scalar -> a value h5py stores as an attribute, or None if not a scalar."""
    if isinstance(value, (bool, np.bool_)):
        return np.bool_(value)
    if isinstance(value, (int, np.integer)):
        return np.int64(value)
    if isinstance(value, (float, np.floating)):
        return np.float64(value)
    if isinstance(value, str):
        return value
    if isinstance(value, (StateLabel,)):
        return str(value)
    if isinstance(value, enum.Enum):
        return _scalar(value.value)
    return None


def _is_homogeneous(seq: Any) -> str | None:
    """'num' or 'str' for flat sequences of numbers / strings, else None."""
    if all(isinstance(v, (bool, int, float, np.bool_, np.integer, np.floating)) for v in seq):
        return "num"
    if seq and all(isinstance(v, str) for v in seq):
        return "str"
    return None


def write_tree(group: h5py.Group, data: Mapping[str, Any], path: str = "") -> None:
    """Store the mapping ``data`` inside ``group`` (see module docstring)."""
    for raw_key, value in data.items():
        key = _escape(raw_key)
        where = f"{path}/{raw_key}"
        _write_item(group, key, value, where)


def _write_item(group: h5py.Group, key: str, value: Any, where: str) -> None:
    if value is None:
        group.attrs[key] = _NONE
        return
    scalar = _scalar(value)
    if scalar is not None:
        group.attrs[key] = scalar
        return
    if isinstance(value, Geometry):
        sub = group.create_group(key, track_order=True)
        sub.attrs[_MARK] = "geometry"
        sub.create_dataset("symbols", data=np.array(value.symbols, dtype=h5py.string_dtype()))
        sub.create_dataset("coords_bohr", data=np.asarray(value.coords_bohr))
        sub.attrs["charge"], sub.attrs["spin"], sub.attrs["title"] = value.charge, value.spin, value.title
        return
    if isinstance(value, Mapping):
        write_tree(group.create_group(key, track_order=True), value, where)
        return
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "US":
            group.create_dataset(key, data=value.astype(str).astype(object),
                                 dtype=h5py.string_dtype())
        elif value.dtype.kind in "biufc":
            group.create_dataset(key, data=value)
        else:
            raise TypeError(f"cannot store the array at {where} (dtype {value.dtype}) in a checkpoint")
        return
    if isinstance(value, (list, tuple)):
        _write_sequence(group, key, value, where)
        return
    raise TypeError(f"cannot store {type(value).__name__} at {where} in a checkpoint")


def _write_sequence(group: h5py.Group, key: str, value: list | tuple, where: str) -> None:
    container = "tuple" if isinstance(value, tuple) else "list"
    kind = _is_homogeneous(value)
    if kind == "num":
        arr = np.asarray(value)
        if not value:
            arr = np.zeros(0)
        group.create_dataset(key, data=arr).attrs[_MARK] = container
    elif kind == "str":
        ds = group.create_dataset(key, data=np.array(value, dtype=object), dtype=h5py.string_dtype())
        ds.attrs[_MARK] = container
    else:
        sub = group.create_group(key, track_order=True)
        sub.attrs[_MARK] = container
        sub.attrs["length"] = len(value)
        for i, item in enumerate(value):
            _write_item(sub, str(i), item, f"{where}[{i}]")


def _read_attr(value: Any) -> Any:
    if isinstance(value, h5py.Empty):
        return None
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, bytes):
        return value.decode()
    return value


def _read_dataset(ds: h5py.Dataset) -> Any:
    container = ds.attrs.get(_MARK)
    if h5py.check_string_dtype(ds.dtype) is not None:
        data = ds.asstr()[()]
        data = np.asarray(data, dtype=str) if isinstance(data, np.ndarray) else str(data)
    else:
        data = ds[()]
    if container in ("list", "tuple"):
        items = [_read_attr(v) if isinstance(v, np.generic) else v for v in np.asarray(data).tolist()]
        return tuple(items) if container == "tuple" else items
    return np.asarray(data)


def read_tree(group: h5py.Group) -> Any:
    """Inverse of :func:`write_tree` for a group (returns a dict, list, tuple or Geometry)."""
    container = group.attrs.get(_MARK)
    if container == "geometry":
        return Geometry(tuple(group["symbols"].asstr()[()]), group["coords_bohr"][()],
                        int(group.attrs["charge"]), int(group.attrs["spin"]),
                        str(group.attrs.get("title", "")))
    out: dict[str, Any] = {}
    for key, value in group.attrs.items():
        if key in (_MARK,) or (container in ("list", "tuple") and key == "length"):
            continue
        out[_unescape(key)] = _read_attr(value)
    for key, member in group.items():
        out[_unescape(key)] = read_tree(member) if isinstance(member, h5py.Group) else _read_dataset(member)
    if container in ("list", "tuple"):
        items = [out[str(i)] for i in range(int(group.attrs["length"]))]
        return tuple(items) if container == "tuple" else items
    return out
