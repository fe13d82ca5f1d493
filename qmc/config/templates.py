"""Commented example configurations printed by ``qmc new KIND``.

Every template is a complete configuration (schema: :mod:`qmc.config.parser`) whose comments explain
each key; all of them load and validate as they are.  The scenarios and run names are invented demos.
Where a comment says where a transition is expected, the value is quoted from memory and only sets the
scan window of the demo.
"""

from __future__ import annotations

from qmc.errors import UserError, did_you_mean

__all__ = ["TEMPLATES", "template"]


def _run(name: str, seed: int, scenario: str) -> str:
    return f'''\
[run]
# name: free text shown in logs and reports.
name = "{name}"
# output: the run directory (created by `qmc run`), relative to this file.  Task files, the index and the
# log go there; a directory made with a different configuration is refused.
output = "runs/{name}"
# seed: master random seed (integer >= 0).  Each task draws its own stream from this seed and its own
# parameter values, so results do not depend on how many processes run the tasks or in which order.
seed = {seed}
# description: optional free text.
description = "{scenario}"
'''


def _sampling(warmup: int, measure: int, bins: int, exchange: str | None = None) -> str:
    if exchange:
        ex = (f'# exchange: optional replica exchange along the scanned coupling "{exchange}" (tasks that\n'
              f"# differ only in {exchange} swap configurations now and then).  Uncomment to use it.\n"
              f'# [exchange]\n# along = "{exchange}"\n')
    else:
        ex = ("# exchange: optional; the scan name of a coupling to run replica exchange along (it needs at\n"
              '# least two values), e.g. exchange = "g".  Left out here.\n')
    return f'''\
[sampling]
# One Monte Carlo step = one diagonal update over the whole operator string + one full loop update.
# warmup_steps: steps discarded while the simulation equilibrates.
warmup_steps = {warmup}
# measure_steps: steps that are measured; they are averaged in bins.
measure_steps = {measure}
# bins: number of bins (>= 2, must divide measure_steps); error bars come from the bin averages.
bins = {bins}
# copies: independent copies of every parameter point (different random streams).
copies = 1
# checkpoint_seconds: how often a running task saves its full state, so an interrupted run resumes.
checkpoint_seconds = 300
{ex}'''


_SCAN_HELP = '''\
# Every entry is a number (fixed), a list of values, a range {start, stop, num} (num evenly spaced
# values, both ends included), or a text expression of other entries such as "2*L", "L/2" or "0.5*g".
# Every combination of the listed values is one task (times sampling.copies).  beta (the inverse
# temperature, in inverse energy units) is required.  Every entry must be used somewhere.
'''

_TERMS_HELP = '''\
# The Hamiltonian is the sum of the [[terms]] blocks (numbered terms[0], terms[1], ... in messages).
#   type = "heisenberg":        +J S_i.S_j on every bond of the bond class `bonds`; coupling = J >= 0.
#   type = "projector-product": -Q prod (1/4 - S_i.S_j) over the bonds of `shape`, placed at every unit
#                               cell; coupling = Q >= 0.  symmetrize = true (default) also places the
#                               shape rotated by 90 degrees.
# A coupling is a number or a scan name (or an expression such as "2*g").  Negative couplings have a
# sign problem and are refused.  name = "..." optionally labels a term's energy column.
'''

_LATTICE_HELP = '''\
# kind: chain | square | bilayer | honeycomb | cubic (or "explicit" with sites = N, bonds = [[i, j], ...]).
# size: number of unit cells along each direction; numbers or scan names.
# boundary: "periodic" (default) or "open".  Periodic chain/square/bilayer/cubic lattices need even sizes.
'''


def _compose(title: str, run: str, lattice: str, terms: str, scan: str, sampling: str) -> str:
    return "\n".join([title, run, "[lattice]\n" + _LATTICE_HELP + lattice, _TERMS_HELP + terms,
                      "[scan]\n" + _SCAN_HELP + scan, sampling])


TEMPLATES: dict[str, str] = {
    "heisenberg": _compose(
        "# Square-lattice Heisenberg antiferromagnet, H = J sum_<ij> S_i.S_j with J = 1.\n"
        "# Demo scenario: a student checks how the staggered magnetization and the spin stiffness drift\n"
        "# with system size at low temperature (beta grows with L so that T -> 0 as L grows).\n",
        _run("neel-drift", 20240611, "finite-size drift of the Neel order"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n# bonds: "nn" = all nearest-neighbour bonds (also "x", "y").\n'
        'bonds = "nn"\ncoupling = 1.0\n',
        "L = [4, 8, 12, 16]\n# beta: inverse temperature; here twice the linear size.\nbeta = \"2*L\"\n",
        _sampling(2000, 20000, 100),
    ),
    "bilayer": _compose(
        "# Square-lattice bilayer: H = sum_intra S_i.S_j + g sum_rungs S_i.S_j.\n"
        "# Demo scenario: a group locates the point where the rungs win and the two layers lock into\n"
        "# singlets; the crossing of stiffness*L between sizes marks it (expected near g = 2.52, from\n"
        "# memory).\n",
        _run("rung-singlet-hunt", 7321, "locate the bilayer rung-singlet transition"),
        'kind = "bilayer"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n# bonds: "intra" = in-plane bonds of both layers.\n'
        'bonds = "intra"\ncoupling = 1.0\n\n'
        '[[terms]]\ntype = "heisenberg"\n# bonds: "inter" = the rungs joining the two layers.\n'
        'bonds = "inter"\ncoupling = "g"\n',
        "L = [8, 12, 16]\n# g: rung coupling, 11 values from 2.40 to 2.60.\n"
        "g = { start = 2.40, stop = 2.60, num = 11 }\n"
        "# beta: inverse temperature equal to the linear size.\nbeta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="g"),
    ),
    "columnar-dimer": _compose(
        "# Columnar dimerized square lattice: H = g sum_strong S_i.S_j + sum_weak S_i.S_j, the strong\n"
        "# bonds forming columns of parallel dimers (x-bonds starting at even x).\n"
        "# Demo scenario: a class project compares the dimerized lattice with the bilayer and looks for\n"
        "# the dimer-singlet transition (expected near g = 1.91, from memory).\n",
        _run("dimer-columns", 515, "columnar dimer transition scan"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n'
        '# bonds: "columnar-strong" = the dimer bonds of the columnar pattern.\n'
        'bonds = "columnar-strong"\ncoupling = "g"\n\n'
        '[[terms]]\ntype = "heisenberg"\n# bonds: "columnar-weak" = every other nearest-neighbour bond.\n'
        'bonds = "columnar-weak"\ncoupling = 1.0\n',
        "L = [8, 12, 16]\n# g: strong-bond coupling, 7 values from 1.85 to 1.97.\n"
        "g = { start = 1.85, stop = 1.97, num = 7 }\nbeta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="g"),
    ),
    "jq2": _compose(
        "# J-Q2 model: H = J sum_<ij> S_i.S_j - Q sum P_ij P_kl, P = 1/4 - S_i.S_j, the projector pairs\n"
        "# sitting on the two parallel bonds of every 2x2 plaquette (both orientations), Q = 1.\n"
        "# Demo scenario: a reading group watches Neel order give way to columnar valence-bond order as\n"
        "# J/Q decreases (the change is expected near J/Q = 0.045, from memory).\n",
        _run("plaquette-pairs", 99, "Neel to valence-bond crossover in the J-Q2 model"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n\n'
        '[[terms]]\ntype = "projector-product"\n'
        '# shape: "plaquette-pair" = two parallel bonds on a 2x2 plaquette; a shape can also be given as\n'
        "# a list of bonds [[[dx, dy], [dx, dy]], ...] of unit-cell offsets.\n"
        'shape = "plaquette-pair"\n# symmetrize: also place the shape rotated by 90 degrees.\n'
        "symmetrize = true\ncoupling = 1.0\n",
        "L = [8, 12, 16]\n# J: Heisenberg coupling in units of Q, 7 values from 0.03 to 0.06.\n"
        "J = { start = 0.03, stop = 0.06, num = 7 }\nbeta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="J"),
    ),
    "jq3": _compose(
        "# J-Q3 model: H = J sum_<ij> S_i.S_j - Q sum P P P over three parallel bonds stacked in a column\n"
        "# (both orientations), P = 1/4 - S_i.S_j, Q = 1.\n"
        "# Demo scenario: a student checks whether the valence-bond histogram grows four-fold peaks when\n"
        "# J/Q is lowered (the order is expected to set in near J/Q = 0.67, from memory).\n",
        _run("three-in-a-column", 4242, "valence-bond order in the J-Q3 model"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n\n'
        '[[terms]]\ntype = "projector-product"\n'
        '# shape: "column-of-three" = three parallel bonds stacked in a column.\n'
        'shape = "column-of-three"\nsymmetrize = true\ncoupling = 1.0\n',
        "L = [8, 12, 16]\n# J: Heisenberg coupling in units of Q, 7 values from 0.50 to 0.80.\n"
        "J = { start = 0.50, stop = 0.80, num = 7 }\nbeta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="J"),
    ),
}


def template(kind: str) -> str:
    """The commented example configuration of ``kind`` (one of :data:`TEMPLATES`)."""
    if kind not in TEMPLATES:
        raise UserError(f"unknown template {kind!r}{did_you_mean(kind, TEMPLATES)}; "
                        f"choose one of: {', '.join(TEMPLATES)}", "qmc new")
    return TEMPLATES[kind]
