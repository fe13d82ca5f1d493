"""The canonical benchmark cases shared by the benchmark scripts (square Heisenberg and J-Q2, L x L).

``square``: H = J sum_<ij> S_i.S_j with J = 1.  ``jq2``: the same plus -Q sum P_ij P_kl over the two parallel
bonds of every 2x2 plaquette (both orientations), J = 0.05, Q = 1.  Defaults: L = 32, beta = 32.
"""

from __future__ import annotations

import argparse

from qmc.models import HeisenbergTerm, ProjectorProductTerm, build_lattice, compile_model
from qmc.models.compiled import CompiledModel

__all__ = ["CASES", "case_model", "add_case_arguments", "selected_cases"]

CASES = {"square": (1.0, 0.0), "jq2": (0.05, 1.0)}  # (J, Q)


def case_model(L: int, J: float, Q: float) -> CompiledModel:
    """The periodic L x L model with Heisenberg coupling J and, if Q > 0, the J-Q2 term."""
    terms = [HeisenbergTerm(bonds="nn", coupling=J)]
    if Q > 0:
        terms.append(ProjectorProductTerm(shape="plaquette-pair", coupling=Q))
    return compile_model(build_lattice("square", (L, L)), terms)


def add_case_arguments(p: argparse.ArgumentParser) -> None:
    """--case, --L, --beta, --steps, --warmup with the canonical defaults."""
    p.add_argument("--case", default="all", choices=[*CASES, "all"])
    p.add_argument("--L", type=int, default=32)
    p.add_argument("--beta", type=float, default=32.0)
    p.add_argument("--steps", type=int, default=200)
    p.add_argument("--warmup", type=int, default=300)


def selected_cases(case: str) -> list[str]:
    return list(CASES) if case == "all" else [case]
