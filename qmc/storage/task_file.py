"""Task files (HDF5, one per task) and the run index (JSON), both replaced atomically.

Task file layout (``format = "dsqmc-task"``, ``format_version = 1``)::

    /                 attrs format, format_version, task_id, status, message, task_fingerprint, updated
    /config           attrs toml (full text of the configuration), path, fingerprint
    /params           attrs: resolved scan values (incl. beta, replica), lattice, size, boundary
    /model/<field>    CompiledModel.to_arrays()
    /provenance       attrs: package/numpy/numba/h5py/python versions, git revision, host, master_seed,
                      seed_key, stream_seed (uint64[4]), sessions (JSON list of {start, stop, host, ...})
    /bins/<column>    float64[bins_done], maxshape (None,), one row per completed bin; attr name = the
                      observable name.  Names containing "/" ("stiffness/x") are stored as "stiffness:x",
                      because "stiffness" itself is a dataset and cannot also be a group.
    /bins             attrs names (column order), steps_per_bin, n_sites, linear_size, beta, bins_total,
                      warmup_steps, measure_steps
    /vbs_histogram    int64[nh, nh] counts of (D_x, D_y), attr range r (edges linspace(-r, r, nh+1))
    /checkpoint/<key> Simulation.state() arrays; attrs steps_done, bins_done, steps_total, time, time_iso
    /exchange         optional, written by replica exchange (:mod:`qmc.exchange.tasks`): attrs for scalars and
                      short lists, datasets for numpy arrays, subgroups for nested mappings

Crash safety: :func:`write_task` writes a complete new file ``<name>.h5.tmp``, flushes and fsyncs it,
``os.replace``-s it onto ``<name>.h5`` and fsyncs the directory, so a kill at any moment leaves the previous
complete file.  A file that is not a task file of the same task is never overwritten.

Run index ``RUN_DIR/index.json`` (``format = "dsqmc-run-index"``, ``format_version = 1``): see
:func:`new_index`.  It is written atomically the same way, by one process only.
"""

from __future__ import annotations

import json
import os
import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from qmc.errors import UserError

__all__ = [
    "TASK_FORMAT", "FORMAT_VERSION", "INDEX_FORMAT", "INDEX_VERSION", "TASK_STATUSES",
    "TaskData", "TaskRecord", "task_path", "write_task", "read_task", "read_run", "task_header",
    "atomic_write_text", "new_index", "load_index", "write_index", "now_iso",
]

TASK_FORMAT = "dsqmc-task"
FORMAT_VERSION = 1
INDEX_FORMAT = "dsqmc-run-index"
INDEX_VERSION = 1
TASK_STATUSES = ("pending", "running", "stopped", "done", "failed")
_SEP = ":"  # replaces "/" in dataset names under /bins


def now_iso(t: float | None = None) -> str:
    """Local time with offset, seconds precision, e.g. ``2024-06-11T14:03:00+02:00``."""
    return time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(time.time() if t is None else t))


# ----------------------------------------------------------------------------------------------------------
# data classes


@dataclass
class TaskData:
    """Contents of one task file as the analysis layer sees them (plus descriptive extras).

    ``bins[name]`` is float64[bins_done] (bin averages); ``vbs_histogram`` is None when the lattice has no
    two-direction valence-bond order parameter.  ``checkpoint`` holds the Simulation state arrays only when
    requested (``read_task(path, with_checkpoint=True)``).
    """

    task_id: str
    params: dict[str, Any]
    bins: dict[str, np.ndarray]
    steps_per_bin: int
    n_sites: int
    linear_size: int
    beta: float
    vbs_histogram: np.ndarray | None
    vbs_hist_range: float | None
    status: str
    exchange: dict | None = None
    path: str = ""
    message: str = ""
    bin_names: tuple[str, ...] = ()
    bins_done: int = 0
    bins_total: int = 0
    steps_done: int = 0
    steps_total: int = 0
    checkpoint_time: str = ""
    task_fingerprint: str = ""
    config_text: str = ""
    config_path: str = ""
    provenance: dict[str, Any] = field(default_factory=dict)
    model_info: dict[str, Any] = field(default_factory=dict)
    checkpoint: dict[str, np.ndarray] | None = None


@dataclass
class TaskRecord:
    """Everything :func:`write_task` writes; ``bins`` is float64[bins_done, len(bin_names)]."""

    task_id: str
    status: str
    task_fingerprint: str
    config_text: str
    config_path: str
    config_fingerprint: str
    params: Mapping[str, Any]
    model: Mapping[str, np.ndarray]
    provenance: Mapping[str, Any]
    sessions: list[dict[str, Any]]
    bin_names: tuple[str, ...]
    bins: np.ndarray
    bins_attrs: Mapping[str, Any]
    vbs_histogram: np.ndarray
    vbs_hist_range: float
    checkpoint: Mapping[str, np.ndarray]
    checkpoint_attrs: Mapping[str, Any]
    message: str = ""
    exchange: Mapping[str, Any] | None = None


def task_path(run_dir: str | os.PathLike, task_id: str) -> Path:
    """``RUN_DIR/tasks/<task_id>.h5``."""
    return Path(run_dir) / "tasks" / f"{task_id}.h5"


# ----------------------------------------------------------------------------------------------------------
# atomic replacement


def _fsync_path(path: Path, directory: bool = False) -> None:
    flags = os.O_RDONLY | (getattr(os, "O_DIRECTORY", 0) if directory else 0)
    try:
        fd = os.open(path, flags)
    except OSError:
        if directory:  # some platforms cannot open directories; the rename is still atomic
            return
        raise
    try:
        os.fsync(fd)
    except OSError:
        if not directory:
            raise
    finally:
        os.close(fd)


def _replace(tmp: Path, path: Path) -> None:
    _fsync_path(tmp)
    os.replace(tmp, path)
    _fsync_path(path.parent, directory=True)


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` to ``path`` via ``path.tmp`` + fsync + rename (+ fsync of the directory)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
        _replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


# ----------------------------------------------------------------------------------------------------------
# task files: writing


def _attr(value: Any) -> Any:
    """A value h5py can store as an attribute (None -> "", nested lists/dicts -> JSON text)."""
    if value is None:
        return ""
    if isinstance(value, (dict, list, tuple)) and not _flat_numbers(value):
        return json.dumps(value, default=str)
    if isinstance(value, (list, tuple)):
        return np.asarray(value)
    return value


def _flat_numbers(value: Any) -> bool:
    return isinstance(value, (list, tuple)) and len(value) > 0 and all(
        isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool) for v in value)


def _storable(a: np.ndarray) -> np.ndarray:
    """Unicode arrays become UTF-8 bytes (HDF5 has no fixed-width unicode type)."""
    if a.dtype.kind == "U":
        return np.char.encode(a, "utf-8")
    return a


def write_task(path: str | os.PathLike, record: TaskRecord) -> None:
    """Write the whole task file atomically (see module docstring); refuses to replace a foreign file."""
    import h5py

    path = Path(path)
    if path.exists():
        head = task_header(path)  # raises UserError if the file is not a task file
        if head["task_id"] != record.task_id:
            raise UserError(f"holds task {head['task_id']!r}, not {record.task_id!r}; not overwriting it",
                            str(path))
    tmp = path.with_name(path.name + ".tmp")
    try:
        with h5py.File(tmp, "w") as f:
            _fill(f, record)
            f.flush()
        _replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _fill(f: Any, rec: TaskRecord) -> None:
    f.attrs["format"] = TASK_FORMAT
    f.attrs["format_version"] = FORMAT_VERSION
    f.attrs["task_id"] = rec.task_id
    f.attrs["status"] = rec.status
    f.attrs["message"] = rec.message
    f.attrs["task_fingerprint"] = rec.task_fingerprint
    f.attrs["updated"] = now_iso()
    g = f.create_group("config")
    g.attrs["toml"] = rec.config_text
    g.attrs["path"] = rec.config_path
    g.attrs["fingerprint"] = rec.config_fingerprint
    g = f.create_group("params", track_order=True)
    for k, v in rec.params.items():
        g.attrs[k] = _attr(v)
    g = f.create_group("model")
    for k, v in rec.model.items():
        g.create_dataset(k, data=_storable(np.asarray(v)))
    g = f.create_group("provenance", track_order=True)
    for k, v in rec.provenance.items():
        g.attrs[k] = _attr(v)
    g.attrs["sessions"] = json.dumps(rec.sessions)
    g = f.create_group("bins")
    rows = np.asarray(rec.bins, dtype=np.float64).reshape(-1, len(rec.bin_names))
    g.attrs["names"] = json.dumps(list(rec.bin_names))
    for k, v in rec.bins_attrs.items():
        g.attrs[k] = v
    for j, name in enumerate(rec.bin_names):
        d = g.create_dataset(name.replace("/", _SEP), data=np.ascontiguousarray(rows[:, j]),
                             maxshape=(None,), chunks=(256,))
        d.attrs["name"] = name
    d = f.create_dataset("vbs_histogram", data=np.asarray(rec.vbs_histogram, dtype=np.int64))
    d.attrs["range"] = float(rec.vbs_hist_range)
    g = f.create_group("checkpoint")
    for k, v in rec.checkpoint.items():
        g.create_dataset(k, data=np.asarray(v))
    for k, v in rec.checkpoint_attrs.items():
        g.attrs[k] = v
    if rec.exchange is not None:
        _fill_mapping(f.create_group("exchange"), rec.exchange)


def _fill_mapping(g: Any, values: Mapping[str, Any]) -> None:
    """numpy arrays -> datasets, mappings -> subgroups, everything else -> attributes."""
    for k, v in values.items():
        if isinstance(v, np.ndarray):
            g.create_dataset(k, data=_storable(v))
        elif isinstance(v, Mapping):
            _fill_mapping(g.create_group(k), v)
        else:
            g.attrs[k] = _attr(v)


def _read_mapping(g: Any) -> dict[str, Any]:
    """Inverse of :func:`_fill_mapping` (attributes as plain values, datasets as numpy arrays)."""
    out: dict[str, Any] = {k: _py(v) for k, v in g.attrs.items()}
    for k, v in g.items():
        out[k] = _read_mapping(v) if hasattr(v, "keys") else np.asarray(v[()])
    return out


# ----------------------------------------------------------------------------------------------------------
# task files: reading


def _open(path: Path) -> Any:
    """Open an HDF5 file for reading, or raise one UserError naming the file and the problem."""
    import h5py

    if not path.exists():
        raise UserError("no such file", str(path))
    if path.is_dir():
        raise UserError("is a directory, not a task file", str(path))
    try:
        with open(path, "rb") as fh:
            magic = fh.read(8)
    except OSError as exc:
        raise UserError(f"cannot read the file: {exc.strerror or exc}", str(path)) from None
    if magic != b"\x89HDF\r\n\x1a\n":
        what = "an empty file" if not magic else "not an HDF5 file"
        raise UserError(f"{what}; a task file is written by 'qmc run' (format {TASK_FORMAT})", str(path))
    try:
        return h5py.File(path, "r")
    except Exception as exc:  # h5py raises OSError with the HDF5 library's description
        raise UserError(f"damaged or truncated HDF5 file, cannot be opened ({_short(exc)})",
                        str(path)) from None


def _short(exc: BaseException) -> str:
    text = str(exc).split("\n")[0]
    return text if len(text) < 160 else text[:157] + "..."


def _check_root(f: Any, path: Path) -> None:
    fmt = f.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode("utf-8", "replace")
    if fmt is None:
        raise UserError(f"a foreign HDF5 file (it has no 'format' attribute); not a {TASK_FORMAT} task file",
                        str(path))
    if fmt != TASK_FORMAT:
        raise UserError(f"a foreign HDF5 file (format {fmt!r}, expected {TASK_FORMAT!r})", str(path))
    version = int(f.attrs.get("format_version", -1))
    if version != FORMAT_VERSION:
        raise UserError(f"task file format version {version}; this program reads version {FORMAT_VERSION} "
                        "(written by a different release)", str(path))


def _py(value: Any) -> Any:
    """Plain Python value of an HDF5 attribute or small dataset (bytes decoded, arrays as lists)."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        return [_py(v) for v in value.tolist()] if value.ndim else _py(value.item())
    if isinstance(value, list):
        return [_py(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def task_header(path: str | os.PathLike) -> dict[str, Any]:
    """Root attributes and checkpoint counters of a task file (cheap); UserError if it is not one."""
    path = Path(path)
    f = _open(path)
    try:
        with f:
            _check_root(f, path)
            head = {k: _py(v) for k, v in f.attrs.items()}
            cp = f.get("checkpoint")
            head.update({f"checkpoint_{k}": _py(v) for k, v in (cp.attrs.items() if cp is not None else ())})
            return head
    except UserError:
        raise
    except Exception as exc:
        raise UserError(f"damaged task file ({_short(exc)})", str(path)) from None


def read_task(path: str | os.PathLike, *, with_checkpoint: bool = False) -> TaskData:
    """Read a task file; any problem (missing, not HDF5, foreign, truncated, damaged) is one UserError."""
    path = Path(path)
    f = _open(path)
    try:
        with f:
            _check_root(f, path)
            return _read(f, path, with_checkpoint)
    except UserError:
        raise
    except Exception as exc:
        raise UserError(f"damaged task file, a part cannot be read ({type(exc).__name__}: {_short(exc)})",
                        str(path)) from None


def _read(f: Any, path: Path, with_checkpoint: bool) -> TaskData:
    for part in ("params", "bins", "checkpoint", "provenance", "config"):
        if part not in f:
            raise UserError(f"damaged task file: the group /{part} is missing", str(path))
    bg = f["bins"]
    names = json.loads(bg.attrs["names"]) if "names" in bg.attrs else None
    found: dict[str, np.ndarray] = {}

    def visit(_: str, obj: Any) -> None:
        if hasattr(obj, "shape") and hasattr(obj, "dtype"):
            found[_py(obj.attrs.get("name", obj.name[len(bg.name) + 1:]))] = np.asarray(obj[()], np.float64)

    bg.visititems(visit)
    names = tuple(names) if names is not None else tuple(sorted(found))
    missing = [n for n in names if n not in found]
    if missing:
        raise UserError(f"damaged task file: bins of {', '.join(missing)} are missing", str(path))
    cp = f["checkpoint"]
    bins_done = int(cp.attrs.get("bins_done", min((len(v) for v in found.values()), default=0)))
    bins = {n: found[n][:bins_done] for n in names}
    hist, hist_range = None, None
    if "vbs_histogram" in f:
        h = np.asarray(f["vbs_histogram"][()], dtype=np.int64)
        if h.size:
            hist, hist_range = h, float(f["vbs_histogram"].attrs.get("range", 0.0))
    prov = {k: _py(v) for k, v in f["provenance"].attrs.items()}
    if isinstance(prov.get("sessions"), str):
        prov["sessions"] = json.loads(prov["sessions"])
    exchange = _read_mapping(f["exchange"]) if "exchange" in f else None
    model_info = {}
    if "model" in f:
        for key in ("n_sites", "linear_size", "lattice_kind", "group_names", "dir_names"):
            if key in f["model"]:
                model_info[key] = _py(f["model"][key][()])
        if "term_coupling" in f["model"]:
            model_info["n_terms"] = int(f["model"]["term_coupling"].shape[0])
    ba = bg.attrs
    return TaskData(
        task_id=_py(f.attrs["task_id"]),
        params={k: _py(v) for k, v in f["params"].attrs.items()},
        bins=bins,
        steps_per_bin=int(ba["steps_per_bin"]),
        n_sites=int(ba["n_sites"]),
        linear_size=int(ba["linear_size"]),
        beta=float(ba["beta"]),
        vbs_histogram=hist,
        vbs_hist_range=hist_range,
        status=_py(f.attrs.get("status", "")),
        exchange=exchange,
        path=str(path),
        message=_py(f.attrs.get("message", "")),
        bin_names=names,
        bins_done=bins_done,
        bins_total=int(ba.get("bins_total", 0)),
        steps_done=int(cp.attrs.get("steps_done", 0)),
        steps_total=int(cp.attrs.get("steps_total", 0)),
        checkpoint_time=_py(cp.attrs.get("time_iso", "")),
        task_fingerprint=_py(f.attrs.get("task_fingerprint", "")),
        config_text=_py(f["config"].attrs.get("toml", "")),
        config_path=_py(f["config"].attrs.get("path", "")),
        provenance=prov,
        model_info=model_info,
        checkpoint={k: np.asarray(v[()]) for k, v in cp.items()} if with_checkpoint else None,
    )


def read_run(run_dir: str | os.PathLike) -> list[TaskData]:
    """All task files of a run directory, in index order (then any other files by name).

    A task listed in the index whose file does not exist yet is skipped.  ``run_dir`` may also be a single
    task file.  Problems are UserErrors naming the directory or file.
    """
    run_dir = Path(run_dir)
    if run_dir.is_file():
        return [read_task(run_dir)]
    if not run_dir.is_dir():
        raise UserError("no such run directory", str(run_dir))
    tasks_dir = run_dir / "tasks"
    files = sorted(tasks_dir.glob("*.h5")) if tasks_dir.is_dir() else []
    if not files and not (run_dir / "index.json").exists():
        raise UserError("not a run directory (no index.json and no tasks/*.h5 files)", str(run_dir))
    order: list[Path] = []
    index = load_index(run_dir)
    if index is not None:
        order = [run_dir / e["file"] for e in index["tasks"].values() if (run_dir / e["file"]).exists()]
    seen = {p.resolve() for p in order}
    order += [p for p in files if p.resolve() not in seen]
    return [read_task(p) for p in order]


# ----------------------------------------------------------------------------------------------------------
# run index


def new_index(fingerprint: str, config_source: str, name: str, tasks: list[dict[str, Any]]) -> dict[str, Any]:
    """A fresh run index.

    Layout::

        {"format": "dsqmc-run-index", "format_version": 1, "fingerprint": <config fingerprint>,
         "config_source": <path of the configuration given to qmc run>, "name": <run name>,
         "created": <iso time>, "updated": <iso time>,
         "tasks": {<task_id>: {"params": {...}, "file": "tasks/<task_id>.h5",
                               "status": "pending"|"running"|"stopped"|"done"|"failed", "message": "",
                               "bins_done": int, "bins_total": int, "steps_done": int, "steps_total": int,
                               "seconds": float (wall time of all sessions), "updated": <iso time>}}}

    ``tasks`` entries must hold at least ``task_id``, ``params``, ``bins_total``, ``steps_total``.
    """
    t = now_iso()
    entries = {}
    for d in tasks:
        entries[d["task_id"]] = {
            "params": d["params"], "file": f"tasks/{d['task_id']}.h5", "status": "pending", "message": "",
            "bins_done": 0, "bins_total": int(d["bins_total"]), "steps_done": 0,
            "steps_total": int(d["steps_total"]), "seconds": 0.0, "updated": t,
        }
    return {"format": INDEX_FORMAT, "format_version": INDEX_VERSION, "fingerprint": fingerprint,
            "config_source": config_source, "name": name, "created": t, "updated": t, "tasks": entries}


def load_index(run_dir: str | os.PathLike) -> dict[str, Any] | None:
    """The run index of ``run_dir``, None if there is none; UserError if it is unreadable or foreign."""
    path = Path(run_dir) / "index.json"
    if not path.exists():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UserError(f"the run index cannot be read ({_short(exc)})", str(path)) from None
    if not isinstance(data, dict) or data.get("format") != INDEX_FORMAT:
        raise UserError(f"not a run index written by qmc (no format {INDEX_FORMAT!r})", str(path))
    if data.get("format_version") != INDEX_VERSION or not isinstance(data.get("tasks"), dict):
        raise UserError(f"run index version {data.get('format_version')!r} is not supported", str(path))
    return data


def write_index(run_dir: str | os.PathLike, index: dict[str, Any]) -> None:
    """Write ``RUN_DIR/index.json`` atomically (one process only)."""
    index["updated"] = now_iso()
    atomic_write_text(Path(run_dir) / "index.json", json.dumps(index, indent=1, default=_py) + "\n")
