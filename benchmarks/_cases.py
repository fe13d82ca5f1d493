"""The canonical benchmark cases shared by the benchmark scripts (square Heisenberg and J-Q2, L x L).

``square``: H = J sum_<ij> S_i.S_j with J = 1.  ``jq2``: the same plus -Q sum P_ij P_kl over the two parallel
bonds of every 2x2 plaquette (both orientations), J = 0.05, Q = 1.  Directed-loop cases (``XXZ_CASES``):
``xxz`` is H = J sum_<ij> (S^x S^x + S^y S^y + delta S^z S^z) - h sum_i S^z_i at delta = 1, h = 0 (the square
case through directed loops), ``xxz-field`` at delta = 0.5, h = 1.  Defaults: L = 32, beta = 32.
"""

from __future__ import annotations

import argparse

from qmc.models import FieldTerm, HeisenbergTerm, ProjectorProductTerm, XXZTerm, build_lattice, compile_model
from qmc.models.compiled import CompiledModel

__all__ = ["CASES", "XXZ_CASES", "case_model", "xxz_model", "any_case_model", "add_case_arguments",
           "selected_cases"]

CASES = {"square": (1.0, 0.0), "jq2": (0.05, 1.0)}  # (J, Q)
XXZ_CASES = {"xxz": (1.0, 0.0), "xxz-field": (0.5, 1.0)}  # (delta, h), J = 1


def case_model(L: int, J: float, Q: float) -> CompiledModel:
    """The periodic L x L model with Heisenberg coupling J and, if Q > 0, the J-Q2 term."""
    terms = [HeisenbergTerm(bonds="nn", coupling=J)]
    if Q > 0:
        terms.append(ProjectorProductTerm(shape="plaquette-pair", coupling=Q))
    return compile_model(build_lattice("square", (L, L)), terms)


def xxz_model(L: int, delta: float, h: float) -> CompiledModel:
    """The periodic L x L XXZ model (J = 1) with a uniform field h (directed loops)."""
    terms = [XXZTerm(bonds="nn", coupling=1.0, delta=delta)] + ([FieldTerm(h)] if h else [])
    return compile_model(build_lattice("square", (L, L)), terms)


def any_case_model(case: str, L: int) -> CompiledModel:
    """The model of a case of either table."""
    return case_model(L, *CASES[case]) if case in CASES else xxz_model(L, *XXZ_CASES[case])


def add_case_arguments(p: argparse.ArgumentParser, directed: bool = False) -> None:
    """--case, --L, --beta, --steps, --warmup with the canonical defaults."""
    p.add_argument("--case", default="all", choices=[*CASES, *(XXZ_CASES if directed else ()), "all"])
    p.add_argument("--L", type=int, default=32)
    p.add_argument("--beta", type=float, default=32.0)
    p.add_argument("--steps", type=int, default=200)
    p.add_argument("--warmup", type=int, default=300)


def selected_cases(case: str, directed: bool = False) -> list[str]:
    return [*CASES, *(XXZ_CASES if directed else ())] if case == "all" else [case]
