"""Plot labels of the observables: the name, what it measures and its units, readable without the source.

Energies and stiffnesses are in the units of the Hamiltonian's couplings, temperatures with k_B = 1,
lengths in lattice spacings; per-site quantities are divided by the number of sites N.  The formulas are
those of :mod:`qmc.chain.observables` and :mod:`qmc.analysis.derived`.
"""

from __future__ import annotations

__all__ = ["OBSERVABLE_LABELS", "axis_label"]

OBSERVABLE_LABELS: dict[str, str] = {
    "energy": "energy per site <H>/N (units of the couplings)",
    "n_ops": "<n>, mean SSE expansion order",
    "n_ops_sq": "<n^2>, second moment of the SSE expansion order",
    "chi_uniform": "uniform susceptibility beta <(S^z_tot)^2>/N (1/coupling)",
    "chi_stag": "staggered susceptibility per site (1/coupling)",
    "m_stag2": "m_stag2 = <(M_s^z/N)^2>, squared staggered magnetisation (z component)",
    "m_stag4": "m_stag4 = <(M_s^z/N)^4>",
    "s_q": "structure factor S(Q) = N m_stag2 at the ordering wavevector Q",
    "stiffness": "spin stiffness rho_s (units of the couplings)",
    "stiffness_L": "rho_s L (units of the couplings)",
    "vbs_x2": "<D_x^2>, squared valence-bond order parameter (x)",
    "vbs_y2": "<D_y^2>, squared valence-bond order parameter (y)",
    "vbs4": "<|D|^4>, valence-bond order parameter",
    "vbs_cos4": "<cos 4 theta> of the valence-bond order parameter",
    "specific_heat": "specific heat per site C/N (k_B = 1)",
    "binder_stag": "Binder ratio <m_s^4>/<m_s^2>^2 (dimensionless)",
    "binder_vbs": "valence-bond Binder ratio <|D|^4>/<|D|^2>^2 (dimensionless)",
    "corr_length": "correlation length xi (second moment, lattice spacings)",
    "xi_over_L": "xi / L (dimensionless)",
}
"""Axis labels of the observables with a fixed name."""

_PREFIXES = {
    "stiffness/": "spin stiffness rho_{} along direction {} (units of the couplings)",
    "term_energy/": "energy per site of the term group {} (units of the couplings)",
}


def axis_label(name: str) -> str:
    """Label of the observable ``name`` for a plot axis; unknown names are returned as they are."""
    if name in OBSERVABLE_LABELS:
        return OBSERVABLE_LABELS[name]
    for prefix, text in _PREFIXES.items():
        if name.startswith(prefix):
            part = name[len(prefix):]
            return text.format(*([part] * text.count("{}")))
    return name
