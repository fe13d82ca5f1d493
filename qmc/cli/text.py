"""Plain-text renderings for the terminal: a task summary table and a task file's contents.

Summary columns: ``mean``, ``error`` (one standard error of the mean, from the binning analysis),
``tau_int[bins]`` (integrated autocorrelation time of the bin series in units of bins; 1/2 means
uncorrelated bins, larger values mean the bins are too short) and ``tau_int[steps]`` (the same in Monte
Carlo steps, tau_int[bins] times the steps per bin; written "<x" when the bins are nearly uncorrelated,
tau_int[bins] < 1, and it is only an upper bound).
"""

from __future__ import annotations

import math
from typing import Any

from qmc.chain.target import goal_text
from qmc.exchange.records import exchange_summary

__all__ = ["fmt", "params_text", "summary_table", "exchange_text", "target_text", "ground_state_text",
           "inspect_text"]


def fmt(x: Any, spec: str) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "nan"
    return format(x, spec)


def params_text(params: dict[str, Any]) -> str:
    return ", ".join(f"{k} = {list(v) if isinstance(v, tuple) else v}" for k, v in params.items())


def summary_table(s: dict[str, Any]) -> str:
    info = s.get("info", {})
    head = f"task {s['task']}"
    if info:
        head += (f"  ({info.get('status', '?')}, {info.get('n_bins', 0)} bins of "
                 f"{info.get('steps_per_bin', 0)} Monte Carlo steps, {info.get('n_sites', '?')} sites"
                 + (f", beta {fmt(info.get('beta'), 'g')}" if "beta" not in s["params"] else "") + ")")
    lines = [head, "  " + params_text(s["params"])]
    obs = s["observables"]
    if obs:
        width = max(10, *(len(n) for n in obs))
        lines.append(f"  {'observable':<{width}}  {'mean':>16}  {'error':>10}  {'tau_int[bins]':>13}  "
                     f"{'tau_int[steps]':>14}")
        for name, d in obs.items():
            steps = fmt(d.get("tau_int_steps"), ".4g")
            if d.get("tau_int_steps_bound") and steps != "nan":
                steps = "<" + steps
            lines.append(f"  {name:<{width}}  {fmt(d.get('mean'), '16.9g')}  "
                         f"{fmt(d.get('error'), '10.3g')}  {fmt(d.get('tau_int'), '13.2f')}  {steps:>14}")
    if s.get("exchange"):
        lines.append("  " + exchange_text(s["exchange"]))
    if s.get("target"):
        lines.append("  " + target_text(s["target"], info.get("status", "")))
    if s.get("ground_state"):
        lines += ["  " + line for line in ground_state_text(s["ground_state"], info.get("beta"))]
    lines += [f"  warning: {w}" for w in s.get("warnings", [])]
    return "\n".join(lines)


def exchange_text(x: dict[str, Any]) -> str:
    """One line on a task's replica exchange: its place in the ladder and its acceptance rates."""
    name, pos, values, tried = x["parameter"], x["position"], x["values"], x["attempted"]
    parts = []
    for j, rate, other in ((pos - 1, x["acceptance_down"], pos - 1), (pos, x["acceptance_up"], pos + 1)):
        if 0 <= j < len(tried) and 0 <= other < len(values):
            parts.append(f"with {name} = {values[other]:g}: {fmt(rate, '.3f')} ({tried[j]} attempts)")
    return (f"exchange along {name}: position {pos + 1} of {len(values)}, acceptance "
            + ", ".join(parts) + f"; round trips of the ladder: {x['round_trips']}")


def target_text(t: dict[str, Any], status: str) -> str:
    """One line on a task's precision target: met (at how many bins) or not, and every goal's error."""
    parts = []
    for c in t["checks"]:
        err = c.get("error")
        if err is None:
            parts.append(f"{c['observable']} <= {c['goal']}")
            continue
        shown = fmt(err, ".3g")
        if str(c["goal"]).endswith("%") and c.get("mean"):
            shown = fmt(100.0 * err / abs(c["mean"]), ".3g") + "%"
        mark = "" if c.get("plateau", True) else " (no plateau)"
        parts.append(f"{c['observable']} {shown}{mark} {'<=' if c['met'] else '>'} {c['goal']}")
    if t["met"]:
        head = f"precision target met at {t['bins']} bins"
    elif status == "done":
        head = f"precision target NOT met: measure_steps used up at {t['bins']} bins"
    else:
        head = f"precision target not met yet ({t['bins']} bins)"
    return head + ": " + ", ".join(parts)


def ground_state_text(g: dict[str, Any], beta: Any) -> list[str]:
    """Lines on a task's ground-state search: outcome, then one line per finished stage of the beta ladder
    (bins, the watched observables with their errors, the separation from the stage before)."""
    ladder = " -> ".join(f"{b:g}" for b in g["betas"]) or "none finished yet"
    if g["outcome"] == "converged":
        head = (f"ground state by beta doubling: converged at beta = {g['betas'][-1]:g} ("
                f"{', '.join(g['observables'])} agree within {g['n_sigma']:g} error bars for the last two "
                "doublings); the table above is that stage")
    elif g["outcome"] == "not reached":
        head = (f"ground state by beta doubling: NOT reached up to max_beta = {g['max_beta']:g}; the table "
                f"above is the last stage, beta = {g['betas'][-1]:g}")
    else:
        head = f"ground state by beta doubling: running, now at beta = {fmt(beta, 'g')}"
    lines = [head, f"beta ladder: {ladder}"]
    for st in g["stages"]:
        parts = [f"{k} = {fmt(v['mean'], '.8g')} +- {fmt(v['error'], '.2g')}"
                 for k, v in st["estimates"].items()]
        if st["agree"] is not None:
            sig = ", ".join(f"{fmt(v, '.2f')}" for v in st["sigmas"].values())
            parts.append(f"{'agrees' if st['agree'] else 'differs'} ({sig} sigma)")
        lines.append(f"  beta {st['beta']:<8g} {st['bins']:>6} bins  " + "; ".join(parts))
    return lines


def inspect_text(d: Any) -> str:
    rows: list[tuple[str, str]] = [
        ("file", d.path), ("format", f"{d.file_format}, version {d.format_version}"), ("task", d.task_id),
        ("status", d.status),
    ]
    if d.message:
        rows.append(("message", d.message))
    rows.append(("params", params_text(d.params)))
    m = d.model_info
    if m:
        groups = ", ".join(m.get("group_names", []) or [])
        rows.append(("model", f"{m.get('lattice_kind', '?')} lattice, {m.get('n_sites', '?')} sites, "
                              f"{m.get('n_terms', '?')} terms, term groups: {groups}"))
    rows.append(("beta", f"{d.beta:g}"))
    rows.append(("bins", f"{d.bins_done} of {d.bins_total} done, {d.steps_per_bin} steps per bin"))
    rows.append(("steps", f"{d.steps_done} of {d.steps_total} done"))
    if d.target:
        goals = ", ".join(goal_text((str(n), float(v), bool(r))) for n, v, r in d.target)
        rows.append(("target", f"{goals} ({'met' if d.target_met else 'not met'})"))
    if d.ground_state:
        g = d.ground_state
        betas = [g["stages"][k]["beta"] for k in sorted(g.get("stages", {}), key=int)]
        ladder = ", ".join(f"{b:g}" for b in betas) or "none"
        rows.append(("ground_state", f"{g.get('outcome', '?')}; finished stages at beta {ladder}; /bins at "
                                     f"beta {d.beta:g}"))
    rows.append(("checkpoint", f"{d.checkpoint_time or 'none'} (at step {d.steps_done})"))
    rows.append(("observables", ", ".join(d.bin_names)))
    if d.vbs_histogram is not None:
        rows.append(("vbs_histogram", f"{d.vbs_histogram.shape[0]}x{d.vbs_histogram.shape[1]} bins over "
                                      f"[-{d.vbs_hist_range:g}, {d.vbs_hist_range:g}]^2, "
                                      f"{int(d.vbs_histogram.sum())} samples"))
    if d.exchange:
        x = exchange_summary(d.exchange)
        plain = {k: (v.tolist() if hasattr(v, "tolist") else v) for k, v in d.exchange.items()}
        short = {k: (f"[{len(v)} values]" if isinstance(v, list) and len(v) > 8 else v)
                 for k, v in plain.items()}
        rows.append(("exchange", exchange_text(x) if x is not None else params_text(short)))
    width = max(len(k) for k, _ in rows)
    lines = [f"{k:<{width}}  {v}" for k, v in rows]
    prov = dict(d.provenance)
    sessions = prov.pop("sessions", [])
    lines.append("provenance")
    pw = max((len(k) for k in prov), default=0)
    lines += [f"  {k:<{pw}}  {v}" for k, v in prov.items()]
    lines.append(f"sessions ({len(sessions)})")
    for i, s in enumerate(sessions, 1):
        lines.append(f"  {i}. {s.get('start')} -> {s.get('stop')}  steps {s.get('steps_start')} -> "
                     f"{s.get('steps_stop')}  {s.get('ended')}  on {s.get('host')} (pid {s.get('pid')})")
    lines.append(f"config ({d.config_path})")
    lines += [f"  | {line}" for line in d.config_text.rstrip("\n").split("\n")]
    return "\n".join(lines)
