"""Analysis layer: error analysis of Monte Carlo bins and finite-size scaling of a run.

Modules (one concept each): ``binning`` (binning analysis, tau_int), ``jackknife`` (leave-one-out
estimates), ``chains`` (combining independent copies), ``derived`` (derived observables by jackknife),
``tasks`` (task records), ``summary`` (per-task summaries, merging copies), ``scan`` (coupling
detection, curves per size), ``groundstate`` (beta-doubling check), ``crossings`` (crossing points,
1/nu from slopes), ``extrapolate`` (L -> infinity fits of crossings with a fitted exponent),
``powerfit`` (the weighted fit y(L) = c_0 + sum_k c_k L^-p_k with fixed powers), ``size_extrapolation``
(observables of a run extrapolated to L -> infinity per scan point), ``collapse`` (data collapse), ``vbs``
(VBS histogram anisotropy, allowed-value grid), ``powerlaw`` (fits A L^-a with a fitted exponent a),
``walls`` and ``wall_plots`` (domain-wall energies kappa(L) and profiles), ``u1`` (<cos 4 theta> versus L,
histogram panels), ``orders`` (their part of the report), ``tables`` (CSV/JSON), ``labels`` (symbol,
definition, units, limits of the observables), ``run_text`` (model, lattice, beta rule in words),
``fit_quality`` (chi^2/dof, p-value, caveats of crossing fits), ``plots`` (matplotlib, Agg), ``report``
(``analyze_run``), ``html_report`` (the page of ``qmc report``), ``tidy`` (one row per task and
observable).  This layer never imports the engine or storage; it reads TaskData-like objects.
"""

from .binning import BinningLevels, ErrorEstimate, binning_levels, error_estimate, halves_consistent, rebin
from .chains import concatenate_chains, merge_bin_dicts, weighted_mean
from .collapse import Collapse, data_collapse, scaling_variable
from .crossings import Crossing, find_crossing, find_crossings, inverse_nu, size_pairs
from .derived import (
    DerivedEstimate,
    binder_stag,
    binder_vbs,
    corr_length,
    derived_estimates,
    derived_observables,
    specific_heat,
    stiffness_L,
    xi_over_L,
)
from .errors import AnalysisError
from .extrapolate import Extrapolation, extrapolate
from .groundstate import beta_doubling_check
from .jackknife import JackknifeResult, jackknife, jackknife_pseudovalues
from .plots import plot_vbs_histogram
from .powerfit import PowerFit, drop_smallest_shift, fit_powers
from .powerlaw import PowerLaw, fit_power_law
from .report import CROSSING_QUANTITIES, analyze_run, format_result
from .scan import detect_coupling
from .size_extrapolation import SizeExtrapolation, extrapolate_sizes
from .summary import group_copies, summarize_task
from .tasks import AnalysisTask
from .u1 import u1_analysis
from .vbs import cos4_from_histogram, vbs_anisotropy
from .walls import kappa_fits, wall_energies

__all__ = [
    "CROSSING_QUANTITIES",
    "AnalysisError",
    "BinningLevels",
    "Collapse",
    "Crossing",
    "DerivedEstimate",
    "ErrorEstimate",
    "Extrapolation",
    "JackknifeResult",
    "PowerFit",
    "PowerLaw",
    "SizeExtrapolation",
    "AnalysisTask",
    "analyze_run",
    "beta_doubling_check",
    "binder_stag",
    "binder_vbs",
    "binning_levels",
    "concatenate_chains",
    "corr_length",
    "cos4_from_histogram",
    "data_collapse",
    "derived_estimates",
    "derived_observables",
    "detect_coupling",
    "drop_smallest_shift",
    "error_estimate",
    "extrapolate",
    "extrapolate_sizes",
    "find_crossing",
    "find_crossings",
    "fit_power_law",
    "fit_powers",
    "format_result",
    "group_copies",
    "halves_consistent",
    "inverse_nu",
    "jackknife",
    "jackknife_pseudovalues",
    "kappa_fits",
    "merge_bin_dicts",
    "plot_vbs_histogram",
    "rebin",
    "scaling_variable",
    "size_pairs",
    "specific_heat",
    "stiffness_L",
    "summarize_task",
    "u1_analysis",
    "vbs_anisotropy",
    "wall_energies",
    "weighted_mean",
    "xi_over_L",
]
