"""Task files: one HDF5 file per task with its bins, its checkpoint and where it came from.

Layout (``format = "seriesloop/task"``, ``format_version = 1``; files written under the project's earlier
name have the same layout and are read too, see :data:`qmc.storage.formats.OLD_SUFFIXES`)::

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
                      warmup_steps, measure_steps; with a precision target also target (JSON list of
                      [observable, error, relative]) and target_met (1: the run ended with it met)
    /vbs_histogram    int64[nh, nh] counts of (D_x, D_y), attr range r (edges linspace(-r, r, nh+1))
    /checkpoint/<key> Simulation.state() arrays; attrs steps_done, bins_done, steps_total, time, time_iso
    /exchange         optional, written by replica exchange (:mod:`qmc.exchange.records`): attrs for scalars
                      and short lists, datasets for numpy arrays, subgroups for nested mappings
    /ground_state     optional, written by a ground-state search by beta doubling
                      (:mod:`qmc.run.ground_state`): its settings and outcome, and the bins of every
                      finished stage (same storage rules);
                      /bins then holds the current (last) stage and its beta

Crash safety: :func:`write_task` builds the new file in memory and replaces the whole file atomically
(:mod:`qmc.storage.atomic`), so a kill at any moment leaves the previous complete file, and a full disk or
another fault of the machine is one :class:`~qmc.storage.faults.WriteFault` (the HDF5 library itself never
writes to the disk, so it is never left with a half-written file).  A file that is not a task file of the
same task is never overwritten.
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from qmc.errors import UserError
from qmc.storage.atomic import atomic_write_bytes
from qmc.storage.formats import TASK_FORMAT, TASK_VERSION, known_format, note_old_format, short_reason
from qmc.storage.hdf5_values import attribute, fill_mapping, plain, read_mapping, storable
from qmc.storage.provenance import now_iso
from qmc.storage.run_index import load_index

__all__ = [
    "TASK_STATUSES", "TaskData", "TaskRecord", "task_path", "write_task", "read_task", "read_run",
    "task_header",
]

TASK_STATUSES = ("pending", "running", "stopped", "done", "failed")
_SEP = ":"  # replaces "/" in dataset names under /bins


@dataclass
class TaskData:
    """Contents of one task file as the analysis layer sees them (plus descriptive extras).

    ``bins[name]`` is float64[bins_done] (bin averages); ``vbs_histogram`` is None when the lattice has no
    two-direction valence-bond order parameter.  ``checkpoint`` holds the Simulation state arrays only when
    requested (``read_task(path, with_checkpoint=True)``).  ``target`` lists the goals of a precision
    target (``[observable, error, relative]``, None without one) and ``target_met`` whether the run ended
    with it met; ``ground_state`` is the ``/ground_state`` group of a search by beta doubling (else None).
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
    file_format: str = TASK_FORMAT
    format_version: int = TASK_VERSION
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
    target: list | None = None
    target_met: bool = False
    ground_state: dict[str, Any] | None = None


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
    ground_state: Mapping[str, Any] | None = None


def task_path(run_dir: str | os.PathLike, task_id: str) -> Path:
    """``RUN_DIR/tasks/<task_id>.h5``."""
    return Path(run_dir) / "tasks" / f"{task_id}.h5"

# ----------------------------------------------------------------------------------------------------------
# writing


def write_task(path: str | os.PathLike, record: TaskRecord) -> None:
    """Write the whole task file atomically; refuses to replace a file that is not this task's file.

    The file is built in memory (an ``io.BytesIO`` opened by h5py) and its bytes are written with plain
    system calls (:func:`~qmc.storage.atomic.atomic_write_bytes`): a refused write raises
    :class:`~qmc.storage.faults.WriteFault`, the previous file stays, no temporary file is left."""
    import io

    import h5py

    path = Path(path)
    if path.exists():
        head = task_header(path)  # raises UserError if the file is not a task file
        if head["task_id"] != record.task_id:
            raise UserError(f"holds task {head['task_id']!r}, not {record.task_id!r}; not overwriting it",
                            str(path))
    image = io.BytesIO()
    with h5py.File(image, "w") as f:
        _fill(f, record)
    atomic_write_bytes(path, image.getbuffer())


def _fill(f: Any, rec: TaskRecord) -> None:
    f.attrs["format"] = TASK_FORMAT
    f.attrs["format_version"] = TASK_VERSION
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
        g.attrs[k] = attribute(v)
    g = f.create_group("model")
    for k, v in rec.model.items():
        g.create_dataset(k, data=storable(np.asarray(v)))
    g = f.create_group("provenance", track_order=True)
    for k, v in rec.provenance.items():
        g.attrs[k] = attribute(v)
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
        fill_mapping(f.create_group("exchange"), rec.exchange)
    if rec.ground_state is not None:
        fill_mapping(f.create_group("ground_state"), rec.ground_state)


# ----------------------------------------------------------------------------------------------------------
# reading


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
        raise UserError(f"damaged or truncated HDF5 file, cannot be opened ({short_reason(exc)})",
                        str(path)) from None


def _check_root(f: Any, path: Path) -> None:
    fmt = f.attrs.get("format")
    if fmt is None:
        raise UserError(f"a foreign HDF5 file (it has no 'format' attribute); not a {TASK_FORMAT} task file",
                        str(path))
    kind = known_format(fmt, TASK_FORMAT)
    if kind is None:
        raise UserError(f"a foreign HDF5 file (format {plain(fmt)!r}, expected {TASK_FORMAT!r})", str(path))
    version = int(f.attrs.get("format_version", -1))
    if version != TASK_VERSION:
        raise UserError(f"task file format version {version}; this program reads version {TASK_VERSION} "
                        "(written by a different release)", str(path))
    if kind == "old":
        note_old_format(TASK_FORMAT, plain(fmt), str(path))


def task_header(path: str | os.PathLike) -> dict[str, Any]:
    """Root attributes, checkpoint counters (``checkpoint_<attr>``), bin attributes (``bins_<attr>``, e.g.
    ``bins_steps_per_bin``) and ``sessions`` (the list of provenance) of a task file (cheap); UserError if
    it is not one."""
    path = Path(path)
    f = _open(path)
    try:
        with f:
            _check_root(f, path)
            head = {k: plain(v) for k, v in f.attrs.items()}
            for group in ("checkpoint", "bins"):
                g = f.get(group)
                items = g.attrs.items() if g is not None else ()
                head.update({f"{group}_{k}": plain(v) for k, v in items if k != "names"})
            prov = f.get("provenance")
            sessions = plain(prov.attrs.get("sessions", "[]")) if prov is not None else "[]"
            head["sessions"] = json.loads(sessions) if isinstance(sessions, str) else []
            return head
    except UserError:
        raise
    except Exception as exc:
        raise UserError(f"damaged task file ({short_reason(exc)})", str(path)) from None


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
        raise UserError(f"damaged task file, a part cannot be read ({type(exc).__name__}: "
                        f"{short_reason(exc)})", str(path)) from None


def _read(f: Any, path: Path, with_checkpoint: bool) -> TaskData:
    for part in ("params", "bins", "checkpoint", "provenance", "config"):
        if part not in f:
            raise UserError(f"damaged task file: the group /{part} is missing", str(path))
    bg = f["bins"]
    names = json.loads(bg.attrs["names"]) if "names" in bg.attrs else None
    found: dict[str, np.ndarray] = {}

    def visit(_: str, obj: Any) -> None:
        if hasattr(obj, "shape") and hasattr(obj, "dtype"):
            found[plain(obj.attrs.get("name", obj.name[len(bg.name) + 1:]))] = np.asarray(obj[()], np.float64)

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
    prov = {k: plain(v) for k, v in f["provenance"].attrs.items()}
    if isinstance(prov.get("sessions"), str):
        prov["sessions"] = json.loads(prov["sessions"])
    exchange = read_mapping(f["exchange"]) if "exchange" in f else None
    ground_state = read_mapping(f["ground_state"]) if "ground_state" in f else None
    model_info = {}
    if "model" in f:
        for key in ("n_sites", "linear_size", "lattice_kind", "group_names", "dir_names"):
            if key in f["model"]:
                model_info[key] = plain(f["model"][key][()])
        for key in ("vbs_bonds", "vbs_dir", "vbs_phase"):  # the dimer order parameter's bonds, as arrays
            if key in f["model"]:
                model_info[key] = np.asarray(f["model"][key][()])
        if "term_coupling" in f["model"]:
            model_info["n_terms"] = int(f["model"]["term_coupling"].shape[0])
    ba = bg.attrs
    return TaskData(
        task_id=plain(f.attrs["task_id"]),
        params={k: plain(v) for k, v in f["params"].attrs.items()},
        bins=bins,
        steps_per_bin=int(ba["steps_per_bin"]),
        n_sites=int(ba["n_sites"]),
        linear_size=int(ba["linear_size"]),
        beta=float(ba["beta"]),
        vbs_histogram=hist,
        vbs_hist_range=hist_range,
        status=plain(f.attrs.get("status", "")),
        file_format=TASK_FORMAT,
        format_version=int(f.attrs.get("format_version", TASK_VERSION)),
        exchange=exchange,
        path=str(path),
        message=plain(f.attrs.get("message", "")),
        bin_names=names,
        bins_done=bins_done,
        bins_total=int(ba.get("bins_total", 0)),
        steps_done=int(cp.attrs.get("steps_done", 0)),
        steps_total=int(cp.attrs.get("steps_total", 0)),
        checkpoint_time=plain(cp.attrs.get("time_iso", "")),
        task_fingerprint=plain(f.attrs.get("task_fingerprint", "")),
        config_text=plain(f["config"].attrs.get("toml", "")),
        config_path=plain(f["config"].attrs.get("path", "")),
        provenance=prov,
        model_info=model_info,
        checkpoint={k: np.asarray(v[()]) for k, v in cp.items()} if with_checkpoint else None,
        target=json.loads(plain(ba["target"])) if "target" in ba else None,
        target_met=bool(plain(ba.get("target_met", 0))),
        ground_state=ground_state,
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
