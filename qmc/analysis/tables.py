"""Tables of all observables versus the coupling for every size, written as CSV and JSON.

One row per scan point (replicas merged), sorted by (L, coupling, beta).  Columns: ``L``, ``beta``,
the coupling, other varying parameters, ``task``, ``replicas``, ``n_bins``, then for every
observable ``<name>``, ``<name>_err`` (one standard error) and ``<name>_tau`` (tau_int in bins),
and ``cos4_hist`` (histogram estimate of <cos 4 theta>) when a VBS histogram was stored.  Missing
or undefined values are empty cells in CSV and ``null`` in JSON.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["observable_names", "table_rows", "to_jsonable", "write_csv", "write_json"]


def to_jsonable(obj: Any) -> Any:
    """Recursively convert numpy values, tuples and paths to JSON types; NaN/inf become None."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Path):
        return str(obj)
    return obj


def observable_names(points: Sequence[dict]) -> list[str]:
    """Sorted union of the observable names of all points."""
    return sorted(set().union(*(p["observables"] for p in points))) if points else []


def table_rows(
    points: Sequence[dict], coupling: str | None, extra: Sequence[str] = ()
) -> tuple[list[str], list[dict]]:
    """Column names and row dicts of the observable table (see module docstring)."""
    names = observable_names(points)
    has_vbs = any(p.get("vbs") for p in points)
    cols = ["L", "beta"] + ([coupling] if coupling else []) + list(extra) + ["task", "replicas", "n_bins"]
    for n in names:
        cols += [n, f"{n}_err", f"{n}_tau"]
    if has_vbs:
        cols.append("cos4_hist")
    rows = []
    for p in points:
        row: dict[str, Any] = {"L": p["L"], "beta": p["beta"], "task": p["task"]}
        if coupling:
            row[coupling] = p["g"]
        for k in extra:
            row[k] = p["params"].get(k)
        row["replicas"] = len(p["info"].get("replicas", [])) or 1
        row["n_bins"] = p["info"].get("n_bins")
        for n in names:
            o = p["observables"].get(n)
            if o is not None:
                row[n], row[f"{n}_err"], row[f"{n}_tau"] = o["mean"], o["error"], o["tau_int"]
        if has_vbs and p.get("vbs"):
            row["cos4_hist"] = p["vbs"].get("cos4_hist")
        rows.append(row)
    return cols, rows


def _cell(v: Any) -> str:
    v = to_jsonable(v)
    if v is None:
        return ""
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, list):
        return " ".join(str(x) for x in v)
    return str(v)


def _atomic_write(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def write_csv(path: str | os.PathLike, columns: Sequence[str], rows: Sequence[dict]) -> Path:
    """Write rows as CSV (header line, full float precision); returns the path."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([_cell(r.get(c)) for c in columns])
    p = Path(path)
    _atomic_write(p, buf.getvalue())
    return p


def write_json(path: str | os.PathLike, obj: Any) -> Path:
    """Write ``obj`` as indented strict JSON (NaN -> null); returns the path."""
    p = Path(path)
    _atomic_write(p, json.dumps(to_jsonable(obj), indent=1, allow_nan=False) + "\n")
    return p
