"""The canonical benchmark cases shared by the benchmark scripts (square Heisenberg and J-Q2, L x L).

``square``: H = J sum_<ij> S_i.S_j with J = 1.  ``jq2``: the same plus -Q sum P_ij P_kl over the two parallel
bonds of every 2x2 plaquette (both orientations), J = 0.05, Q = 1.  Defaults: L = 32, beta = 32.
SU(N) cases (``COLOUR_CASES``, run by the colour vertex kind; benchmarks/throughput.py only, the C reference
is S = 1/2): ``jq2_su3``, ``jq2_su4``: H = -J sum_<ij> P_ij - Q sum P_ij P_kl with SU(3) resp. SU(4)
singlet projectors, J = 0.05, Q = 1; ``jq2_colour2``: the ``jq2`` model run by the colour kind with N = 2,
which isolates the cost of the kind from the change of the model.  Directed-loop cases (``XXZ_CASES``):
``xxz`` is H = J sum_<ij> (S^x S^x + S^y S^y + delta S^z S^z) - h sum_i S^z_i at delta = 1, h = 0 (the square
case through directed loops), ``xxz-field`` at delta = 0.5, h = 1.
"""

from __future__ import annotations

import argparse
import dataclasses

import numpy as np
from qmc.models import (
    FieldTerm,
    HeisenbergTerm,
    ProjectorProductTerm,
    ProjectorTerm,
    XXZTerm,
    build_lattice,
    compile_model,
)
from qmc.models.compiled import KIND_COLOUR, CompiledModel

__all__ = ["CASES", "COLOUR_CASES", "XXZ_CASES", "case_model", "colour_case_model", "xxz_model",
           "any_case_model", "add_case_arguments", "selected_cases"]

CASES = {"square": (1.0, 0.0), "jq2": (0.05, 1.0)}  # (J, Q)
COLOUR_CASES = {"jq2_su3": (0.05, 1.0, 3), "jq2_su4": (0.05, 1.0, 4),
                "jq2_colour2": (0.05, 1.0, 2)}  # (J, Q, N)
XXZ_CASES = {"xxz": (1.0, 0.0), "xxz-field": (0.5, 1.0)}  # (delta, h), J = 1


def case_model(L: int, J: float, Q: float) -> CompiledModel:
    """The periodic L x L model with Heisenberg coupling J and, if Q > 0, the J-Q2 term."""
    terms = [HeisenbergTerm(bonds="nn", coupling=J)]
    if Q > 0:
        terms.append(ProjectorProductTerm(shape="plaquette-pair", coupling=Q))
    return compile_model(build_lattice("square", (L, L)), terms)


def colour_case_model(L: int, J: float, Q: float, N: int) -> CompiledModel:
    """The periodic L x L SU(N) J-Q2 model (projector J term) run by the colour kind; for N = 2 the S = 1/2
    J-Q2 model of :func:`case_model` with its groups switched to the colour kind."""
    if N == 2:
        model = case_model(L, J, Q)
        return dataclasses.replace(model, group_kind=np.full(len(model.group_names), KIND_COLOUR, np.int8))
    terms = [ProjectorTerm("nn", J), ProjectorProductTerm("plaquette-pair", Q)]
    return compile_model(build_lattice("square", (L, L)), terms, colours=N)


def xxz_model(L: int, delta: float, h: float) -> CompiledModel:
    """The periodic L x L XXZ model (J = 1) with a uniform field h (directed loops)."""
    terms = [XXZTerm(bonds="nn", coupling=1.0, delta=delta)] + ([FieldTerm(h)] if h else [])
    return compile_model(build_lattice("square", (L, L)), terms)


def any_case_model(case: str, L: int) -> CompiledModel:
    """The model of a case of any of the three tables."""
    if case in COLOUR_CASES:
        return colour_case_model(L, *COLOUR_CASES[case])
    return case_model(L, *CASES[case]) if case in CASES else xxz_model(L, *XXZ_CASES[case])


def _extra(colour_cases: bool, directed: bool) -> list[str]:
    return [*(COLOUR_CASES if colour_cases else ()), *(XXZ_CASES if directed else ())]


def add_case_arguments(p: argparse.ArgumentParser, colour_cases: bool = False,
                       directed: bool = False) -> None:
    """--case, --L, --beta, --steps, --warmup with the canonical defaults (and the SU(N) and directed-loop
    cases if asked)."""
    p.add_argument("--case", default="all", choices=[*CASES, *_extra(colour_cases, directed), "all"])
    p.add_argument("--L", type=int, default=32)
    p.add_argument("--beta", type=float, default=32.0)
    p.add_argument("--steps", type=int, default=200)
    p.add_argument("--warmup", type=int, default=300)


def selected_cases(case: str, colour_cases: bool = False, directed: bool = False) -> list[str]:
    return [*CASES, *_extra(colour_cases, directed)] if case == "all" else [case]
