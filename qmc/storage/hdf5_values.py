"""How Python values are stored in HDF5 attributes and datasets, and read back as plain Python values.

* attributes: ``None`` -> ``""``; lists of numbers -> numeric arrays; other lists and dicts -> JSON text;
  everything else as h5py stores it;
* datasets: numpy arrays, unicode arrays as UTF-8 bytes (HDF5 has no fixed-width unicode type);
* mappings (:func:`fill_mapping`): numpy arrays -> datasets, mappings -> subgroups, the rest -> attributes;
* reading (:func:`plain`): bytes decoded, numpy scalars and arrays as Python numbers and lists.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["attribute", "storable", "plain", "fill_mapping", "read_mapping"]


def _flat_numbers(value: Any) -> bool:
    return isinstance(value, (list, tuple)) and len(value) > 0 and all(
        isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) for v in value)


def attribute(value: Any) -> Any:
    """A value h5py can store as an attribute (None -> "", nested lists/dicts -> JSON text)."""
    if value is None:
        return ""
    if isinstance(value, (dict, list, tuple)) and not _flat_numbers(value):
        return json.dumps(value, default=str)
    if isinstance(value, (list, tuple)):
        return np.asarray(value)
    return value


def storable(a: np.ndarray) -> np.ndarray:
    """Unicode arrays become UTF-8 bytes; other arrays are stored as they are."""
    if a.dtype.kind == "U":
        return np.char.encode(a, "utf-8")
    return a


def plain(value: Any) -> Any:
    """Plain Python value of an HDF5 attribute or small dataset (bytes decoded, arrays as lists)."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        return [plain(v) for v in value.tolist()] if value.ndim else plain(value.item())
    if isinstance(value, list):
        return [plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def fill_mapping(g: Any, values: Mapping[str, Any]) -> None:
    """Store ``values`` in the HDF5 group ``g``: arrays as datasets, mappings as subgroups, the rest as
    attributes."""
    for k, v in values.items():
        if isinstance(v, np.ndarray):
            g.create_dataset(k, data=storable(v))
        elif isinstance(v, Mapping):
            fill_mapping(g.create_group(k), v)
        else:
            g.attrs[k] = attribute(v)


def read_mapping(g: Any) -> dict[str, Any]:
    """Inverse of :func:`fill_mapping` (attributes as plain values, datasets as numpy arrays)."""
    out: dict[str, Any] = {k: plain(v) for k, v in g.attrs.items()}
    for k, v in g.items():
        out[k] = read_mapping(v) if hasattr(v, "keys") else np.asarray(v[()])
    return out
