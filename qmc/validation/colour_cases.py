"""Validation case of the SU(N) colour kind: Neel order for N <= 4, valence-bond order for N >= 5.

The SU(N) Heisenberg model on the square lattice, H = -J sum_<ij> P_ij with the SU(N) singlet projector
(fundamental representation on sublattice A, conjugate on B), orders antiferromagnetically (Neel) for N <= 4
and forms a columnar valence-bond solid for N >= 5 (:data:`~qmc.validation.references.SUN_NEEL_VBS_SOURCE`).
:func:`sun_order_case` shows it from the trends of the two squared order parameters times L^2 over L x L
lattices at beta = L: Y_Neel(L) = L^2 m_stag2 and Y_VBS(L) = L^2 (vbs_x2 + vbs_y2).  Between L and 2L, Y grows
by the factor 4 with long-range order, 2^(1 - eta) at a critical point, and 1 when the correlations are
short-ranged (the structure factor saturates).  Checks, for the largest pair of sizes (L, 2L):

* the order of the phase: growth factor above 1 by at least 4 combined error bars;
* the other order: growth factor not above 1 by more than 4 error bars (short-ranged correlations on a torus
  approach their limit from above, as the periodic images add to the small lattices' structure factor:
  common practice, no source).

Errors: binning analysis of each run (:func:`qmc.analysis.error_estimate`), propagated in quadrature (the runs
are independent).  The growth factors of all consecutive sizes are listed in the note.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from qmc.analysis import error_estimate
from qmc.models import ProjectorTerm

from .case import Case, merged, sim_jobs
from .checks import Check
from .jobs import ModelSpec
from .references import SUN_NEEL_VBS_SOURCE, short_ranged

__all__ = ["sun_order_case"]


def sun_order_case(N: int, sizes: Sequence[int], *, warmup: int = 5000, measure: int = 100_000,
                   bins: int = 200, measure_for: Mapping[int, int] | None = None,
                   max_seconds: float | None = None) -> Case:
    """The case "SU(N) order" (see module docstring); ``sizes`` must contain L and 2L for its largest L."""
    sizes = sorted(int(L) for L in sizes)
    L2 = sizes[-1]
    L1 = L2 // 2
    if L1 not in sizes:
        raise ValueError(f"sun_order_case: the sizes must contain {L1} and {L2}")
    jobs = {}
    for L in sizes:
        spec = ModelSpec("square", (L, L), (ProjectorTerm("nn", 1.0),), colours=N)
        jobs[L] = sim_jobs(f"su{N}/L={L}/beta={L}", spec, float(L), warmup,
                           (measure_for or {}).get(L, measure), bins, L * L, 1.6, max_seconds)
    neel = N <= 4
    ref = short_ranged(SUN_NEEL_VBS_SOURCE)
    name = f"SU({N}) {'Neel' if neel else 'VBS'} order"

    def evaluate(results: Mapping[str, Any]) -> list[Check]:
        y: dict[str, list[tuple[float, float]]] = {"Neel": [], "VBS": []}
        for L in sizes:
            b = merged(results, jobs[L]).bins
            m = error_estimate(b["m_stag2"])
            vx, vy = error_estimate(b["vbs_x2"]), error_estimate(b["vbs_y2"])
            y["Neel"].append((L * L * m.mean, L * L * m.error))
            y["VBS"].append((L * L * (vx.mean + vy.mean), L * L * math.hypot(vx.error, vy.error)))
        out = []
        for order, series in y.items():
            (a, da), (b, db) = series[sizes.index(L1)], series[sizes.index(L2)]
            g = b / a
            dg = g * math.hypot(da / a, db / b)
            trend = ", ".join(f"{v:.3g}" for v, _ in series)
            present = (order == "Neel") == neel
            expected = "Neel order for N <= 4" if neel else "VBS order for N >= 5"
            note = (f"SU({N}) {order}: Y(L) = L^2 {'m_stag2' if order == 'Neel' else '(vbs_x2 + vbs_y2)'} at "
                    f"beta = L for L = {', '.join(map(str, sizes))}: {trend}; value = Y({L2})/Y({L1}) (4: "
                    f"long-range order, 1: short-ranged); {expected}")
            label = f"SU({N}) {order} growth Y({L2})/Y({L1})"
            out.append(Check(label, g, dg, ref, 0.0, note, side=1 if present else -1))
        return out

    return Case(name, sum(jobs.values(), ()), evaluate, ref)
