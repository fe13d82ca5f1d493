"""What the observables are, in words: symbol, definition, units and the values that tell the phases apart.

One place for the text of plot axes, plot notes and the HTML report.  Energies and stiffnesses are in the
units of the Hamiltonian's couplings (as written in the configuration), temperatures with k_B = 1, lengths
in lattice spacings; per-site quantities are divided by the number of sites N.  M_s^z = sum_i phi_i S^z_i
with phi_i = +-1 on the two sublattices.  The formulas are those of :mod:`qmc.chain.observables` and
:mod:`qmc.analysis.derived`.

Limits of the ratios (derived here):

* ``binder_stag`` = <m_z^4>/<m_z^2>^2 of the z component of the staggered magnetisation.  Neel order that
  rotates freely over the sphere (a finite spin-rotation-invariant system) gives the z component of a
  fixed-length random vector: <z^4>/<z^2>^2 = (1/5)/(1/3)^2 = 9/5.  No order: m_z is Gaussian and the ratio
  is 3 (the fourth moment of a Gaussian is three times its variance squared).
* ``binder_vbs`` = <|D|^4>/<|D|^2>^2 of the two-component dimer order parameter D = (D_x, D_y).  Order
  (fixed |D|): 1.  No order: D is a two-dimensional Gaussian, |D|^2 is exponentially distributed, and the
  ratio is 2.
* ``vbs_cos4`` = <cos 4 theta>: +1 for columnar order (D along an axis), -1 for plaquette-like order (D
  along a diagonal), 0 for a distribution without a preferred angle (emergent U(1) symmetry).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["OBSERVABLE_TEXT", "ObservableText", "axis_label", "describe", "observable_note",
           "coupling_label"]

COUPLING_UNITS = "units of the couplings"


@dataclass(frozen=True)
class ObservableText:
    """``symbol`` (e.g. ``rho_s L``), its ``definition`` in formulas, ``units``, ``meaning`` in words, and
    ``note``: how to read it (limits in the phases, crossings)."""

    symbol: str
    definition: str
    units: str
    meaning: str
    note: str = ""


_CROSS = "Curves of different L cross near a continuous transition."

OBSERVABLE_TEXT: dict[str, ObservableText] = {
    "energy": ObservableText("E/N", "<H>/N", COUPLING_UNITS, "energy per site, constants of H included"),
    "n_ops": ObservableText("<n>", "mean number of operators in the SSE string", "dimensionless",
                            "expansion order: beta times the energy counted from the constant that makes "
                            "every matrix element of -H non-negative; grows like beta N"),
    "n_ops_sq": ObservableText("<n^2>", "second moment of the SSE expansion order", "dimensionless",
                               "enters the specific heat"),
    "chi_uniform": ObservableText("chi_u", "beta <(S^z_tot)^2>/N", "1/coupling", "uniform susceptibility",
                                  "Vanishes exponentially at low T when the spectrum has a gap."),
    "chi_stag": ObservableText("chi_s", "(1/N) int_0^beta <M_s^z(tau) M_s^z(0)> dtau", "1/coupling",
                               "staggered susceptibility per site"),
    "m_stag2": ObservableText("<m_z^2>", "<(M_s^z/N)^2>", "dimensionless",
                              "squared staggered magnetisation, z component",
                              "Stays finite as L grows in a Neel phase (full vector m_s^2 = 3 <m_z^2> for "
                              "L -> infinity), falls to 0 like 1/N in a disordered phase."),
    "m_stag4": ObservableText("<m_z^4>", "<(M_s^z/N)^4>", "dimensionless",
                              "fourth moment of the staggered magnetisation"),
    "s_q": ObservableText("S(Q)", "N <m_z^2> = <(M_s^z)^2>/N", "dimensionless",
                          "static structure factor at the ordering wavevector Q",
                          "Grows like N in a Neel phase."),
    "s_q_shifted": ObservableText("S(Q+dq)", "structure factor at Q + 2 pi/L along a lattice direction",
                                  "dimensionless", "enters the second-moment correlation length"),
    "stiffness": ObservableText("rho_s", "<w_a^2>/(beta N), averaged over equivalent directions a",
                                COUPLING_UNITS, "spin stiffness from the winding numbers w_a",
                                "Finite in a Neel phase, falls to 0 in a disordered (gapped) phase."),
    "stiffness_L": ObservableText("rho_s L", "L <w_a^2>/(beta N)", COUPLING_UNITS + ", lattice spacing 1",
                                  "spin stiffness times the linear size",
                                  "Grows like L in a Neel phase, falls to 0 in a disordered phase; scale "
                                  "invariant at a critical point with dynamic exponent z = 1. " + _CROSS),
    "vbs_x2": ObservableText("<D_x^2>", "D_x = (1/N) sum_r (-1)^x S^z_r S^z_(r+x)", "dimensionless",
                             "squared columnar dimer (valence-bond) order parameter along x",
                             "Stays finite as L grows in a valence-bond solid."),
    "vbs_y2": ObservableText("<D_y^2>", "D_y = (1/N) sum_r (-1)^y S^z_r S^z_(r+y)", "dimensionless",
                             "squared columnar dimer (valence-bond) order parameter along y",
                             "Stays finite as L grows in a valence-bond solid."),
    "vbs4": ObservableText("<|D|^4>", "<(D_x^2 + D_y^2)^2>", "dimensionless",
                           "fourth moment of the dimer order parameter"),
    "vbs_cos4": ObservableText("<cos 4theta>", "D = |D| (cos theta, sin theta)", "dimensionless",
                               "angular anisotropy of the dimer order parameter",
                               "+1 columnar, -1 plaquette-like, 0 without a preferred angle "
                               "(emergent U(1))."),
    "specific_heat": ObservableText("C/N", "(<n^2> - <n>^2 - <n>)/N", "k_B = 1",
                                    "specific heat per site"),
    "binder_stag": ObservableText("R_m", "<m_z^4>/<m_z^2>^2", "dimensionless",
                                  "Binder ratio of the staggered magnetisation",
                                  "9/5 with Neel order, 3 without order. " + _CROSS),
    "binder_vbs": ObservableText("R_D", "<|D|^4>/<|D|^2>^2", "dimensionless",
                                 "Binder ratio of the dimer order parameter",
                                 "1 with valence-bond order, 2 without order. " + _CROSS),
    "corr_length": ObservableText("xi", "(L/2pi) sqrt(S(Q)/S(Q+2pi/L) - 1)", "lattice spacings",
                                  "second-moment correlation length of the staggered order"),
    "xi_over_L": ObservableText("xi/L", "second-moment correlation length over the linear size",
                                "dimensionless", "correlation length in units of the system size",
                                "Grows with L in a Neel phase, falls to 0 in a disordered phase. " + _CROSS),
}
"""The observables with a fixed name."""


def describe(name: str) -> ObservableText | None:
    """The text of observable ``name`` (also ``stiffness/<dir>`` and ``term_energy/<group>``), else None."""
    if name in OBSERVABLE_TEXT:
        return OBSERVABLE_TEXT[name]
    head, _, part = name.partition("/")
    if head == "stiffness" and part:
        return ObservableText(f"rho_{part}", f"<w_{part}^2>/(beta N)", COUPLING_UNITS,
                              f"spin stiffness along direction {part}")
    if head == "term_energy" and part:
        return ObservableText(f"E_{part}/N", f"<H_{part}>/N", COUPLING_UNITS,
                              f"energy per site of the term group {part}")
    return None


def axis_label(name: str) -> str:
    """``symbol = definition [units]`` of observable ``name`` for a plot axis; unknown names as they are."""
    t = describe(name)
    if t is None:
        return name
    return f"{t.symbol} = {t.definition}  [{t.units}]"


def observable_note(name: str) -> str:
    """One or two sentences: what ``name`` measures and how to read it (empty for unknown names)."""
    t = describe(name)
    if t is None:
        return ""
    return f"{name}: {t.meaning[0].upper()}{t.meaning[1:]}. {t.note}".strip()


def coupling_label(name: str | None, meaning: str = "") -> str:
    """Axis label of the scanned coupling: its name as in the configuration and what it multiplies."""
    if not name:
        return "coupling"
    return f"{name}  ({meaning})" if meaning else name
