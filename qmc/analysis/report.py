"""End-to-end analysis of a run: tables, ground-state check, crossings, extrapolation, collapse, plots.

``analyze_run(tasks, out_dir, quantity, plot, coupling)`` takes TaskData-like objects (see
:mod:`qmc.analysis.tasks`) and writes into ``out_dir``:

    observables.csv / observables.json   every stored and derived observable per scan point
    analysis.json                        the returned result dict
    plots/obs_<name>.{png,pdf}           observable versus coupling, one curve per L  (plot=True)
    plots/crossings_<quantity>.{png,pdf} crossing drift with its extrapolation, 1/nu(L)
    plots/collapse_<quantity>.{png,pdf}  data collapse
    plots/vbs_L<L>.{png,pdf}             VBS histograms (largest beta per coupling)
    extrapolation.csv                    L -> infinity fits of the observables in ``extrapolate``
    plots/extrapolation_<obs>.{png,pdf}  y(L) against 1/L with the fits and the limits  (plot=True)
    plots/vbs_<coupling><g>.{png,pdf}    VBS histograms at one coupling, one panel per L (emergent U(1))
    plots/cos4_vs_L.{png,pdf}            |<cos 4 theta>| versus L per coupling with power-law fits
    domain_wall.csv, profiles.csv        runs with [domain_wall]: kappa per (scan point, wall); profiles
    plots/kappa.{png,pdf}                kappa versus L with power-law fits, kappa L versus L
    plots/profiles_<point>.{png,pdf}     D_x(x), D_y(x), e(x) of the reference and the walls of a point

Steps: independent copies are merged (:func:`qmc.analysis.summary.group_copies`), every point is
summarised, the coupling is detected (:mod:`qmc.analysis.scan`), beta/2 beta pairs are compared
(:mod:`qmc.analysis.groundstate`), the points are split by the values of other parameters that vary at
fixed L, coupling and beta (``crossing_groups``; e.g. two values of J, or none), and in each group, for
the chosen dimensionless ``quantity``, the crossings of size pairs are located
(:mod:`qmc.analysis.crossings`), extrapolated as ``g*(L) = g_c + a L^(-omega)`` and
``1/nu(L) = 1/nu + b L^(-omega')`` (:mod:`qmc.analysis.extrapolate`) and a data collapse is fitted
(:mod:`qmc.analysis.collapse`) using, per size, the points with ``|g - g_c| L^(1/nu) <= collapse_x_max``
at the starting values (the crossing and 1/nu of the largest size pair).
Here ``L`` is the smaller size of each pair, and both fits share ``omega_fixed`` when too few
pairs exist to fit the exponent.  The crossing analysis and the plots versus the coupling use the
largest beta available at each (L, g).  In a run with ``[domain_wall]`` they (and the extrapolations) use
the reference tasks (``wall = "none"``); the wall energies and profiles come from
:mod:`qmc.analysis.walls`, the emergent-U(1) analysis from :mod:`qmc.analysis.u1`.  A run with a single
size or a single coupling is analysed as far as it goes (no crossings then, with a warning saying why).

With ``extrapolate`` (observable names), every named observable is also extrapolated to L -> infinity at
every point of the other scan parameters (:mod:`qmc.analysis.size_extrapolation`); a failed automatic
detection of the coupling then only skips the crossing analysis (with a warning).
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np

from .collapse import data_collapse
from .crossings import find_crossings
from .errors import AnalysisError
from .extrapolate import Extrapolation, extrapolate
from .fit_quality import crossing_caveats, fit_quality
from .groundstate import GROUND_STATE_OBSERVABLES, beta_doubling_check
from .labels import axis_label, coupling_label, describe, observable_note
from .orders import order_lines, order_plots, wall_report
from .run_text import RunText, run_text
from .scan import curves_for, detect_coupling, group_points, grouping_params, other_varying, scan_points
from .size_extrapolation import as_dicts, extrapolate_sizes, extrapolation_table, format_extrapolations
from .summary import few_bins_warning, group_copies, summarize_task
from .tables import observable_names, table_rows, to_jsonable, write_csv, write_json
from .u1 import u1_analysis
from .vbs import task_value_grid
from .walls import WALL_PARAM, has_walls, size_like

__all__ = ["CROSSING_QUANTITIES", "analyze_run", "format_result"]

CROSSING_QUANTITIES = ("binder_stag", "stiffness_L", "xi_over_L", "binder_vbs")
"""Dimensionless quantities meant for crossing analyses (any stored or derived name is accepted)."""


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name)


def _symbol(name: str) -> str:
    t = describe(name)
    return f"{t.symbol} ({name})" if t else name


def _extrap_dict(ex: Extrapolation) -> dict[str, Any]:
    return asdict(ex)


def _crossing_analysis(
    points: list[dict], quantity: str, coupling: str | None, extra: list[str], opts: dict, warnings: list[str]
) -> tuple[dict | None, dict]:
    """Crossing results (or None) and the objects needed for plotting."""
    if coupling is None:
        warnings.append("no coupling varies between tasks: crossing analysis skipped")
        return None, {}
    curves = curves_for(points, quantity, extra)
    degree = opts["degree"]
    curves = {L: c for L, c in curves.items() if np.isfinite(c[1]).sum() >= degree + 1}
    if len(curves) < 2:
        warnings.append(f"{quantity}: fewer than two sizes with >= {degree + 1} couplings: no crossings")
        return None, {"curves": curves}
    rng = np.random.default_rng(opts["seed"])
    crossings = find_crossings(curves, rng=rng, degree=degree, n_boot=opts["n_boot"])
    good = [c for c in crossings if c.ok]
    for c in crossings:
        if not c.ok:
            warnings.append(f"{quantity}: crossing of L={c.L1:g} and L={c.L2:g} unstable under resampling")
        if c.fit_chi2_dof > 3.0:
            warnings.append(
                f"{quantity}: local polynomial fits near the crossing of L={c.L1:g} and L={c.L2:g} are poor "
                f"(chi2/dof = {c.fit_chi2_dof:.3g}); slopes and 1/nu may be biased: a finer grid of "
                "couplings near the crossing is needed"
            )
    if not good:
        warnings.append(f"{quantity}: no crossing found between the size pairs")
    L1 = [c.L1 for c in good]
    ext = extrapolate(L1, [c.g for c in good], [c.g_err for c in good], omega_fixed=opts["omega_fixed"])
    inv = extrapolate(
        L1, [c.inv_nu for c in good], [c.inv_nu_err for c in good], omega_fixed=opts["omega_fixed"]
    )
    result: dict[str, Any] = {
        "quantity": quantity,
        "pairs": [dict(asdict(c), ok=c.ok) for c in crossings],
        "g_c": dict(_extrap_dict(ext), quality=fit_quality(ext.chi2, ext.dof)),
        "inv_nu": dict(_extrap_dict(inv), quality=fit_quality(inv.chi2, inv.dof)),
        "caveats": crossing_caveats([(c.L1, c.L2) for c in good], ext.omega_fitted, ext.omega),
    }
    for what, fit in (("g_c", ext), ("1/nu", inv)):
        if fit_quality(fit.chi2, fit.dof)["reliable"] is False:
            warnings.append(f"{quantity}: the extrapolation of {what} is unreliable "
                            f"({fit_quality(fit.chi2, fit.dof)['summary']})")
    if np.isfinite(inv.limit) and inv.limit > 0:
        result["nu"] = {"value": 1.0 / inv.limit, "error": inv.limit_err / inv.limit**2}
    plot_data: dict[str, Any] = {"curves": curves, "crossings": good, "ext": ext, "inv": inv}
    if opts["collapse"] and good:
        last = max(good, key=lambda c: c.L1)  # the pair closest to the thermodynamic limit
        g0 = last.g
        inv0 = last.inv_nu if np.isfinite(last.inv_nu) and last.inv_nu > 0 else inv.limit
        nu0 = float(np.clip(1.0 / inv0, 0.2, 5.0)) if np.isfinite(inv0) and inv0 > 0 else 1.0
        try:
            col = data_collapse(curves, g0, nu0, degree=opts["collapse_degree"], x_max=opts["collapse_x_max"])
        except ValueError as exc:
            try:
                col = data_collapse(curves, g0, nu0, degree=opts["collapse_degree"])
            except ValueError:
                col = None
                warnings.append(f"{quantity}: data collapse not possible ({exc})")
        if col is not None and not col.success:
            warnings.append(f"{quantity}: the data-collapse fit did not converge")
        if col is not None:
            result["collapse"] = dict(asdict(col), quality=fit_quality(col.chi2, col.dof))
            plot_data["collapse"] = col
            if result["collapse"]["quality"]["reliable"] is False:
                warnings.append(f"{quantity}: the data collapse is unreliable "
                                f"({result['collapse']['quality']['summary']})")
    return result, plot_data


def _make_plots(
    points: list[dict],
    names: list[str],
    coupling: str | None,
    quantity: str,
    plot_data: dict,
    out: Path,
    extra: list[str],
    hist_of: dict[str, tuple],
    text: RunText,
    caveats: Sequence[str] = (),
    observables: bool = True,
    group: str = "",
) -> list[Path]:
    """The plots of one group of points (file names end in ``_<group>`` when given)."""
    from .plots import plot_collapse, plot_crossing_drift, plot_vbs_histograms, plot_vs_coupling

    pdir = out / "plots"
    title = text.title()
    tail = f"_{group}" if group else ""
    files: list[Path] = []
    xlabel = coupling_label(coupling, text.couplings.get(coupling or "", ""))
    if coupling is not None and observables:
        for name in names:
            curves = curves_for(points, name, extra)
            if curves:
                files += plot_vs_coupling(curves, axis_label(name), xlabel, pdir / f"obs_{_safe(name)}{tail}",
                                          title=title, note=observable_note(name))
    if plot_data.get("crossings"):
        files += plot_crossing_drift(
            plot_data["crossings"],
            plot_data["ext"],
            plot_data["inv"],
            _symbol(quantity),
            pdir / f"crossings_{_safe(quantity)}{tail}",
            coupling=coupling or "g",
            title=title,
            note="Caveats: " + "; ".join(caveats) if caveats else "",
        )
    if plot_data.get("collapse") is not None:
        files += plot_collapse(
            plot_data["curves"], plot_data["collapse"], axis_label(quantity),
            pdir / f"collapse_{_safe(quantity)}{tail}", coupling=coupling or "g", title=title,
            note=observable_note(quantity),
        )
    best: dict[tuple, dict] = {}
    for p in points:
        key = (p["L"], p["g"])
        if WALL_PARAM in p["params"]:
            continue  # pinned edges fix the angle of the order parameter
        if p.get("vbs") and p["vbs"].get("counts") and (key not in best or p["beta"] > best[key]["beta"]):
            best[key] = p
    by_size: dict[float, list] = {}
    for (L, g), p in sorted(best.items(), key=lambda kv: (kv[0][0], kv[0][1] if kv[0][1] is not None else 0)):
        hist, r, grid = hist_of[p["task"]]
        panel = f"L={L:g}" + (f", {coupling}={g:g}" if coupling else "") + f", beta={p['beta']:g}"
        cos4 = p["vbs"].get("cos4")
        if cos4 is not None and np.isfinite(cos4):
            panel += f"\n<cos 4theta> = {cos4:.3f} +- {p['vbs'].get('cos4_err', float('nan')):.2g}"
        by_size.setdefault(L, []).append((panel, hist, r, grid))
    for L, items in by_size.items() if observables else ():
        files += plot_vbs_histograms(items, pdir / f"vbs_L{_safe(f'{L:g}')}{tail}", title=title,
                                     note=observable_note("vbs_cos4"))
    return files


def _extrapolation_plots(extrapolations: list[dict], out: Path, text: RunText) -> list[Path]:
    from .plots import plot_size_extrapolation

    files: list[Path] = []
    for name in dict.fromkeys(r["observable"] for r in extrapolations):
        records = [r for r in extrapolations if r["observable"] == name]
        base = out / "plots" / f"extrapolation_{_safe(name)}"
        files += plot_size_extrapolation(records, axis_label(name), base, title=text.title(),
                                         note=observable_note(name))
    return files


def analyze_run(
    tasks: Iterable[Any],
    out_dir: str | Path,
    quantity: str = "binder_stag",
    plot: bool = False,
    coupling: str | None = None,
    *,
    seed: int = 12345,
    n_boot: int = 200,
    degree: int = 3,
    omega_fixed: float = 1.0,
    collapse: bool = True,
    collapse_degree: int = 3,
    collapse_x_max: float = 2.0,
    extrapolate: Sequence[str] = (),
    powers: Sequence[float] | None = None,
    min_L: float | None = None,
    full_vector: bool = True,
    plot_observables: bool = True,
) -> dict[str, Any]:
    """Analyse all tasks of a run and write tables (and plots); returns a JSON-ready result dict.

    Result keys: ``out_dir, n_tasks, n_points, coupling, sizes, betas, observables, quantity,
    crossings`` (None when not possible, or with several groups; else ``pairs``, ``g_c`` and ``inv_nu`` with
    their fit ``quality``, ``nu``, ``collapse`` with its ``quality``, ``caveats``), ``crossing_groups`` (one
    ``{"group": {name: value}, "crossings": ...}`` per value of the other parameters that vary at fixed L,
    coupling and beta; one group ``{}`` when none do),
    ``extrapolations`` (one dict per fit, see :class:`~qmc.analysis.size_extrapolation.SizeExtrapolation`;
    ``powers``, ``min_L``, ``full_vector`` as in :func:`~qmc.analysis.size_extrapolation.extrapolate_sizes`),
    ``ground_state`` (``pairs_checked``, ``flags``), ``warnings``, ``files``.  NaN values appear as
    None.  ``plot_observables=False`` leaves out the plots versus the coupling and the VBS histograms
    (only the crossing, collapse and extrapolation plots of ``plot``).  Raises
    :class:`~qmc.analysis.errors.AnalysisError` for unusable input.
    """
    task_list = list(tasks)
    for option, value in (("--powers", powers), ("--min-L", min_L)):
        if value is not None and not extrapolate:
            raise AnalysisError("only used with --extrapolate OBS", option)
    if not task_list:
        raise AnalysisError("the run holds no tasks", "analysis")
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise AnalysisError(f"cannot create the output directory ({exc.strerror})", str(out)) from None
    merged = group_copies(task_list)
    summaries = [summarize_task(m) for m in merged]
    warnings = [w for s in summaries for w in s["warnings"]]
    few = few_bins_warning(summaries)
    if few:
        warnings.insert(0, few)
    try:
        coupling = detect_coupling(summaries, coupling)
    except AnalysisError as exc:
        if coupling is not None or not extrapolate:
            raise
        warnings.append(f"crossing analysis skipped: {exc}")
    extra = other_varying(summaries, coupling)
    points = scan_points(summaries, coupling)
    extra_ref = [k for k in extra if k != WALL_PARAM]
    reference = [p for p in points if p["params"].get(WALL_PARAM, "none") == "none"]
    grid_of = {str(t.task_id): task_value_grid(t) for t in task_list}
    hist_of = {m.task_id: (m.vbs_histogram, m.vbs_hist_range, grid_of.get((m.copies or (m.task_id,))[0]))
               for m in merged}
    text = run_text(getattr(task_list[0], "config_text", ""))
    names = observable_names(points)
    if quantity not in names and quantity not in CROSSING_QUANTITIES:
        raise AnalysisError(f"unknown quantity {quantity!r}; available: {', '.join(names)}", "quantity")
    fits, fit_warnings = (extrapolate_sizes(reference, extrapolate, powers, min_L, full_vector) if extrapolate
                          else ([], []))
    warnings += fit_warnings
    extrapolations = as_dicts(fits)

    cols, rows = table_rows(points, coupling, extra)
    files = [write_csv(out / "observables.csv", cols, rows)]
    files.append(
        write_json(out / "observables.json", {"coupling": coupling, "varying": extra, "points": points})
    )
    if fits:
        files.append(write_csv(out / "extrapolation.csv", *extrapolation_table(fits)))

    gs_obs = tuple(GROUND_STATE_OBSERVABLES) + (() if quantity in GROUND_STATE_OBSERVABLES else (quantity,))
    ground = beta_doubling_check(points, gs_obs, extra=extra)
    if ground["flags"]:
        warnings.append(
            f"ground-state check: {len(ground['flags'])} observable(s) differ between beta and 2 beta"
        )

    opts = dict(
        seed=seed,
        n_boot=n_boot,
        degree=degree,
        omega_fixed=omega_fixed,
        collapse=collapse,
        collapse_degree=collapse_degree,
        collapse_x_max=collapse_x_max,
    )
    by = grouping_params(reference, extra_ref)
    groups = group_points(reference, by)  # the crossing analysis and the plots per value of the others
    if by:
        warnings.append(f"coupling {coupling}; {', '.join(by)} also var{'ies' if len(by) == 1 else 'y'}: "
                        f"crossings and plots are made for each of the {len(groups)} value(s) separately "
                        "(--coupling chooses another coupling)")
    crossing_groups = []
    for values, members in groups:
        label = ", ".join(f"{k}={v}" for k, v in values.items())
        if quantity in names:
            said: list[str] = []
            crossings, plot_data = _crossing_analysis(members, quantity, coupling, [], opts, said)
            warnings += [f"{label}: {w}" if label else w for w in said]
        else:
            crossings, plot_data = None, {}
        crossing_groups.append({"group": values, "crossings": crossings})
        if plot:
            files += _make_plots(members, names, coupling, quantity, plot_data, out, [], hist_of, text,
                                 (crossings or {}).get("caveats", ()), plot_observables,
                                 _safe(label.replace(", ", "_")))
    if quantity not in names:
        warnings.append(f"{quantity}: not available in these tasks: crossing analysis skipped")

    walls: dict[str, Any] = {"entries": [], "fits": [], "sizes": []}
    if has_walls(points):
        walls["entries"], walls["fits"], wall_files = wall_report(points, out, warnings)
        walls["sizes"] = size_like(points)
        files += wall_files
    u1 = u1_analysis(points, coupling, extra_ref)
    if plot:
        files += _extrapolation_plots(extrapolations, out, text)
        files += order_plots(points, coupling, walls, u1, hist_of, out)

    result = {
        "out_dir": str(out),
        "n_tasks": len(task_list),
        "n_points": len(points),
        "coupling": coupling,
        "varying": extra,
        "sizes": sorted({p["L"] for p in points}),
        "betas": sorted({p["beta"] for p in points}),
        "observables": names,
        "quantity": quantity,
        "crossings": crossing_groups[0]["crossings"] if len(crossing_groups) == 1 else None,
        "crossing_groups": crossing_groups,
        "extrapolations": extrapolations,
        "domain_wall": walls["entries"],
        "domain_wall_fits": walls["fits"],
        "emergent_u1": u1,
        "ground_state": ground,
        "warnings": warnings,
        "files": [str(f) for f in files] + [str(out / "analysis.json")],
    }
    result = to_jsonable(result)
    write_json(out / "analysis.json", result)
    return result


def _pm(d: dict | None, key: str = "limit", err: str = "limit_err") -> str:
    if not d or d.get(key) is None:
        return "n/a"
    e = d.get(err)
    return f"{d[key]:.6g} +- {e:.2g}" if e is not None else f"{d[key]:.6g}"


def format_result(result: dict[str, Any]) -> str:
    """Short human-readable text of an :func:`analyze_run` result."""
    lines = [
        f"tasks: {result['n_tasks']}  points: {result['n_points']}  coupling: {result['coupling']}",
        f"sizes: {', '.join(f'{L:g}' for L in result['sizes'])}",
    ]
    groups = result.get("crossing_groups") or [{"group": {}, "crossings": result.get("crossings")}]
    for entry in groups:
        cr = entry["crossings"]
        label = ", ".join(f"{k}={v}" for k, v in (entry.get("group") or {}).items())
        at = f" at {label}" if label else ""
        if cr and not cr["pairs"]:
            lines.append(f"crossings of {cr['quantity']}{at}: none found")
        elif cr:
            lines.append(f"crossings of {cr['quantity']}{at}:")
            for p in cr["pairs"]:
                lines.append(
                    f"  L={p['L1']:g},{p['L2']:g}: g*={_pm(p, 'g', 'g_err')}"
                    f"  1/nu={_pm(p, 'inv_nu', 'inv_nu_err')}"
                )
            lines.append(f"  g_c = {_pm(cr['g_c'])}   1/nu = {_pm(cr['inv_nu'])}")
            for key, what in (("g_c", "g_c fit"), ("inv_nu", "1/nu fit")):
                q = (cr.get(key) or {}).get("quality")
                if q and q.get("chi2_dof") is not None:
                    lines.append(f"  {what}: {q['text']}")
            if cr.get("collapse"):
                c = cr["collapse"]
                lines.append(f"  collapse: g_c = {_pm(c, 'g_c', 'g_c_err')}  nu = {_pm(c, 'nu', 'nu_err')}"
                             + (f"  ({c['quality']['text']})" if c.get("quality") else ""))
            lines += [f"  caveat: {text}" for text in cr.get("caveats", [])]
    lines += format_extrapolations(result.get("extrapolations") or [])
    lines += order_lines(result)
    gs = result["ground_state"]
    lines.append(f"ground-state check: {gs['pairs_checked']} beta/2beta pair(s), {len(gs['flags'])} flag(s)")
    lines += [f"warning: {w}" for w in result["warnings"]]
    lines.append(f"written: {result['out_dir']}")
    return "\n".join(lines)

