"""Refactors keep chains bit-identical: bins stored from earlier commits are reproduced exactly.

Five short runs (tests/helpers/stored_bins.py: square-lattice Heisenberg, J-Q2, J-Q3, a bilayer and a
three-chain exchange ladder along Q) are run with the plain estimators and every bin is compared with a
stored file.  A change that alters the Markov chain (random numbers, operator order, estimator
arithmetic, cutoff) fails here; one that only moves code or renames things does not.

Two files, two chain changes between them, each checked:

* ``bins_short_string_group_draw.npz``, today's chain, written when two changes made the step cheaper
  (issue 11): the cutoff grows to n + n/3 + 16 instead of n + n/2 + 16
  (:func:`qmc.chain.simulation.grown_cutoff`; it changes the insertion probabilities' denominators), and
  the inserted term is drawn by group where the groups are uniform
  (:func:`qmc.chain.alias.group_draw_tables`; the same uniform number selects another term than the
  alias table did).  Both change the random path of every chain, not its distribution.
* ``bins_before_house.npz``, made with commit ff097ea before the house reshaping (names of that commit:
  ``RENAMED`` maps observables to today's names and :func:`_current_task` the task ids, copy suffix
  ``_r0`` then, ``_c0`` now).  :func:`test_bins_match_before_house` runs with the former cutoff rule and
  the alias draw put back and must still reproduce it bit for bit: so these two are the only changes of
  the chain since.

With the default loop estimators (:func:`test_loop_estimators_keep_the_chain`) the six observables they
replace differ, and every other column must still be bit-identical: the loop estimators change no random
number and no step of the chain.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from helpers.stored_bins import RUNS, STORED, read_bins, run_stored

import qmc.chain.simulation as simulation

RENAMED = {"s_q_next": "s_q_shifted", "bond_energy": "term_energy"}
TODAY = "bins_short_string_group_draw.npz"
BEFORE_HOUSE = "bins_before_house.npz"


def _stored(name: str, run: str) -> dict[str, np.ndarray]:
    with np.load(STORED / name) as z:
        return {k: z[k] for k in z.files if k.startswith(run + "|")}


def _current_name(old: str) -> str:
    for a, b in RENAMED.items():
        if old == a or old.startswith(a + ":"):
            return b + old[len(a):]
    return old


def _current_task(old: str) -> str:
    stem, _, copy = old.rpartition("_r")
    return f"{stem}_c{copy}"


def _today_key(old: str) -> str:
    run, task, name = old.split("|")
    return f"{run}|{_current_task(task)}|{_current_name(name)}"


LOOP_OBSERVABLES = {"chi_uniform", "m_stag2", "m_stag4", "chi_stag", "s_q", "s_q_shifted"}
"""The observables that the loop estimators measure differently."""


def _former_cutoff(n: int) -> int:
    """The cutoff rule up to commit 46a0760."""
    return n + n // 2 + 16


def _alias_only(term_group: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, ...]:
    """No draw by group: the alias table for every model, as up to commit 46a0760."""
    return np.zeros(0), np.zeros(0), np.zeros(0, np.int32), np.zeros(0, np.int32)


@pytest.mark.parametrize("run", RUNS)
def test_bins_match_stored(run: str, tmp_path: Path) -> None:
    got = read_bins(run, run_stored(run, tmp_path, "plain"))
    _compare(_stored(TODAY, run), got, set())


@pytest.mark.parametrize("run", RUNS)
def test_bins_match_before_house(run: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """With the former cutoff rule and the alias draw the bins of commit ff097ea come back bit for bit; with
    today's they differ (so those are what changed, and this test notices it)."""
    stored = {_today_key(k): v for k, v in _stored(BEFORE_HOUSE, run).items()}
    with monkeypatch.context() as m:
        m.setattr(simulation, "grown_cutoff", _former_cutoff)
        m.setattr(simulation, "group_draw_tables", _alias_only)
        got = read_bins(run, run_stored(run, tmp_path, "plain"))
    _compare(stored, got, set())
    today = _stored(TODAY, run)
    assert any(not np.array_equal(today[k], v) for k, v in stored.items()), "the changes changed nothing"


@pytest.mark.parametrize("run", ["heisenberg", "jq3"])
def test_loop_estimators_keep_the_chain(run: str, tmp_path: Path) -> None:
    """Default estimators: the loop-estimated columns differ from the stored ones (so the selection works),
    every other column is bit-identical (so the chain is the same)."""
    got = read_bins(run, run_stored(run, tmp_path, "improved"))
    _compare(_stored(TODAY, run), got, LOOP_OBSERVABLES)


def _compare(stored: dict[str, np.ndarray], got: dict[str, np.ndarray], differ: set[str]) -> None:
    """Every stored column equals the run's (``run|task|observable`` keys), except those named in ``differ``,
    which must differ."""
    assert stored, "no stored bins"
    tasks = {k.rsplit("|", 1)[0] for k in stored}
    assert tasks == {k.rsplit("|", 1)[0] for k in got}, "other tasks than stored"
    for key, want in stored.items():
        assert key in got, f"{key}: not written"
        if key.rsplit("|", 1)[1] in differ:
            assert not np.array_equal(got[key], want), f"{key}: plain bins"
        else:
            np.testing.assert_array_equal(got[key], want, err_msg=key)
