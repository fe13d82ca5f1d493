"""``qmc report``: one self-contained HTML page about a run, to open in any browser without network access.

:func:`write_report` runs :func:`qmc.analysis.report.analyze_run` with plots into a temporary directory
(nothing is written beside the run but the page) and assembles

    the model and lattice in words and the configuration as written;  the scan and every task's state;
    the warnings;  the ground-state check (beta against 2 beta);  for each crossing quantity the crossings
    of size pairs, the extrapolations with chi^2/dof and their caveats, and the data collapse;  every
    observable against the coupling, one curve per L, with its definition;  the VBS histograms;  the
    L -> infinity fits asked for;  all estimates as a table (and as CSV to download);  provenance
    (versions, git revision, hosts, sessions).

Figures are PNG images embedded as ``data:`` URIs and the CSV file is a ``data:`` link, so the page is one
file; it has no scripts and loads nothing from elsewhere.
"""

from __future__ import annotations

import base64
import html
import json
import os
import tempfile
from collections import Counter
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from .errors import AnalysisError
from .labels import axis_label, describe, observable_note
from .report import CROSSING_QUANTITIES, analyze_run
from .run_text import RunText, run_text

__all__ = ["write_report"]

_CSS = """
body { font-family: sans-serif; max-width: 1100px; margin: 1em auto; padding: 0 1em; color: #222; }
h1 { font-size: 1.5em; } h2 { border-bottom: 1px solid #ccc; margin-top: 1.6em; } h3 { margin-bottom: .3em; }
table { border-collapse: collapse; font-size: .85em; margin: .5em 0; }
td, th { border: 1px solid #ddd; padding: 2px 6px; text-align: right; } th { background: #f3f3f3; }
td.l, th.l { text-align: left; }
pre { background: #f6f6f6; padding: .6em; overflow-x: auto; font-size: .85em; }
figure { margin: 1em 0; } figure img { max-width: 100%; border: 1px solid #eee; }
figcaption { font-size: .85em; color: #444; }
.warn { background: #fff4e0; border-left: 4px solid #e0a000; padding: .3em .6em; margin: .3em 0; }
.bad { color: #b00000; font-weight: bold; } .muted { color: #666; font-size: .9em; }
"""

_FIRST = ("binder_stag", "binder_vbs", "stiffness_L", "xi_over_L", "m_stag2", "vbs_x2", "vbs_y2", "stiffness",
          "energy")


def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _num(v: Any, digits: int = 6) -> str:
    return "n/a" if v is None else (f"{v:.{digits}g}" if isinstance(v, float) else str(v))


def _pm(value: Any, error: Any) -> str:
    return "n/a" if value is None else f"{_num(value)} ± {_num(error, 2)}"


def _table(header: Sequence[str], rows: Iterable[Sequence[Any]], left: int = 1) -> str:
    head = "".join(f'<th class="{"l" if i < left else ""}">{_e(h)}</th>' for i, h in enumerate(header))
    body = "".join("<tr>" + "".join(f'<td class="{"l" if i < left else ""}">{_e(c)}</td>' for i, c in
                                    enumerate(row)) + "</tr>" for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _figure(images: Mapping[str, str], stem: str, caption: str) -> str:
    if stem not in images:
        return ""
    return (f'<figure><img alt="{_e(stem)}" src="data:image/png;base64,{images[stem]}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


def _model_section(text: RunText, config_text: str) -> str:
    rows = [("Hamiltonian", text.hamiltonian), *(("term", t) for t in text.terms), ("lattice", text.lattice),
            ("inverse temperature", text.beta_rule),
            *((f"coupling {k}", v) for k, v in text.couplings.items())]
    out = ["<h2>Model and lattice</h2>"]
    if text.description:
        out.append(f"<p>{_e(text.description)}</p>")
    out.append(_table(["", ""], rows, left=2))
    out.append("<p class=muted>Heisenberg terms add +J S_i.S_j per bond; projector-product terms add "
               "-Q prod P_ij with P_ij = 1/4 - S_i.S_j; energies are in the units of the couplings.</p>")
    out.append(f"<h3>Configuration</h3><pre>{_e(config_text)}</pre>")
    return "\n".join(out)


def _scan_section(text: RunText, tasks: Sequence[Any], index: Mapping | None) -> str:
    out = ["<h2>Scan</h2>", _table(["scan entry", "values as written"], text.scan.items(), left=2)]
    by_id = {str(t.task_id): t for t in tasks}
    entries = dict((index or {}).get("tasks", {}))
    ids = list(entries) + [i for i in by_id if i not in entries]
    rows, states = [], Counter()
    for tid in ids:
        t, e = by_id.get(tid), entries.get(tid, {})
        status = t.status if t is not None else e.get("status", "pending")
        states[status] += 1
        params = ", ".join(f"{k}={v}" for k, v in (e.get("params") or getattr(t, "params", {})).items()
                           if k not in ("lattice", "size", "boundary"))
        bins = (f"{t.bins_done}/{t.bins_total}" if t is not None
                else f"{e.get('bins_done', 0)}/{e.get('bins_total', '?')}")
        rows.append((tid, params, status, bins, getattr(t, "steps_per_bin", ""), getattr(t, "n_sites", ""),
                     e.get("message", "") or getattr(t, "message", "")))
    summary = ", ".join(f"{n} {s}" for s, n in sorted(states.items()))
    out.append(f"<p>{len(ids)} task(s): {_e(summary)}.</p>")
    out.append("<details><summary>every task</summary>" + _table(
        ["task", "parameters", "status", "bins done", "steps per bin", "sites", "message"], rows, left=3)
        + "</details>")
    return "\n".join(out)


def _warnings_section(warnings: Sequence[str]) -> str:
    items = "".join(f'<div class="warn">{_e(w)}</div>' for w in warnings)
    return "<h2>Warnings</h2>" + (items or "<p>none</p>")


def _ground_state_section(gs: Mapping) -> str:
    out = ["<h2>Ground-state check</h2>",
           f"<p>Points run at both beta and 2 beta: {gs['pairs_checked']}.  An observable is flagged when "
           f"the two differ by more than {_num(gs.get('n_sigma', 2.0))} combined error bars: the lower "
           "temperature still changes it, so beta is not yet large enough for ground-state properties.</p>"]
    if not gs["pairs_checked"]:
        out.append('<div class="warn">No point was run at beta and at 2 beta, so convergence to the ground '
                   "state was not checked: run the points also at twice their beta.</div>")
    elif gs["flags"]:
        rows = [(f["observable"], _num(f["L"]), _num(f["g"]), _num(f["beta"]), _pm(f["value"], f["error"]),
                 _pm(f["value2"], f["error2"]), f"{f['sigmas']:.1f}") for f in gs["flags"]]
        out.append(_table(["observable", "L", "coupling", "beta", "at beta", "at 2 beta", "sigmas"], rows))
    else:
        out.append("<p>No observable differs between beta and 2 beta.</p>")
    return "\n".join(out)


def _fit_line(name: str, fit: Mapping | None) -> str:
    if not fit or fit.get("limit") is None:
        return f"<li>{_e(name)}: no extrapolation</li>"
    omega = (f"omega = {_pm(fit['omega'], fit['omega_err'])} (fitted)" if fit.get("omega_fitted")
             else f"omega fixed to {_num(fit['omega'])} (assumed)")
    q = fit.get("quality") or {}
    verdict = ' <span class="bad">unreliable</span>' if q.get("reliable") is False else ""
    return (f"<li>{_e(name)} = {_e(_pm(fit['limit'], fit['limit_err']))} from {fit['n_points']} pairs, "
            f"{_e(omega)}; {_e(q.get('summary', ''))}{verdict}</li>")


def _crossing_section(result: Mapping, images: Mapping[str, str], coupling: str) -> str:
    q = result["quantity"]
    t = describe(q)
    head = f"<h3>{_e(t.symbol + ' (' + q + ')' if t else q)}</h3>"
    cr = result.get("crossings")
    if not cr:
        return head + "<p>No crossing analysis (see the warnings).</p>"
    if not cr["pairs"]:
        return head + "<p>The curves of the size pairs do not cross inside the scanned range.</p>"
    rows = [(f"{p['L1']:g}, {p['L2']:g}", _pm(p["g"], p["g_err"]), _pm(p["value"], p["value_err"]),
             _pm(p["inv_nu"], p["inv_nu_err"]), f"{p['n_boot_ok']}/{p['n_boot']}", _num(p["fit_chi2_dof"], 3))
            for p in cr["pairs"]]
    out = [head, _table(["sizes L1, L2", f"crossing {coupling}*", "value at the crossing", "1/nu",
                         "resamples with a crossing", "local fit chi^2/dof"], rows)]
    fits = [_fit_line(f"{coupling}_c", cr.get("g_c")), _fit_line("1/nu", cr.get("inv_nu"))]
    col = cr.get("collapse")
    if col:
        verdict = ' <span class="bad">unreliable</span>' if col["quality"]["reliable"] is False else ""
        fits.append(f"<li>data collapse: {_e(coupling)}_c = {_e(_pm(col['g_c'], col['g_c_err']))}, nu = "
                    f"{_e(_pm(col['nu'], col['nu_err']))}; {_e(col['quality']['summary'])}{verdict}</li>")
    out.append("<ul>" + "".join(fits) + "</ul>")
    out += [f'<div class="warn">Caveat: {_e(c)}</div>' for c in cr.get("caveats", [])]
    out.append(_figure(images, f"crossings_{q}", f"Crossings of {q} for pairs of sizes against 1/L1 and "
                       "1/nu from the slopes; a fit is drawn only from two or more pairs."))
    out.append(_figure(images, f"collapse_{q}", f"Data collapse of {q}: {observable_note(q)}"))
    return "\n".join(out)


def _observable_order(names: Sequence[str]) -> list[str]:
    return [n for n in _FIRST if n in names] + [n for n in names if n not in _FIRST]


def _observables_section(names: Sequence[str], images: Mapping[str, str], coupling: str | None) -> str:
    out = ["<h2>Observables against the coupling</h2>"]
    if coupling is None:
        return out[0] + ("<p>No coupling varies between the tasks: the estimates are in the table below; "
                         "<code>qmc report RUN --extrapolate m_stag2</code> adds fits to L -> infinity.</p>")
    out.append(f"<p>One curve per size L; at every (L, {_e(coupling)}) the largest beta; error bars are one "
               "standard error (binning analysis; jackknife for derived quantities).</p>")
    for name in _observable_order(names):
        out.append(_figure(images, f"obs_{name.replace('/', '_')}", observable_note(name) or name))
    return "\n".join(out)


def _vbs_section(images: Mapping[str, str]) -> str:
    stems = sorted((s for s in images if s.startswith("vbs_L")), key=lambda s: float(s[5:]))
    if not stems:
        return ""
    return "<h2>Valence-bond histograms</h2>" + "".join(
        _figure(images, s, f"Distribution of (D_x, D_y) for L = {s[5:]}, one panel per coupling (largest "
                           "beta); the colour scale of each panel runs from 0 to its largest value.")
        for s in stems)


def _extrapolation_section(extrapolations: Sequence[Mapping], images: Mapping[str, str]) -> str:
    if not extrapolations:
        return ""
    rows = [(r["observable"], ", ".join(f"{k}={v}" for k, v in r["params"].items()),
             _pm(r["limit"], r["limit_err"]), _num(r["chi2_dof"], 3), r["n_sizes"],
             _num(r.get("drop_smallest_shift"), 3)) for r in extrapolations]
    out = ["<h2>L -> infinity</h2>", _table(["observable", "point", "limit", "chi^2/dof", "sizes",
                                             "shift without the smallest L"], rows, left=2)]
    for name in dict.fromkeys(r["observable"] for r in extrapolations):
        out.append(_figure(images, f"extrapolation_{name.replace('/', '_')}", axis_label(name)))
    return "\n".join(out)


def _data_section(table: Mapping, csv_bytes: bytes) -> str:
    points, coupling, extra = table["points"], table["coupling"], table["varying"]
    names = _observable_order(sorted({n for p in points for n in p["observables"]}))
    head = ["L", "beta", *([coupling] if coupling else []), *extra, *names]
    rows = [[_num(p["L"]), _num(p["beta"]), *([_num(p["g"])] if coupling else []),
             *(_num(p["params"].get(k)) for k in extra),
             *(_pm(p["observables"][n]["mean"], p["observables"][n]["error"]) if n in p["observables"] else ""
               for n in names)] for p in points]
    link = base64.b64encode(csv_bytes).decode("ascii")
    return ("<h2>All estimates</h2>"
            f'<p><a download="observables.csv" href="data:text/csv;base64,{link}">observables.csv</a> '
            "(every observable with its error and tau_int[bins] per scan point).</p>"
            "<details><summary>table</summary>" + _table(head, rows, left=0) + "</details>")


def _provenance_section(tasks: Sequence[Any], version: str) -> str:
    keys = ("package_version", "git_revision", "git_dirty", "python_version", "numpy_version",
            "numba_version", "h5py_version", "hdf5_version", "host", "platform", "master_seed")
    rows = []
    for k in keys:
        seen = Counter(str(t.provenance.get(k, "")) for t in tasks)
        rows.append((k, "; ".join(f"{v} ({n} tasks)" if len(seen) > 1 else v for v, n in seen.items())))
    sessions = [s for t in tasks for s in (t.provenance.get("sessions") or [])]
    starts = sorted(s.get("start", "") for s in sessions if s.get("start"))
    stops = sorted(s.get("stop", "") for s in sessions if s.get("stop"))
    rows += [("sessions", f"{len(sessions)} on {', '.join(sorted({str(s.get('host')) for s in sessions}))}"),
             ("first start, last stop", f"{starts[0] if starts else '?'}, {stops[-1] if stops else '?'}"),
             ("report written by", f"seriesloop {version}")]
    return "<h2>Provenance</h2>" + _table(["", ""], rows, left=2)


def write_report(tasks: Iterable[Any], out_file: str | os.PathLike, *, index: Mapping | None = None,
                 quantities: Sequence[str] = (), version: str = "", title: str = "", **options: Any) -> Path:
    """Write the report page of the TaskData-like ``tasks`` to ``out_file``; returns its path.

    ``index``: the run index (lists tasks without a file yet); ``quantities``: crossing quantities (default:
    those of :data:`~qmc.analysis.report.CROSSING_QUANTITIES` the run has); ``options`` go to
    :func:`~qmc.analysis.report.analyze_run` (``coupling``, ``extrapolate``, ``powers``, ...).
    """
    task_list = list(tasks)
    if not task_list:
        raise AnalysisError("the run holds no task files yet: nothing to report", "report")
    out = Path(out_file)
    if out.is_dir():
        raise AnalysisError("is a directory; give the name of the HTML file to write", str(out))
    config_text = getattr(task_list[0], "config_text", "")
    text = run_text(config_text)
    images: dict[str, str] = {}
    with tempfile.TemporaryDirectory(prefix="qmc-report-") as tmp:
        first = analyze_run(task_list, Path(tmp) / "a", quantity=(list(quantities) or ["binder_stag"])[0],
                            plot=True, **options)
        wanted = list(quantities) or [q for q in CROSSING_QUANTITIES if q in first["observables"]]
        rest = {k: v for k, v in options.items() if k not in ("extrapolate", "powers", "min_L")}
        results = [first if q == first["quantity"] else
                   analyze_run(task_list, Path(tmp) / f"q{i}", quantity=q, plot=True, plot_observables=False,
                               **rest) for i, q in enumerate(wanted)] or [first]
        for res in (first, *results):
            for f in res["files"]:
                if f.endswith(".png"):
                    images.setdefault(Path(f).stem, base64.b64encode(Path(f).read_bytes()).decode("ascii"))
        table = json.loads((Path(tmp) / "a" / "observables.json").read_text(encoding="utf-8"))
        csv_bytes = (Path(tmp) / "a" / "observables.csv").read_bytes()
    coupling = first["coupling"]
    warnings = list(dict.fromkeys(w for r in (first, *results) for w in r["warnings"]))
    name = title or text.name or "run"
    parts = [
        f"<h1>{_e(name)}: simulation report</h1>",
        f"<p class=muted>{_e(text.title())}</p>",
        _model_section(text, config_text),
        _scan_section(text, task_list, index),
        _warnings_section(warnings),
        _ground_state_section(first["ground_state"]),
        "<h2>Crossings and critical coupling</h2>" + "".join(
            _crossing_section(r, images, coupling or "g") for r in results),
        _observables_section(first["observables"], images, coupling),
        _vbs_section(images),
        _extrapolation_section(first.get("extrapolations") or [], images),
        _data_section(table, csv_bytes),
        _provenance_section(task_list, version),
    ]
    page = ("<!DOCTYPE html>\n<html lang=en><head><meta charset=utf-8>"
            f"<title>{_e(name)}: simulation report</title><style>{_CSS}</style></head><body>\n"
            + "\n".join(p for p in parts if p) + "\n</body></html>\n")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp_file = out.with_name(out.name + ".tmp")
    tmp_file.write_text(page, encoding="utf-8")
    os.replace(tmp_file, out)
    return out
