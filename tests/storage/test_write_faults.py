"""Faults of the machine while writing: a full disk, a file-size limit, a vanished directory, an I/O error.

A failed write must stop the run with one message naming the file and the cause (exit status 74), leave
no temporary file, keep the last complete checkpoint, and never crash; under MPI the other ranks write
their checkpoints and stop too; the stopped run resumes bit-identically once there is room again.

The full disk is a real 400 KB tmpfs when the tests run as root (the case measured in issue 12: it used
to end in a segmentation fault), else a file-size limit (``RLIMIT_FSIZE``), which the kernel enforces the
same way: the write fails with an errno and the process goes on.
"""

from __future__ import annotations

import errno
import os
import resource
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from helpers.configs import write_config
from helpers.task_records import make_record

import qmc.storage.atomic as atomic
from qmc.config.parser import load_config
from qmc.run.single import run_task
from qmc.storage.atomic import atomic_write_text, remove_leftovers, temporary_path
from qmc.storage.faults import WRITE_FAULT_EXIT, WriteFault
from qmc.storage.run_index import load_index
from qmc.storage.task_file import read_task, task_path, write_task


# a task file of this configuration holds ~240 KB after 255 bins and ~280 KB from bin 256 on (the bins
# datasets grow by chunks of 256 rows): a 520 KB disk cannot hold the old and the new file side by side,
# and a 260 KB file-size limit refuses the write of bin 256.  A task runs for several seconds (5 s on an
# idle 2026 machine), so that checkpoints with bins are written before (at most one write a second).
def write_fault_config(directory: Path, *, copies: int, measure_steps: int = 60000) -> Path:
    """``directory / c.toml``: square-lattice Heisenberg model, L = 16 at beta = 8, ``copies`` equal tasks
    with 400 bins each, a checkpoint asked for every 0.05 s."""
    return write_config(directory, "c.toml", seed=77, scan={"L": [16], "beta": 8}, warmup_steps=100,
                        measure_steps=measure_steps, bins=400, copies=copies, checkpoint_seconds=0.05)


# ------------------------------------------------------------------------------------------- the writer


def test_a_refused_write_is_one_fault_naming_the_file_and_the_old_file_stays(tmp_path, monkeypatch):
    path = tmp_path / "t.h5"
    write_task(path, make_record(n_bins=2))
    before = path.read_bytes()
    calls = []

    def full_disk(fd, data):  # the first part goes through, then the device is full
        calls.append(len(data))
        if len(calls) > 1:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return min(len(data), 4096)

    monkeypatch.setattr(atomic.os, "write", full_disk)
    with pytest.raises(WriteFault) as info:
        write_task(path, make_record(n_bins=5))
    assert str(info.value) == f"cannot write {path}: no space left on the device"
    assert info.value.errno == errno.ENOSPC and len(calls) == 2
    monkeypatch.undo()
    assert path.read_bytes() == before and read_task(path).bins_done == 2
    assert not list(tmp_path.glob("*.tmp"))


@pytest.mark.parametrize("code,cause", [(errno.EIO, "input/output error of the device"),
                                        (errno.EDQUOT, "disk quota exceeded"),
                                        (errno.EROFS, "the file system is read-only"),
                                        (errno.ENOTSUP, os.strerror(errno.ENOTSUP).lower())])
def test_the_cause_is_named(tmp_path, monkeypatch, code, cause):
    def refuse(*args, **kwargs):
        raise OSError(code, os.strerror(code))

    monkeypatch.setattr(atomic.os, "open", refuse)
    with pytest.raises(WriteFault, match=f"cannot write {tmp_path / 'index.json'}: {cause}$"):
        atomic_write_text(tmp_path / "index.json", "{}")


def test_a_vanished_directory_is_a_fault_not_made_anew(tmp_path):
    gone = tmp_path / "run" / "tasks"
    gone.mkdir(parents=True)
    shutil.rmtree(tmp_path / "run")
    with pytest.raises(WriteFault, match="its directory no longer exists"):
        write_task(gone / "t.h5", make_record())
    assert not (tmp_path / "run").exists()


def test_leftover_temporary_files_of_gone_writers_are_removed(tmp_path):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True).stdout.strip()  # a process of this host that has ended
    mine = temporary_path(tmp_path / "a.h5")  # this process is alive: kept
    files = {
        "dead": tmp_path / f"b.h5.{dead}@{mine.name.split('@')[1]}",
        "legacy": tmp_path / "c.h5.tmp",
        "old-foreign": tmp_path / "d.h5.123@elsewhere.tmp",
        "new-foreign": tmp_path / "e.h5.123@elsewhere.tmp",
        "mine": mine,
    }
    for p in files.values():
        p.write_text("x")
    os.utime(files["old-foreign"], (1, 1))  # an hour and more ago
    removed = remove_leftovers(tmp_path)
    assert sorted(p.name for p in removed) == sorted(files[k].name for k in ("dead", "legacy", "old-foreign"))
    assert files["mine"].exists() and files["new-foreign"].exists()


# ------------------------------------------------------------------------------------------- qmc run


def _reference(config: Path, tmp: Path) -> dict[str, np.ndarray]:
    """Bins of every task run without interruption, in this process."""
    out = {}
    for task in load_config(config).tasks():
        run_task(task, tmp / "reference", config_text=config.read_text())
        d = read_task(task_path(tmp / "reference", task.task_id))
        out[task.task_id] = np.column_stack([d.bins[n] for n in d.bin_names])
    return out


def _assert_one_fault_message(stderr: str, run_dir: Path, cause: str) -> None:
    lines = [x for x in stderr.splitlines() if x.strip()]
    assert len(lines) == 1, stderr
    assert lines[0].startswith(f"error: cannot write {run_dir / 'tasks'}/L16_beta8_c") and cause in lines[0]
    assert "last complete checkpoint of every task is intact" in lines[0]
    for noise in ("Traceback", "Segmentation", "HDF5", "h5py", "Logging error"):
        assert noise not in stderr


def _resume_and_compare(run_dir: Path, config: Path, tmp: Path, mpiexec: str | None = None) -> None:
    """Copy the stopped run to a disk with room, resume it, compare with an uninterrupted run."""
    roomy = tmp / "roomy"
    shutil.copytree(run_dir, roomy)
    cmd = [sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out", str(roomy)]
    proc = subprocess.run(([mpiexec, "-n", "2"] if mpiexec else []) + cmd, capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stderr
    for tid, ref in _reference(config, tmp).items():
        d = read_task(task_path(roomy, tid))
        assert d.status == "done" and np.array_equal(np.column_stack([d.bins[n] for n in d.bin_names]), ref)


def _can_mount() -> bool:
    return os.geteuid() == 0 and shutil.which("mount") is not None and sys.platform.startswith("linux")


def test_a_full_disk_stops_the_run_cleanly_and_it_resumes(tmp_path):
    config = write_fault_config(tmp_path, copies=1)
    disk = tmp_path / "disk"
    disk.mkdir()
    mounted = _can_mount() and subprocess.run(["mount", "-t", "tmpfs", "-o", "size=520k", "tmpfs", str(disk)],
                                              capture_output=True).returncode == 0
    limit = None if mounted else (lambda: resource.setrlimit(resource.RLIMIT_FSIZE, (260_000, 260_000)))
    cause = "no space left on the device" if mounted else "file too large"
    try:
        run_dir = disk / "run"
        cmd = [sys.executable, "-m", "qmc", "run", str(config), "--quiet", "--out", str(run_dir)]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300, preexec_fn=limit)
        assert proc.returncode == WRITE_FAULT_EXIT == 74, proc.stderr
        _assert_one_fault_message(proc.stderr, run_dir, cause)
        assert not list(run_dir.rglob("*.tmp"))
        entry = load_index(run_dir)["tasks"]["L16_beta8_c0"]
        d = read_task(task_path(run_dir, "L16_beta8_c0"))  # the last complete checkpoint
        assert entry["status"] == "stopped" and cause in entry["message"]
        assert 0 < d.bins_done < 400 and entry["bins_done"] == d.bins_done
        assert "no space left" in (run_dir / "run.log").read_text() or not mounted
        _resume_and_compare(run_dir, config, tmp_path)
    finally:
        if mounted:
            subprocess.run(["umount", str(disk)], check=False)


_LIMITED_RANK = """
import resource, sys
from mpi4py import MPI  # noqa: F401
resource.setrlimit(resource.RLIMIT_FSIZE, (260_000, 260_000))
from qmc.cli.main import cli
cli(sys.argv[1:], prog_name="qmc")
"""


def test_under_mpi_a_fault_on_one_rank_stops_every_rank_with_a_checkpoint(tmp_path):
    pytest.importorskip("mpi4py")
    here = Path(sys.executable).parent / "mpiexec"
    mpiexec = str(here) if here.exists() else shutil.which("mpiexec")
    if mpiexec is None:
        pytest.skip("no mpiexec")
    # two equal tasks, one per rank; longer bins than the default so that rank 0 is still well inside its
    # task when rank 1 hits its limit (at bin 256) and the stop reaches it
    config = write_fault_config(tmp_path, copies=2, measure_steps=180000)
    run_dir = tmp_path / "run"
    args = ["run", str(config), "--quiet", "--out", str(run_dir)]
    # rank 1 limits its file size once MPI has started (the MPI library's shared memory is a file too)
    limited = [sys.executable, "-c", _LIMITED_RANK, *args]
    cmd = [mpiexec, "-n", "1", sys.executable, "-m", "qmc", *args, ":", "-n", "1", *limited]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300,
                          env=dict(os.environ, PYTHONUNBUFFERED="1"))
    assert proc.returncode == WRITE_FAULT_EXIT, proc.stderr
    _assert_one_fault_message(proc.stderr, run_dir, "file too large")
    index = load_index(run_dir)
    statuses = {}
    for tid, entry in index["tasks"].items():
        d = read_task(task_path(run_dir, tid))
        statuses[tid] = (entry["status"], d.status, d.provenance["sessions"][-1]["ended"])
        assert entry["status"] == "stopped" and 0 < d.bins_done < 400, statuses
    # rank 1 ran the first task (largest first, handed out before rank 0 starts) and hit its limit; rank 0
    # was told to stop and wrote its checkpoint
    assert statuses["L16_beta8_c0"][1] == "running" and statuses["L16_beta8_c1"][1:] == ("stopped", "stopped")
    assert "file too large" in index["tasks"]["L16_beta8_c1"]["message"]
    assert not list(run_dir.rglob("*.tmp"))
    _resume_and_compare(run_dir, config, tmp_path, mpiexec)
