"""Task files and the run index: round trip, atomic replacement, refusal of foreign and damaged files, and
files written under the earlier format names (read, with one note per process)."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import textwrap
import time

import h5py
import numpy as np
import pytest
from helpers.paths import TESTS
from helpers.task_records import NAMES, make_record

import qmc.storage.formats as formats
import qmc.storage.task_file as storage
from qmc.errors import UserError
from qmc.storage.formats import INDEX_FORMAT, TASK_FORMAT
from qmc.storage.run_index import load_index, new_index, write_index
from qmc.storage.task_file import (
    read_run,
    read_task,
    task_header,
    task_path,
    write_task,
)

OLD_TASK = "formerly" + formats.OLD_SUFFIXES[TASK_FORMAT]  # format names as releases before the rename wrote
OLD_INDEX = "formerly" + formats.OLD_SUFFIXES[INDEX_FORMAT]  # them: one word, then the suffix


def test_round_trip(tmp_path):
    path = tmp_path / "t.h5"
    rec = make_record()
    write_task(path, rec)
    d = read_task(path, with_checkpoint=True)
    assert d.task_id == rec.task_id and d.status == "running"
    assert d.bin_names == NAMES
    for j, name in enumerate(NAMES):
        assert np.array_equal(d.bins[name], rec.bins[:, j])
        assert d.bins[name].dtype == np.float64
    assert d.params == {"L": 4, "beta": 2.0, "replica": 0, "lattice": "square", "size": [4, 4],
                        "boundary": "periodic"}
    assert list(d.params) == ["L", "beta", "replica", "lattice", "size", "boundary"]  # order kept
    assert (d.steps_per_bin, d.n_sites, d.linear_size, d.beta) == (10, 16, 4, 2.0)
    assert (d.bins_done, d.bins_total, d.steps_done, d.steps_total) == (3, 8, 35, 85)
    assert np.array_equal(d.vbs_histogram, rec.vbs_histogram) and d.vbs_hist_range == 0.25
    assert d.config_text == rec.config_text  # longer than the 64 kB compact-attribute limit
    assert d.provenance["sessions"] == rec.sessions
    assert d.provenance["stream_seed"] == [1, 2, 3, 2**64 - 1]
    assert np.array_equal(d.checkpoint["rng"], rec.checkpoint["rng"])
    assert d.checkpoint["rng"].dtype == np.uint64
    assert d.model_info["group_names"] == ["nn", "q2"] and d.exchange is None
    assert d.file_format == "seriesloop/task" and d.format_version == 1
    with h5py.File(path, "r") as f:  # the documented layout
        assert f.attrs["format"] == TASK_FORMAT == "seriesloop/task" and f.attrs["format_version"] == 1
        assert f["bins/energy"].maxshape == (None,)
        assert f["bins/stiffness:x"].attrs["name"] == "stiffness/x"
        assert f["vbs_histogram"].dtype == np.int64
        assert f["checkpoint"].attrs["bins_done"] == 3
        assert f["config"].attrs["path"] == "/x/config.toml"
    assert not list(tmp_path.glob("*.tmp"))


def test_no_vbs_histogram_reads_as_none(tmp_path):
    rec = make_record()
    rec.vbs_histogram = np.zeros((0, 0), dtype=np.int64)
    write_task(tmp_path / "t.h5", rec)
    assert read_task(tmp_path / "t.h5").vbs_histogram is None


def test_failed_write_leaves_previous_file(tmp_path, monkeypatch):
    path = tmp_path / "t.h5"
    write_task(path, make_record(n_bins=2))
    before = path.read_bytes()
    real_fill = storage._fill

    def crash(f, rec):  # dies half way through writing the new file
        real_fill(f, rec)
        raise KeyboardInterrupt

    monkeypatch.setattr(storage, "_fill", crash)
    with pytest.raises(KeyboardInterrupt):
        write_task(path, make_record(n_bins=3))
    assert path.read_bytes() == before
    assert not list(tmp_path.glob("*.tmp"))
    assert read_task(path).bins_done == 2


_WRITER = textwrap.dedent("""
    import sys, numpy as np
    sys.path.insert(0, {tests!r})
    from helpers.task_records import make_record
    from qmc.storage.task_file import write_task
    k = 1
    while True:
        write_task({path!r}, make_record(n_bins=k % 50 + 1))
        k += 1
""")


def test_sigkill_during_writes_always_leaves_a_complete_file(tmp_path):
    """A process rewriting a task file in a loop is killed at random moments; the file always reads."""
    path = tmp_path / "t.h5"
    write_task(path, make_record(n_bins=1))
    script = _WRITER.format(tests=str(TESTS), path=str(path))
    rng = np.random.default_rng(5)
    for _ in range(5):
        proc = subprocess.Popen([sys.executable, "-c", script], stderr=subprocess.PIPE)
        t0 = path.stat().st_mtime_ns
        deadline = time.monotonic() + 30
        while path.stat().st_mtime_ns == t0 and time.monotonic() < deadline:  # writing has begun
            time.sleep(0.01)
        time.sleep(rng.uniform(0.0, 0.3))
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        d = read_task(path)
        assert all(len(v) == d.bins_done for v in d.bins.values()) and 1 <= d.bins_done <= 50
    write_task(path, make_record(n_bins=4))  # a stale .tmp from a killed writer does not block writing
    assert read_task(path).bins_done == 4


@pytest.mark.parametrize("kind,expect", [
    ("foreign", "foreign HDF5 file"),
    ("other-format", "foreign HDF5 file (format 'something-else'"),
    ("version", "format version 99"),
    ("truncated", "damaged or truncated HDF5 file"),
    ("text", "not an HDF5 file"),
    ("empty", "an empty file"),
    ("missing", "no such file"),
    ("no-bins", "the group /bins is missing"),
])
def test_bad_files_give_one_user_error(tmp_path, kind, expect):
    path = tmp_path / "bad.h5"
    if kind == "foreign":
        with h5py.File(path, "w") as f:
            f["data"] = np.arange(3)
    elif kind == "other-format":
        with h5py.File(path, "w") as f:
            f.attrs["format"] = "something-else"
    elif kind == "version":
        write_task(path, make_record())
        with h5py.File(path, "a") as f:
            f.attrs["format_version"] = 99
    elif kind == "truncated":
        write_task(path, make_record())
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 3])
    elif kind == "text":
        path.write_text("energy = 1\n")
    elif kind == "empty":
        path.write_bytes(b"")
    elif kind == "no-bins":
        write_task(path, make_record())
        with h5py.File(path, "a") as f:
            del f["bins"]
    with pytest.raises(UserError) as info:
        read_task(path)
    assert expect in info.value.message
    assert info.value.where == str(path)


def test_foreign_file_is_never_overwritten(tmp_path):
    path = tmp_path / "t.h5"
    with h5py.File(path, "w") as f:
        f["mine"] = np.arange(5)
    before = path.read_bytes()
    with pytest.raises(UserError, match="foreign"):
        write_task(path, make_record())
    assert path.read_bytes() == before
    path.write_text("notes\n")
    with pytest.raises(UserError, match="not an HDF5 file"):
        write_task(path, make_record())
    assert path.read_text() == "notes\n"


def test_task_file_of_another_task_is_not_overwritten(tmp_path):
    path = tmp_path / "t.h5"
    write_task(path, make_record(task_id="A"))
    with pytest.raises(UserError, match="holds task 'A'"):
        write_task(path, make_record(task_id="B"))
    assert task_header(path)["task_id"] == "A"


def test_read_run_follows_the_index(tmp_path):
    run = tmp_path / "run"
    (run / "tasks").mkdir(parents=True)
    for tid in ("b", "a", "c"):
        write_task(task_path(run, tid), make_record(task_id=tid))
    assert [d.task_id for d in read_run(run)] == ["a", "b", "c"]  # no index: by name
    index = new_index("fp", "/x.toml", "demo", [
        {"task_id": t, "params": {}, "bins_total": 8, "steps_total": 85} for t in ("c", "x", "a")])
    write_index(run, index)
    assert [d.task_id for d in read_run(run)] == ["c", "a", "b"]  # index order; x has no file yet
    assert [d.task_id for d in read_run(task_path(run, "a"))] == ["a"]  # a single file
    with pytest.raises(UserError, match="no such run directory"):
        read_run(tmp_path / "nowhere")
    (tmp_path / "empty").mkdir()
    with pytest.raises(UserError, match="not a run directory"):
        read_run(tmp_path / "empty")
    (run / "tasks" / "junk.h5").write_text("not hdf5")
    with pytest.raises(UserError) as info:
        read_run(run)
    assert info.value.where.endswith("junk.h5")


def test_index_round_trip_and_bad_index(tmp_path):
    assert load_index(tmp_path) is None
    index = new_index("fp", "/x.toml", "demo", [{"task_id": "t1", "params": {"L": 4}, "bins_total": 8,
                                                 "steps_total": 85}])
    write_index(tmp_path, index)
    back = load_index(tmp_path)
    assert back["fingerprint"] == "fp" and back["format"] == INDEX_FORMAT == "seriesloop/run-index"
    assert back["tasks"]["t1"] == {**index["tasks"]["t1"]}
    assert back["tasks"]["t1"]["status"] == "pending" and back["tasks"]["t1"]["file"] == "tasks/t1.h5"
    assert not list(tmp_path.glob("*.tmp"))
    (tmp_path / "index.json").write_text("{broken")
    with pytest.raises(UserError, match="cannot be read"):
        load_index(tmp_path)
    (tmp_path / "index.json").write_text(json.dumps({"tasks": []}))
    with pytest.raises(UserError, match="not a run index"):
        load_index(tmp_path)


# ------------------------------------------------------------------------------------------- old format names


@pytest.fixture
def fresh_notes(monkeypatch):
    """A process that has not yet reported an old file (the note is said once per process)."""
    monkeypatch.setattr(formats, "_noted", set())
    monkeypatch.setattr(formats, "_quiet", False)


def _old_notes(caplog) -> list[str]:
    return [r.getMessage() for r in caplog.records
            if r.name == "qmc.storage" and "older format" in r.getMessage()]


def test_task_files_of_the_old_format_open_with_one_note(tmp_path, caplog, fresh_notes):
    run = tmp_path / "run"
    (run / "tasks").mkdir(parents=True)
    for tid in ("a", "b"):  # written as the release before the rename did: same layout, old format name
        path = task_path(run, tid)
        write_task(path, make_record(task_id=tid))
        with h5py.File(path, "r+") as f:
            f.attrs["format"] = OLD_TASK
    caplog.set_level("WARNING", logger="qmc.storage")
    got = read_run(run)
    assert [d.task_id for d in got] == ["a", "b"] and got[0].bins_done == 3
    assert np.array_equal(got[1].bins["energy"], make_record().bins[:, 0])
    assert got[0].file_format == TASK_FORMAT  # same layout: shown under the current name
    assert task_header(task_path(run, "a"))["format"] == OLD_TASK
    notes = _old_notes(caplog)
    assert len(notes) == 1 and repr(OLD_TASK) in notes[0] and "'seriesloop/task'" in notes[0]
    assert formats.old_format_noted(TASK_FORMAT) and not formats.old_format_noted(INDEX_FORMAT)
    write_task(task_path(run, "a"), make_record(task_id="a", n_bins=4))  # a rewrite uses the new name
    with h5py.File(task_path(run, "a"), "r") as f:
        assert f.attrs["format"] == TASK_FORMAT
    assert read_task(task_path(run, "a")).bins_done == 4
    assert len(_old_notes(caplog)) == 1


def test_run_index_of_the_old_format_opens_with_one_note(tmp_path, caplog, fresh_notes):
    index = new_index("fp", "/x.toml", "demo", [{"task_id": "t1", "params": {}, "bins_total": 8,
                                                 "steps_total": 85}])
    index["format"] = OLD_INDEX
    (tmp_path / "index.json").write_text(json.dumps(index))
    caplog.set_level("WARNING", logger="qmc.storage")
    for _ in range(3):
        back = load_index(tmp_path)
        assert back["format"] == INDEX_FORMAT and back["tasks"]["t1"]["bins_total"] == 8
    notes = _old_notes(caplog)
    assert len(notes) == 1 and repr(OLD_INDEX) in notes[0]
    write_index(tmp_path, back)
    assert json.loads((tmp_path / "index.json").read_text())["format"] == INDEX_FORMAT


def test_a_quiet_process_reads_old_files_without_a_note(tmp_path, caplog, fresh_notes):
    write_task(tmp_path / "t.h5", make_record())
    with h5py.File(tmp_path / "t.h5", "r+") as f:
        f.attrs["format"] = OLD_TASK
    formats.quiet_old_format_notes()
    caplog.set_level("WARNING", logger="qmc.storage")
    assert read_task(tmp_path / "t.h5").task_id == "L4_beta2_r0"
    assert _old_notes(caplog) == []
    with h5py.File(tmp_path / "t.h5", "r+") as f:  # any other name is still foreign
        f.attrs["format"] = OLD_TASK + "-2"
    with pytest.raises(UserError, match="foreign"):
        read_task(tmp_path / "t.h5")
