"""Commented example configurations printed by ``qmc new KIND``.

Every template is a complete configuration (schema: :mod:`qmc.config.schema`) whose comments explain the
model, each key and the choice of parameters; all of them load and validate as they are.

Sources of the transition points named in the comments (they only set the scan windows):
bilayer g_c = 2.5220(1), Wang, Beach and Sandvik, Phys. Rev. B 73, 014431 (2006) (also the reference of
tests/cli/test_end_to_end.py); columnar dimer g_c ~ 1.91, J-Q2 (J/Q)_c ~ 0.045 and J-Q3 (J/Q)_c ~ 0.67 are
from memory (a scan window that misses a transition shows up as crossings at its edge in ``qmc analyze``).
The SU(3) J-Q2 window (Q/J = 0.3 ... 0.8 around 0.5) comes from short runs of this program at L = 8, 16
(crossing of stiffness * L).
"""

from __future__ import annotations

from qmc.errors import UserError, did_you_mean

__all__ = ["TEMPLATES", "template"]


def _run(name: str, seed: int, description: str) -> str:
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
description = "{description}"
'''


def _sampling(warmup: int, measure: int, bins: int, exchange: str | None = None) -> str:
    if exchange:
        ex = f'''
# Replica exchange (optional; uncomment the three lines to use it): the tasks that differ only in
# {exchange} run side by side, and every `every` Monte Carlo steps neighbouring values of {exchange} try to
# swap their configurations, accepted with the exact ratio of their weights.  Near a transition, where a
# single chain is slow to cross between ordered and disordered configurations, this shortens the
# autocorrelation times.  `qmc summary` shows the acceptance rate of each pair: keep the values of
# {exchange} close enough that it stays well above zero.
# [exchange]
# along = "{exchange}"
# every = 10
'''
    else:
        ex = ""
    return f'''\
[sampling]
# One Monte Carlo step = one diagonal update over the whole operator string + one full loop update.
# warmup_steps: steps discarded while the chain equilibrates and the operator string settles to its
# typical length.  `qmc summary` warns when the first and second half of the bins disagree, the sign
# of too short a warm-up.
warmup_steps = {warmup}
# measure_steps: steps that are measured; they are averaged in bins.
measure_steps = {measure}
# bins: number of bins (>= 2, must divide measure_steps); error bars come from the bin averages, which
# must be nearly independent: here {measure // bins} steps per bin.  `qmc summary` shows tau_int in units of
# bins; values near 1/2 mean independent bins, larger values call for longer bins (fewer of them).
bins = {bins}
# copies: independent copies of every parameter point (own random streams), e.g. to use more processes
# or to compare error bars between copies; `qmc summary --merge-copies` combines them.
copies = 1
# checkpoint_seconds: how often a running task saves its full state, so an interrupted run resumes.
checkpoint_seconds = 300
# target (optional): stop measuring a task as soon as these error bars are reached, absolute or relative
# to the mean with %.  The check starts at 64 bins (the binning analysis needs them to judge its own
# error) and looks at every bin after that; measure_steps is then only the upper limit.  A task that
# stops this way holds exactly the first bins of the same run without a target.
# target = {{ energy = 1e-4, m_stag2 = "0.5%" }}
# estimators: "improved" (the default) measures chi_uniform, m_stag2, m_stag4, chi_stag, s_q and
# s_q_shifted as averages over the loop update's own random choices: every loop is flipped (or given a
# colour) independently of the others, so that average can be taken exactly for each configuration.  Same
# means, several times smaller error bars.  "plain" measures them on each configuration as it is (models
# with xxz or field terms, whose directed loops are not independent, always do).  A run keeps its choice.
# estimators = "improved"
{ex}
# Ground state instead of fixed temperatures (optional): remove beta from [scan] and uncomment the
# section below.  Each task starts at start_beta; when its bins are done it doubles beta (its operator
# string joined with its mirror image is a configuration at 2 beta), warms up and measures again, until
# the observables at beta and 2 beta agree within two error bars for two doublings in a row.  At
# max_beta it stops and `qmc summary` says that the ground state was not reached.
# [ground_state]
# start_beta = 2.0
# max_beta = 512.0
# observables = ["energy", "m_stag2"]
'''


_SCAN_HELP = '''\
# Every entry is a number (fixed), a list of values, a range {start, stop, num} (num evenly spaced
# values, both ends included), a text expression of other entries such as "2*L", "L/2" or "0.5*g", or a
# list of such expressions: beta = ["L", "2*L"] runs every point at beta = L and at beta = 2L (the
# ground-state check of `qmc analyze` compares such pairs).
# Every combination of the listed values is one task (times sampling.copies).  beta (the inverse
# temperature, in inverse units of the couplings) is required, unless a [ground_state] section finds each
# task's ground state by doubling beta (see the end of this file).  Every entry must be used somewhere.
'''

_TERMS_HELP = '''\
# The Hamiltonian is the sum of the [[terms]] blocks (numbered terms[0], terms[1], ... in messages).
#   type = "heisenberg":        +J S_i.S_j on every bond of the bond class `bonds`; coupling = J >= 0.
#   type = "projector":         -J P_ij on every bond of `bonds`, P_ij = 1/4 - S_i.S_j the singlet
#                               projector (for N colours per site the SU(N) singlet projector).
#   type = "projector-product": -Q prod P_ij over the bonds of `shape`, placed at every unit cell;
#                               coupling = Q >= 0.  symmetrize = true (default) also places the shape
#                               rotated by 90 degrees.  A shape is a name or a list of bonds, each two
#                               unit-cell offsets with one number per lattice direction.
#   type = "xxz":               J (S^x S^x + S^y S^y + delta S^z S^z) on every bond of `bonds`;
#                               coupling = J, delta = the anisotropy (both numbers or scan names).
#   type = "field":             -h sum_i S^z_i (staggered = true: -h sum_i phi_i S^z_i, phi = +-1 on
#                               the two sublattices); coupling = h.  xxz and field terms need 2 colours.
# A coupling is a number or a scan name (or an expression such as "2*g").  Negative heisenberg and
# projector couplings have a sign problem and are refused; a negative xxz J (ferromagnetic in the xy
# plane) and a field of either sign are allowed where the model stays free of the sign problem.
# Each block's energy per site is measured as term_energy/<name>; name = "..." sets that name.
'''

_LATTICE_HELP = '''\
# kind: chain | square | bilayer | honeycomb | cubic (or "explicit" with sites = N, bonds = [[i, j], ...]).
# size: number of unit cells along each direction; numbers or scan names.
# boundary: "periodic" (default) or "open", or one per direction such as ["open", "periodic"] (a strip
# open along x).  Periodic chain/square/bilayer/cubic lattices need even sizes.
'''

_CRITICAL_BETA = ("# beta = L: at these transitions time scales like length (dynamic exponent z = 1), so\n"
                  "# beta proportional to L keeps the space-time shape of every size the same and\n"
                  "# dimensionless quantities of different sizes cross at the critical coupling.\n")


def _compose(title: str, run: str, lattice: str, terms: str, scan: str, sampling: str,
             model: str = "") -> str:
    return "\n".join([title, run, *([model] if model else []), "[lattice]\n" + _LATTICE_HELP + lattice,
                      _TERMS_HELP + terms, "[scan]\n" + _SCAN_HELP + scan, sampling])


TEMPLATES: dict[str, str] = {
    "heisenberg": _compose(
        "# Square-lattice Heisenberg antiferromagnet, H = J sum_<ij> S_i.S_j with J = 1.\n"
        "# Its ground state has Neel order: the staggered magnetization m_stag2 and the spin stiffness stay\n"
        "# finite as L grows, approaching their infinite-size values with corrections in powers of 1/L.\n"
        "# beta grows with L so that the temperature stays below the finite-size energy scale ~ 1/L and the\n"
        "# estimates of every size are close to its ground state.\n",
        _run("heisenberg-square", 20240611, "Neel order of the square-lattice Heisenberg model versus size"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n# bonds: "nn" = all nearest-neighbour bonds (also "x", "y").\n'
        'bonds = "nn"\ncoupling = 1.0\n',
        "# L: four sizes, enough to extrapolate m_stag2 and the stiffness in 1/L.\n"
        "L = [4, 8, 12, 16]\n# beta: inverse temperature; here twice the linear size.\nbeta = \"2*L\"\n",
        _sampling(2000, 20000, 100),
    ),
    "bilayer": _compose(
        "# Square-lattice bilayer: H = sum_intra S_i.S_j + g sum_rungs S_i.S_j.\n"
        "# For small rung coupling g both layers order antiferromagnetically together; for large g every\n"
        "# rung forms a singlet and a spin gap opens.  The quantum phase transition between them, in the\n"
        "# three-dimensional O(3) universality class, lies at g = 2.522.  The scan 2.40 ... 2.60\n"
        "# brackets it: `qmc analyze --quantity stiffness_L` locates the crossings of stiffness*L between\n"
        "# sizes.\n",
        _run("bilayer-transition", 7321, "rung-singlet transition of the square-lattice bilayer"),
        'kind = "bilayer"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n# bonds: "intra" = in-plane bonds of both layers.\n'
        'bonds = "intra"\ncoupling = 1.0\n\n'
        '[[terms]]\ntype = "heisenberg"\n# bonds: "inter" = the rungs joining the two layers.\n'
        'bonds = "inter"\ncoupling = "g"\n',
        "L = [8, 12, 16]\n# g: rung coupling, 11 values from 2.40 to 2.60.\n"
        "g = { start = 2.40, stop = 2.60, num = 11 }\n" + _CRITICAL_BETA + "beta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="g"),
    ),
    "columnar-dimer": _compose(
        "# Columnar dimerized square lattice: H = g sum_strong S_i.S_j + sum_weak S_i.S_j, the strong\n"
        "# bonds forming columns of parallel dimers (x-bonds starting at even x).\n"
        "# For g near 1 the lattice orders antiferromagnetically; for large g every strong dimer forms a\n"
        "# singlet.  The transition between them (O(3) universality, as in the bilayer) lies near g = 1.91;\n"
        "# the scan 1.85 ... 1.97 brackets it.\n",
        _run("columnar-dimer-transition", 515, "dimer-singlet transition of the columnar dimerized lattice"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n'
        '# bonds: "columnar-strong" = the dimer bonds of the columnar pattern.\n'
        'bonds = "columnar-strong"\ncoupling = "g"\n\n'
        '[[terms]]\ntype = "heisenberg"\n# bonds: "columnar-weak" = every other nearest-neighbour bond.\n'
        'bonds = "columnar-weak"\ncoupling = 1.0\n',
        "L = [8, 12, 16]\n# g: strong-bond coupling, 7 values from 1.85 to 1.97.\n"
        "g = { start = 1.85, stop = 1.97, num = 7 }\n" + _CRITICAL_BETA + "beta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="g"),
    ),
    "jq2": _compose(
        "# J-Q2 model: H = J sum_<ij> S_i.S_j - Q sum P_ij P_kl, P = 1/4 - S_i.S_j, the projector pairs\n"
        "# sitting on the two parallel bonds of every 2x2 plaquette (both orientations); Q = 1 sets the\n"
        "# energy unit.  The Q term favours singlets on parallel bonds: for large J/Q the ground state has\n"
        "# Neel order, for small J/Q columnar valence-bond order (vbs_x2, vbs_y2 finite).  The two meet\n"
        "# near J/Q = 0.045, a transition with no symmetry relation between the two orders; the scan\n"
        "# 0.03 ... 0.06 brackets it.\n",
        _run("jq2-transition", 99, "Neel to valence-bond-solid transition of the J-Q2 model"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n\n'
        '[[terms]]\ntype = "projector-product"\n'
        '# shape: "plaquette-pair" = two parallel bonds on a 2x2 plaquette; a shape can also be given as\n'
        "# a list of bonds [[[dx, dy], [dx, dy]], ...] of unit-cell offsets.\n"
        'shape = "plaquette-pair"\n# symmetrize: also place the shape rotated by 90 degrees.\n'
        "symmetrize = true\ncoupling = 1.0\n",
        "L = [8, 12, 16]\n# J: Heisenberg coupling in units of Q, 7 values from 0.03 to 0.06.\n"
        "J = { start = 0.03, stop = 0.06, num = 7 }\n" + _CRITICAL_BETA + "beta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="J"),
    ),
    "jq3": _compose(
        "# J-Q3 model: H = J sum_<ij> S_i.S_j - Q sum P P P over three parallel bonds stacked in a column\n"
        "# (both orientations), P = 1/4 - S_i.S_j; Q = 1 sets the energy unit.  Three projectors favour\n"
        "# valence-bond order more strongly than two: below J/Q = 0.67 the columnar order sets in, and the\n"
        "# histogram of the order parameter (D_x, D_y), stored per task and drawn by `qmc analyze --plot`,\n"
        "# develops four peaks (vbs_cos4 > 0).  Near the transition it is nearly circular.\n",
        _run("jq3-vbs", 4242, "onset of columnar valence-bond order in the J-Q3 model"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n\n'
        '[[terms]]\ntype = "projector-product"\n'
        '# shape: "column-of-three" = three parallel bonds stacked in a column.\n'
        'shape = "column-of-three"\nsymmetrize = true\ncoupling = 1.0\n',
        "L = [8, 12, 16]\n# J: Heisenberg coupling in units of Q, 7 values from 0.50 to 0.80.\n"
        "J = { start = 0.50, stop = 0.80, num = 7 }\n" + _CRITICAL_BETA + "beta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="J"),
    ),
    "su3-jq2": _compose(
        "# SU(3) J-Q2 model: three colours per site (SU(3), fundamental representation on sublattice A,\n"
        "# conjugate on B), H = -J sum_<ij> P_ij - Q sum P_ij P_kl with P_ij the projector on the SU(3)\n"
        "# singlet of the bond and the projector pairs on the two parallel bonds of every 2x2 plaquette;\n"
        "# J = 1 sets the energy unit.  With Q = 0 the colours order antiferromagnetically (m_stag2 finite,\n"
        "# from the staggered colour order m_s = sum_i (delta(c_i, 0) - 1/3) / N); the Q term drives the\n"
        "# model into columnar valence-bond order (vbs_x2, vbs_y2 finite).  The two meet near Q/J = 0.5 at\n"
        "# these sizes; the scan 0.3 ... 0.8 brackets it.  The same file with colors = 2 is the S = 1/2 J-Q\n"
        "# model, and colors may be a scan name to compare several N in one run.\n",
        _run("su3-jq2-transition", 2718, "Neel to valence-bond-solid transition of the SU(3) J-Q2 model"),
        'kind = "square"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "projector"\nbonds = "nn"\ncoupling = 1.0\n\n'
        '[[terms]]\ntype = "projector-product"\nshape = "plaquette-pair"\nsymmetrize = true\n'
        'coupling = "Q"\n',
        "L = [8, 12, 16]\n# Q: four-site coupling in units of J, 11 values from 0.3 to 0.8.\n"
        "Q = { start = 0.3, stop = 0.8, num = 11 }\n" + _CRITICAL_BETA + "beta = \"L\"\n",
        _sampling(2000, 20000, 100, exchange="Q"),
        model="[model]\n# colors: colours per site, 2 (S = 1/2 spins, the default) or N > 2 for SU(N); an\n"
              "# integer or a scan name.  A heisenberg term needs colors = 2: for N > 2 write\n"
              "# type = \"projector\".\n"
              "colors = 3\n",
    ),
    "bilayer-field": _compose(
        "# Square-lattice bilayer in a magnetic field: H = sum_intra S_i.S_j + g sum_rungs S_i.S_j\n"
        "# - h sum_i S^z_i, at g = 4, deep in the rung-singlet (dimer) phase (the layers order only below\n"
        "# g = 2.522).  The field lowers the S^z = +1 rung triplet: while its gap stays open the\n"
        "# magnetization stays zero; once it closes the triplets condense, the magnetization rises and the\n"
        "# spins order antiferromagnetically in the xy plane (the triplet condensate, whose superfluid\n"
        "# density is the stiffness); above the saturation field h = g + 4 = 8 every spin points up.\n"
        "# Terms with a field are simulated with directed loops; `qmc analyze --coupling h --plot` draws\n"
        "# magnetization(h) and stiffness(h).\n",
        _run("bilayer-field", 2718, "magnetization curve of the dimerized bilayer"),
        'kind = "bilayer"\nsize = ["L", "L"]\nboundary = "periodic"\n',
        '[[terms]]\ntype = "heisenberg"\n# bonds: "intra" = in-plane bonds of both layers.\n'
        'bonds = "intra"\ncoupling = 1.0\n\n'
        '[[terms]]\ntype = "xxz"\n# bonds: "inter" = the rungs; delta = 1 is the isotropic rung coupling.\n'
        'bonds = "inter"\ncoupling = 4.0\ndelta = 1.0\n\n'
        '[[terms]]\ntype = "field"\n# coupling: the field h, in units of the in-plane coupling.\n'
        'coupling = "h"\n',
        "L = [8]\n# h: 19 fields from 0 to 9, across both critical fields.\n"
        "h = { start = 0.0, stop = 9.0, num = 19 }\n"
        "# beta: a temperature low enough for flat magnetization plateaus.\nbeta = 16\n",
        _sampling(2000, 20000, 100),
    ),
}


_WALLS_HELP = '''\
[domain_wall]
# Every scan point runs as several tasks that differ only in the valence-bond pattern pinned at the two
# open edges: the reference "none" (y-dimers on both edges, in phase), each wall listed here, and, with
# "pi/2", a second reference "none-x" (x-dimers on both edges).  "pi": the right edge is shifted by one
# row, so the order parameter turns by pi across the strip; "pi/2": the right edge carries x-dimers.
# `qmc analyze` reports the wall energy per unit length kappa = (E_wall - E_ref) / L_y (E_ref = E_none for
# the pi wall, the mean of "none" and "none-x" for the pi/2 wall), its power-law fit versus L, and the
# order and energy profiles across the strip.
walls = ["pi/2", "pi"]
# pattern: the valence-bond pattern the edges carry (columnar dimers).
pattern = "columnar"
# pin: factor on the couplings of the edge terms made only of the edge pattern's dimers (> 0).  Only
# existing couplings are scaled, so the model stays free of the sign problem; a larger factor holds the
# edges more firmly.
pin = 2.0
'''

TEMPLATES["jq3-walls"] = _compose(
    "# Domain walls in the valence-bond solid of the J-Q3 model: H = J sum_<ij> S_i.S_j - Q sum P P P over\n"
    "# three parallel bonds stacked in a column, P = 1/4 - S_i.S_j, Q = 1, on L x L strips open along x and\n"
    "# periodic along y.  A wall between two valence-bond domains costs a finite energy per unit length in\n"
    "# the solid, so kappa L grows with L; near the Neel transition (J/Q ~ 0.67) the angle of the order\n"
    "# parameter is free over long distances (an emergent U(1) symmetry), a wall spreads over the whole\n"
    "# strip and kappa falls with L.\n",
    _run("jq3-walls", 1313, "valence-bond domain walls in the J-Q3 model"),
    'kind = "square"\nsize = ["L", "L"]\nboundary = ["open", "periodic"]\n',
    '[[terms]]\ntype = "heisenberg"\nbonds = "nn"\ncoupling = "J"\n\n'
    '[[terms]]\ntype = "projector-product"\nshape = "column-of-three"\nsymmetrize = true\ncoupling = 1.0\n',
    "L = [8, 12, 16]\n# J: Heisenberg coupling in units of Q, from deep in the solid towards the Neel\n"
    "# phase.\n"
    "J = [0.0, 0.3, 0.6]\n# beta = L: low enough a temperature for ground-state energy differences.\n"
    "beta = \"L\"\n",
    _sampling(10000, 40000, 100),
) + "\n" + _WALLS_HELP


def template(kind: str) -> str:
    """The commented example configuration of ``kind`` (one of :data:`TEMPLATES`)."""
    if kind not in TEMPLATES:
        raise UserError(f"unknown template {kind!r}{did_you_mean(kind, TEMPLATES)}; "
                        f"choose one of: {', '.join(TEMPLATES)}", "qmc new")
    return TEMPLATES[kind]
