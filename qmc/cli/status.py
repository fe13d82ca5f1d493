"""``qmc status RUN``: one screen on the state of a run (:mod:`qmc.run.status`)."""

from __future__ import annotations

import json
import time
from dataclasses import asdict
from pathlib import Path
from typing import Any

import click

__all__ = ["status_cmd", "status_text"]

_ORDER = {"failed": 0, "running": 1, "queued": 2, "stopped": 3, "pending": 4, "done": 5}


def _ago(t: float | None, now: float) -> str:
    from qmc.run.progress import format_duration

    if t is None:
        return "-"
    return f"{time.strftime('%Y-%m-%d %H:%M:%S', time.localtime(t))} ({format_duration(now - t)} ago)"


def status_text(st: Any, *, show_all: bool = False, rows: int = 20, now: float | None = None) -> str:
    """The screen of ``qmc status``: a head, one line per task (unfinished ones first; at most ``rows``
    unless ``show_all``), failures, and the time left."""
    from qmc.run.progress import format_duration

    now = time.time() if now is None else now
    counts = ", ".join(f"{st.count(s)} {s}" for s in ("done", "running", "queued", "stopped", "failed",
                                                      "pending") if st.count(s))
    configured = [t for t in st.tasks if t.in_config]
    lines = [f"run {st.run_dir}" + (f" ({st.name})" if st.name else "") + f", configuration {st.source}",
             f"{len(configured)} task(s): {counts or 'none'}; index updated {st.updated}"]
    shown = sorted(configured, key=lambda t: (_ORDER.get(t.state, 5), t.task_id))
    if not show_all and len(shown) > rows:
        hidden = shown[rows:]
        shown = shown[:rows]
    else:
        hidden = []
    if shown:
        w = max(8, *(len(t.task_id) for t in shown))
        lines.append(f"  {'task':<{w}}  {'state':<8}  {'steps':>21}  {'bins':>11}  {'left':>9}  "
                     "last checkpoint")
        for t in shown:
            steps = f"{t.steps_done}/{t.steps_total}"
            bins = f"{t.bins_done}/{t.bins_total}"
            left = "" if t.state == "done" else format_duration(t.seconds_left)
            state = t.state + ("?" if t.stale else "")
            lines.append(f"  {t.task_id:<{w}}  {state:<8}  {steps:>21}  {bins:>11}  {left:>9}  "
                         f"{_ago(t.checkpoint_time, now)}")
    if hidden:
        states = ", ".join(sorted({t.state for t in hidden}))
        lines.append(f"  ... {len(hidden)} more task(s) not shown ({states}; --all lists every task)")
    failed = [t for t in configured if t.state == "failed"]
    for t in failed:
        lines.append(f"failed {t.task_id}: {t.message or '(no message)'}")
    stale = [t.task_id for t in configured if t.stale]
    if stale:
        lines.append(f"note: {len(stale)} task(s) marked running (running?) were not checkpointed for longer "
                     "than their checkpoint interval: their process has probably stopped; rerun to continue")
    others = [t.task_id for t in st.tasks if not t.in_config]
    if others:
        lines.append(f"note: {len(others)} task(s) of the run are not in its configuration (files kept)")
    left = sum(1 for t in configured if t.state != "done")
    if not left:
        lines.append("all tasks done")
    elif st.seconds_left is None:
        lines.append(f"left: {left} task(s); no time estimate yet (no task has made measurable progress)")
    else:
        extra = f" ({st.unestimated} task(s) without an estimate)" if st.unestimated else ""
        lines.append(f"left: {left} task(s), about {format_duration(st.seconds_left)} on one process (under "
                     f"MPI about that divided by the number of ranks){extra}")
    return "\n".join(lines)


@click.command("status")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option("--all", "show_all", is_flag=True, help="List every task, not only the first 20.")
@click.option("--json", "as_json", is_flag=True, help="Print the state as JSON.")
def status_cmd(run_dir: Path, show_all: bool, as_json: bool) -> None:
    """The state of the run in RUN_DIR on one screen: every task's state (pending, running, stopped, done,
    failed), steps and bins done of those asked for, the time left, its last checkpoint; failures with
    their messages; the time the rest needs.

    Times left come from the seconds per Monte Carlo step measured in the tasks' own sessions; a task not
    run yet is estimated from the others (an SSE step costs about N beta).  Unfinished tasks are listed
    first.  It reads only the run index and the task files' headers, so it is quick during a run.
    """
    from qmc.run.status import run_status

    st = run_status(run_dir)
    if as_json:
        data = {"run_dir": str(st.run_dir), "name": st.name, "config_source": st.source,
                "updated": st.updated, "seconds_left": st.seconds_left,
                "tasks": [asdict(t) for t in st.tasks]}
        click.echo(json.dumps(data, indent=1))
        return
    click.echo(status_text(st, show_all=show_all))
