"""Claims on units of work: several processes share one run directory, and no unit runs twice at once.

The processes of a job array (independent ``qmc run`` jobs on one run directory) and MPI jobs (rank 0
claims for all its ranks) take part alike.  Before a process runs a unit of work it claims it; a unit
claimed by a live process is skipped by the others; a claim whose holder is gone is taken over.

Files, in ``RUN_DIR/claims/``:

``<key>.<generation>.claim``
    One claim, JSON ``{"key", "host", "pid", "owner", "claimed", "heartbeat"}`` (times in seconds since
    1970), created exclusively (``O_CREAT | O_EXCL``), so of two processes creating the same name exactly
    one succeeds.  The claim in force is the one of the highest generation.
``<owner>.alive``
    The heartbeat of a claiming process, JSON ``{"host", "pid", "owner", "heartbeat"}``, rewritten at most
    every :data:`HEARTBEAT_SECONDS` while it works (one file per process, however many claims it holds:
    rank 0 of a large MPI job holds one claim per running unit).

A claim is *stale* when its holder is on this host and its process no longer exists (taken over at
once), or when the holder's newest heartbeat (claim or ``.alive`` file) is older than
:data:`STALE_SECONDS` (a process on another host that was killed, or a frozen one).  A stale claim of
generation g is taken over by creating generation g + 1 -- again exactly one process succeeds.
Generations are numbered without gaps (a claim is found by probing 0, 1, 2, ..., never by listing the
directory) and are removed together, lowest first, when the holder releases the claim.  A holder frozen
for longer than the stale limit finds out at its next heartbeat (:meth:`ClaimBook.beat` returns the keys
it lost) and leaves those units alone.
"""

from __future__ import annotations

import json
import os
import secrets
import time
from pathlib import Path
from typing import Any

from qmc.storage.atomic import atomic_write_text, remove_leftovers
from qmc.storage.faults import write_fault
from qmc.storage.processes import pid_alive, this_host

__all__ = ["HEARTBEAT_SECONDS", "STALE_SECONDS", "CLAIMS_DIR", "Holder", "ClaimBook"]

HEARTBEAT_SECONDS = 10.0
"""A claiming process rewrites its heartbeat at most this often (only while it works)."""
STALE_SECONDS = 120.0
"""A claim whose holder (on another host) has not shown a heartbeat for this long is taken over."""
CLAIMS_DIR = "claims"

Holder = dict[str, Any]
"""What a claim file says about its holder: ``host``, ``pid``, ``owner``, ``claimed``, ``heartbeat``."""


class ClaimBook:
    """The claims of this process in ``run_dir`` (see the module docstring).

    ``stale_seconds`` and ``heartbeat_seconds`` default to :data:`STALE_SECONDS` and
    :data:`HEARTBEAT_SECONDS`; every process sharing a run directory must use the same stale limit.
    """

    def __init__(self, run_dir: str | os.PathLike, *, stale_seconds: float = STALE_SECONDS,
                 heartbeat_seconds: float = HEARTBEAT_SECONDS) -> None:
        self.dir = Path(run_dir) / CLAIMS_DIR
        self.stale_seconds = float(stale_seconds)
        self.heartbeat_seconds = float(heartbeat_seconds)
        self.host, self.pid = this_host(), os.getpid()
        self.owner = f"{self.host}-{self.pid}-{secrets.token_hex(4)}"
        self.held: dict[str, int] = {}  # key -> generation of our claim
        self.last_beat = 0.0
        self._base = str(self.dir) + os.sep  # paths as strings: a claim costs a few system calls
        self._made = False

    def _path(self, key: str, gen: int) -> str:
        return f"{self._base}{key}.{gen}.claim"

    def _sure(self) -> bool:
        """Whether no process can have taken our claims: our last heartbeat is younger than half the stale
        limit (and we are alive), so none of them looks stale to anybody."""
        return time.time() - self.last_beat < 0.5 * self.stale_seconds

    # ------------------------------------------------------------------------------------------ reading
    def _generations(self, key: str) -> list[tuple[int, Path]]:
        found: list[tuple[int, Path]] = []
        while os.path.exists(p := self._path(key, len(found))):
            found.append((len(found), Path(p)))
        return found

    @staticmethod
    def _read(path: Path) -> Holder | None:
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None
        return data if isinstance(data, dict) else None

    def _heartbeat(self, holder: Holder) -> float:
        beat = float(holder.get("heartbeat", 0.0))
        alive = self._read(self.dir / f"{holder.get('owner', '')}.alive")
        if alive is not None and alive.get("owner") == holder.get("owner"):
            beat = max(beat, float(alive.get("heartbeat", 0.0)))
        return beat

    def alive(self, holder: Holder) -> bool:
        """Whether the holder of a claim is still at work (see the module docstring)."""
        if holder.get("owner") == self.owner:
            return True
        if holder.get("host") == self.host and not pid_alive(int(holder.get("pid", -1))):
            return False
        return time.time() - self._heartbeat(holder) <= self.stale_seconds

    def holder(self, key: str) -> Holder | None:
        """The live holder of ``key`` (this process included), None if the unit is free or its claim stale."""
        gens = self._generations(key)
        if not gens:
            return None
        info = self._read(gens[-1][1])
        if info is None:  # being created, or removed meanwhile: take the file's own age as its heartbeat
            try:
                age = time.time() - gens[-1][1].stat().st_mtime
            except OSError:
                return None
            return {"key": key, "host": "?", "pid": -1, "owner": "?"} if age <= self.stale_seconds else None
        return info if self.alive(info) else None

    # ------------------------------------------------------------------------------------------ claiming
    def _create(self, key: str, gen: int) -> bool:
        """Create claim file ``gen`` of ``key`` exclusively (``O_CREAT | O_EXCL``: of several processes
        exactly one succeeds, also on NFS from version 3 on and on parallel file systems); False if it exists
        already.  A reader that finds it before its content is in takes it as held (:meth:`holder`)."""
        now = time.time()
        record = json.dumps({"key": key, "host": self.host, "pid": self.pid, "owner": self.owner,
                             "claimed": now, "heartbeat": now}).encode()
        path = self._path(key, gen)
        try:
            if not self._made:
                self.dir.mkdir(parents=True, exist_ok=True)
                self._made = True
            try:
                fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            except FileExistsError:
                return False
            try:
                os.write(fd, record)
            finally:
                os.close(fd)
        except OSError as exc:
            raise write_fault(path, exc) from None
        return True

    def claim(self, key: str) -> bool:
        """Claim unit ``key`` for this process: True if it is now (or was already) ours, False if a live
        process holds it.  A stale claim is taken over."""
        if key in self.held:
            return True
        if not self.last_beat:
            self.beat(force=True)
        for _ in range(16):  # every round either decides or sees another process win a race
            gens = self._generations(key)
            if not gens:
                if self._create(key, 0):
                    self.held[key] = 0
                    return True
                continue
            gen = gens[-1][0]
            if self.holder(key) is not None:
                return False
            if self._create(key, gen + 1):
                self.held[key] = gen + 1
                return True
        return False

    def still_held(self, key: str) -> bool:
        """Whether our claim on ``key`` is still the one in force (no other process took it over)."""
        gen = self.held.get(key)
        return gen is not None and self.still_held_at(key, gen)

    def still_held_at(self, key: str, gen: int) -> bool:
        """Whether generation ``gen`` of ``key``, ours, is still the claim in force."""
        gens = self._generations(key)
        if not gens or gens[-1][0] != gen:
            return False
        info = self._read(gens[-1][1])
        return info is not None and info.get("owner") == self.owner

    def release(self, key: str) -> None:
        """Give up the claim on ``key``: if it is still ours, its file and those of the generations before
        it are removed, lowest first (a process looking meanwhile sees the unit free, or held by us)."""
        if key not in self.held:
            return
        gen = self.held.pop(key)
        if self._sure() or self.still_held_at(key, gen):
            for g in range(gen + 1):
                try:
                    os.unlink(self._path(key, g))
                except OSError:
                    pass

    def beat(self, force: bool = False) -> list[str]:
        """Rewrite this process's heartbeat if due (or ``force``); returns the keys of claims lost to other
        processes, looked for only when the previous heartbeat is older than half the stale limit (this
        process was frozen long enough to be taken for dead)."""
        now = time.time()
        if not force and now - self.last_beat < self.heartbeat_seconds:
            return []
        lost: list[str] = []
        if self.last_beat and now - self.last_beat > 0.5 * self.stale_seconds:
            lost = [k for k in self.held if not self.still_held(k)]
            for k in lost:
                del self.held[k]
        path = self.dir / f"{self.owner}.alive"
        try:
            self.dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise write_fault(path, exc) from None
        atomic_write_text(path, json.dumps({"host": self.host, "pid": self.pid, "owner": self.owner,
                                            "heartbeat": now}), durable=False)
        self.last_beat = now
        return lost

    def live(self) -> dict[str, Holder]:
        """Every claim in force in the run directory whose holder is alive (this process included), by key
        (one listing of the claims folder)."""
        newest: dict[str, tuple[int, Path]] = {}
        try:
            names = [p for p in self.dir.iterdir() if p.name.endswith(".claim")]
        except OSError:
            return {}
        for p in names:
            key, _, gen = p.name[:-len(".claim")].rpartition(".")
            if key and gen.isdigit() and int(gen) >= newest.get(key, (-1, p))[0]:
                newest[key] = (int(gen), p)
        out = {}
        for key, (_, p) in newest.items():
            info = self._read(p)
            if info is not None and self.alive(info):
                out[key] = info
        return out

    def sweep(self) -> None:
        """Remove heartbeat and temporary files of processes that are gone (this host: ended; other hosts:
        silent for ten stale limits)."""
        remove_leftovers(self.dir)
        try:
            files = list(self.dir.glob("*.alive"))
        except OSError:
            return
        for p in files:
            info = self._read(p)
            if info is None or info.get("owner") == self.owner:
                continue
            gone = (info.get("host") == self.host and not pid_alive(int(info.get("pid", -1)))) or \
                time.time() - float(info.get("heartbeat", 0.0)) > 10 * self.stale_seconds
            if gone:
                try:
                    p.unlink(missing_ok=True)
                except OSError:
                    pass

    def close(self) -> None:
        """Release every claim and remove the heartbeat file."""
        for key in list(self.held):
            self.release(key)
        try:
            (self.dir / f"{self.owner}.alive").unlink(missing_ok=True)
        except OSError:
            pass
