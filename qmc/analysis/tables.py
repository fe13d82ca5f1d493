"""Tables of all observables versus the coupling for every size, written as CSV and JSON.

One row per scan point (independent copies merged), sorted by (L, coupling, beta).  Columns: ``L``,
``beta``, the coupling, other varying parameters, ``task``, ``copies`` (number of independent copies
merged), ``n_bins``, then for every observable ``<name>``, ``<name>_err`` (one standard error) and
``<name>_tau_int[bins]`` (integrated autocorrelation time of the bin series, in bins: 1/2 for
uncorrelated bins), and ``cos4_hist`` (histogram estimate of <cos 4 theta>) when a VBS histogram was
stored.  Missing or undefined values are empty cells in CSV and ``null`` in JSON.
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

from .walls import is_profile

__all__ = ["TAU_SUFFIX", "observable_names", "table_rows", "to_jsonable", "write_csv", "write_json"]

TAU_SUFFIX = "_tau_int[bins]"
"""Column suffix of an observable's integrated autocorrelation time, which is in units of bins."""


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
    """Sorted union of the observable names of all points, without the per-column profiles (they have
    their own table, profiles.csv: :mod:`qmc.analysis.walls`)."""
    names = set().union(*(p["observables"] for p in points)) if points else set()
    return sorted(n for n in names if not is_profile(n))


def table_rows(
    points: Sequence[dict], coupling: str | None, extra: Sequence[str] = ()
) -> tuple[list[str], list[dict]]:
    """Column names and row dicts of the observable table (see module docstring)."""
    names = observable_names(points)
    has_vbs = any(p.get("vbs") for p in points)
    cols = ["L", "beta"] + ([coupling] if coupling else []) + list(extra) + ["task", "copies", "n_bins"]
    for n in names:
        cols += [n, f"{n}_err", n + TAU_SUFFIX]
    if has_vbs:
        cols.append("cos4_hist")
    rows = []
    for p in points:
        row: dict[str, Any] = {"L": p["L"], "beta": p["beta"], "task": p["task"]}
        if coupling:
            row[coupling] = p["g"]
        for k in extra:
            row[k] = p["params"].get(k)
        row["copies"] = len(p["info"].get("copies", [])) or 1
        row["n_bins"] = p["info"].get("n_bins")
        for n in names:
            o = p["observables"].get(n)
            if o is not None:
                row[n], row[f"{n}_err"], row[n + TAU_SUFFIX] = o["mean"], o["error"], o["tau_int"]
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
