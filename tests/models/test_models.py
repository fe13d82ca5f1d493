"""Tests of models/: lattices, shapes, terms, compilation and named models.

Checks are against facts outside the package: bond counts and coordination numbers counted by hand,
brute-force bond enumerations written independently here, Euclidean geometry of the honeycomb lattice,
and exact-diagonalization energies of small rings.  Sources are noted beside each check.
"""

from __future__ import annotations

import pickle
from collections import Counter

import numpy as np
import pytest
from qmc.models import (
    CompiledModel,
    HeisenbergTerm,
    Lattice,
    ModelError,
    ProjectorProductTerm,
    bilayer,
    build_lattice,
    columnar_dimer,
    compile_model,
    heisenberg,
    jq2,
    jq3,
    ladder,
    parse_shape,
    place_shape,
    rotations,
)
from scipy import sparse

# ----------------------------------------------------------------------------------------------- helpers


def edge_multiset(bonds: np.ndarray) -> Counter:
    """Unordered site pairs with multiplicity."""
    return Counter(tuple(sorted(map(int, b))) for b in bonds)


def brute_hypercubic_edges(size: tuple[int, ...], periodic: bool) -> Counter:
    """Nearest-neighbour edges of a hypercubic lattice by explicit loops (site = x + Lx*(y + Ly*z))."""
    edges: Counter = Counter()
    dim = len(size)
    for cell in np.ndindex(*size[::-1]):
        r = cell[::-1]
        for a in range(dim):
            if not periodic and r[a] == size[a] - 1:
                continue
            s = list(r)
            s[a] = (s[a] + 1) % size[a]
            i = sum(r[b] * int(np.prod(size[:b])) for b in range(dim))
            j = sum(s[b] * int(np.prod(size[:b])) for b in range(dim))
            edges[tuple(sorted((i, j)))] += 1
    return edges


def sdot(n: int, i: int, j: int) -> sparse.csr_matrix:
    """S_i.S_j on n spins in the S^z basis (bit n-1-i of the state index is spin i, 1 = down), from the
    handbook identity S_i.S_j = S^z_i S^z_j + (S^+_i S^-_j + S^-_i S^+_j)/2."""
    states = np.arange(2**n)
    bi, bj = (states >> (n - 1 - i)) & 1, (states >> (n - 1 - j)) & 1
    anti = bi != bj
    flipped = states ^ ((1 << (n - 1 - i)) | (1 << (n - 1 - j)))
    rows = np.concatenate([states, states[anti]])
    cols = np.concatenate([states, flipped[anti]])
    vals = np.concatenate([np.where(anti, -0.25, 0.25), np.full(anti.sum(), 0.5)])
    return sparse.csr_matrix((vals, (rows, cols)), shape=(2**n, 2**n))


def hamiltonian_from_compiled(model: CompiledModel) -> np.ndarray:
    """Dense H = E_const - sum_t C_t prod_a P_{i_a j_a}, P = 1/4 - S.S, straight from the flat arrays."""
    n = model.n_sites
    eye = sparse.identity(2**n, format="csr")
    proj = [0.25 * eye - sdot(n, int(i), int(j)) for i, j in model.bond_sites]
    h = model.energy_constant * eye
    for t in range(model.n_terms):
        prod = eye
        for b in model.term_bonds[model.term_start[t]:model.term_start[t + 1]]:
            prod = prod @ proj[b]
        h = h - model.term_coupling[t] * prod
    return h.toarray()


# ---------------------------------------------------------------------------------------------- lattices


@pytest.mark.parametrize("size", [(4, 4), (6, 6), (4, 6)])
def test_square_periodic_counts_and_edges(size):
    lat = build_lattice("square", size)
    n = size[0] * size[1]
    assert lat.n_sites == n
    # square lattice: coordination 4, so 4N/2 = 2N bonds (hand count)
    assert len(lat.bond_classes["nn"]) == 2 * n
    assert len(lat.bond_classes["x"]) == len(lat.bond_classes["y"]) == n
    assert np.all(lat.coordination("nn") == 4)
    assert edge_multiset(lat.bond_classes["nn"]) == brute_hypercubic_edges(size, periodic=True)


def test_square_open_counts():
    lat = build_lattice("square", (5, 4), "open")  # odd length is fine with open boundaries
    # open Lx x Ly grid: Ly*(Lx-1) x-bonds + Lx*(Ly-1) y-bonds (hand count)
    assert len(lat.bond_classes["x"]) == 4 * 4
    assert len(lat.bond_classes["y"]) == 5 * 3
    assert edge_multiset(lat.bond_classes["nn"]) == brute_hypercubic_edges((5, 4), periodic=False)
    coord = Counter(lat.coordination("nn").tolist())
    assert coord == {2: 4, 3: 2 * (5 - 2) + 2 * (4 - 2), 4: (5 - 2) * (4 - 2)}  # corners, edges, bulk


def test_chain_classes():
    lat = build_lattice("chain", [8])
    assert len(lat.bond_classes["nn"]) == 8
    assert lat.bond_classes["even"].tolist() == [[0, 1], [2, 3], [4, 5], [6, 7]]
    assert lat.bond_classes["odd"].tolist() == [[1, 2], [3, 4], [5, 6], [7, 0]]
    assert np.all(lat.bond_disps["nn"] == 1.0)  # the wrap bond (7, 0) too: minimum image +1
    assert lat.n_vbs_dirs == 1 and lat.dir_names == ("x",)
    assert lat.vbs_phase.tolist() == [1, -1] * 4
    open_chain = build_lattice("chain", 7, "open")
    assert len(open_chain.bond_classes["nn"]) == 6


def test_periodic_length_two_keeps_both_bonds():
    """Common practice, no source: a ring of two cells keeps bonds (0,1) and (1,0), each +1 along x."""
    lat = build_lattice("chain", 2)
    assert lat.bond_classes["nn"].tolist() == [[0, 1], [1, 0]]
    assert lat.bond_disps["nn"].ravel().tolist() == [1.0, 1.0]
    sq = build_lattice("square", 2)
    assert np.all(sq.coordination("nn") == 4)


def test_x_bond_displacements_minimum_image():
    lat = build_lattice("square", (6, 4))
    sites, disp = lat.bonds("x")
    assert np.all(disp == [1.0, 0.0])
    x0, x1 = lat.coords[sites[:, 0], 0], lat.coords[sites[:, 1], 0]
    assert np.all((x1 - x0) % 6 == 1)
    assert np.any(x0 == 5)  # the wrap bonds are present, still with displacement (1, 0)
    assert np.all(lat.bond_disps["y"] == [0.0, 1.0])


def test_site_index_round_trip():
    lat = build_lattice("square", (6, 4))
    x, y = lat.coords.T.astype(int)
    assert np.array_equal(lat.site_index(x, y), np.arange(24))
    assert np.array_equal(x + 6 * y, np.arange(24))
    assert lat.site_index(6, -1) == lat.site_index(0, 3)
    open_lat = build_lattice("square", (6, 4), "open")
    assert open_lat.site_index(6, 0) == -1


def test_every_bond_joins_opposite_sublattices():
    lattices = [build_lattice("chain", 10), build_lattice("square", (4, 6)), build_lattice("bilayer", 4),
                build_lattice("honeycomb", (3, 5)), build_lattice("cubic", 4),
                build_lattice("square", 5, "open"), build_lattice("cubic", 3, "open"),
                build_lattice("ladder", (4, 3)), build_lattice("ladder", (3, 2), "open")]
    for lat in lattices:
        for name, bonds in lat.bond_classes.items():
            assert len(bonds) > 0, (lat.kind, name)
            sub = lat.sublattice
            assert np.all(sub[bonds[:, 0]] != sub[bonds[:, 1]]), (lat.kind, name)
        assert set(np.unique(lat.sublattice).tolist()) == {0, 1}


def test_square_dimerization_patterns():
    lat = build_lattice("square", (6, 4))
    n = lat.n_sites
    nn = edge_multiset(lat.bond_classes["nn"])
    for pattern in ("columnar", "staggered", "plaquette"):
        strong = lat.bond_classes[f"{pattern}-strong"]
        weak = lat.bond_classes[f"{pattern}-weak"]
        assert edge_multiset(strong) + edge_multiset(weak) == nn
    # columnar and staggered strong bonds are perfect dimer coverings: N/2 bonds, every site once
    for pattern in ("columnar", "staggered"):
        assert len(lat.bond_classes[f"{pattern}-strong"]) == n // 2
        assert np.all(lat.coordination(f"{pattern}-strong") == 1)
    # plaquette pattern: N/4 plaquettes x 4 bonds, every site on exactly two strong bonds
    assert len(lat.bond_classes["plaquette-strong"]) == n
    assert np.all(lat.coordination("plaquette-strong") == 2)
    x, y = lat.coords.T
    col = lat.bond_classes["columnar-strong"]
    assert np.all(x[col[:, 0]] % 2 == 0) and np.all(y[col[:, 0]] == y[col[:, 1]])
    stag = lat.bond_classes["staggered-strong"]
    assert np.all((x[stag[:, 0]] + y[stag[:, 0]]) % 2 == 0)


def test_square_vbs_pattern():
    lat = build_lattice("square", (4, 6))
    assert lat.n_vbs_dirs == 2
    assert np.sum(lat.vbs_dir == 0) == np.sum(lat.vbs_dir == 1) == lat.n_sites
    x, y = lat.coords.T
    s0 = lat.vbs_bonds[:, 0]
    expected = np.where(lat.vbs_dir == 0, (-1.0) ** x[s0], (-1.0) ** y[s0])
    assert np.array_equal(lat.vbs_phase, expected.astype(np.int8))


def test_bilayer():
    L = 4
    lat = build_lattice("bilayer", (L, L))
    n = 2 * L * L
    assert lat.n_sites == n
    # per layer 2*L^2 in-plane bonds -> intra = 2N; one rung per cell -> inter = N/2 (hand count)
    assert len(lat.bond_classes["intra"]) == 2 * n
    assert len(lat.bond_classes["inter"]) == n // 2
    assert np.all(lat.coordination("nn") == 5)
    assert np.all(lat.coordination("intra") == 4) and np.all(lat.coordination("inter") == 1)
    rungs = lat.bond_classes["inter"]
    assert np.all(rungs[:, 1] - rungs[:, 0] == L * L)
    assert np.all(lat.bond_disps["inter"] == 0.0)
    for layer in (0, 1):
        for y in range(L):
            for x in range(L):
                s = lat.site_index(x, y, sub=layer)
                assert s == layer * L * L + y * L + x
                assert lat.sublattice[s] == (x + y + layer) % 2
    assert len(lat.vbs_bonds) == 2 * n
    open_lat = build_lattice("bilayer", (L, L), "open")
    assert len(open_lat.bond_classes["intra"]) == 2 * 2 * L * (L - 1)
    assert len(open_lat.bond_classes["inter"]) == L * L


def test_cubic():
    lat = build_lattice("cubic", (4, 4, 6))
    n = 96
    assert len(lat.bond_classes["nn"]) == 3 * n  # coordination 6 -> 6N/2 bonds
    assert np.all(lat.coordination("nn") == 6)
    assert edge_multiset(lat.bond_classes["nn"]) == brute_hypercubic_edges((4, 4, 6), periodic=True)
    assert lat.n_vbs_dirs == 0 and lat.dir_names == ("x", "y", "z")
    open_lat = build_lattice("cubic", 3, "open")
    assert len(open_lat.bond_classes["nn"]) == 3 * 9 * 2
    assert edge_multiset(open_lat.bond_classes["nn"]) == brute_hypercubic_edges((3, 3, 3), periodic=False)


@pytest.mark.parametrize("size", [(4, 4), (3, 5)])
def test_honeycomb_geometry(size):
    """Handbook geometry: with a1 = (1, 0), a2 = (1/2, sqrt(3)/2) and B at (a1 + a2)/3, every nearest
    neighbour is at distance 1/sqrt(3) and every site has three of them."""
    lat = build_lattice("honeycomb", size)
    n = 2 * size[0] * size[1]
    assert lat.n_sites == n
    assert len(lat.bond_classes["nn"]) == 3 * n // 2
    assert np.all(lat.coordination("nn") == 3)
    assert lat.n_vbs_dirs == 0 and lat.dir_names == ("a1", "a2")
    basis = np.array([[1.0, 0.0], [0.5, np.sqrt(3) / 2]])
    sites, disp = lat.bonds("nn")
    # fractional displacement -> Cartesian length
    assert np.allclose(np.linalg.norm(disp @ basis, axis=1), 1 / np.sqrt(3))
    # independently: minimum-image distance between the actual site positions
    frac = lat.coords + np.where(lat.sublattice == 1, 1 / 3, 0.0)[:, None]
    d = frac[sites[:, 1]] - frac[sites[:, 0]]
    d -= np.round(d / size) * size
    assert np.allclose(d, disp)
    for k in range(3):
        assert len(lat.bond_classes[f"nn{k}"]) == n // 2
    # all pairs at distance 1/sqrt(3), by brute force over the torus, are exactly the nn bonds
    pos = frac @ basis
    shifts = [np.array([i, j]) @ (np.array(size)[:, None] * basis) for i in (-1, 0, 1) for j in (-1, 0, 1)]
    brute = Counter()
    for i in range(n):
        for j in range(i + 1, n):
            for s in shifts:
                if abs(np.linalg.norm(pos[j] + s - pos[i]) - 1 / np.sqrt(3)) < 1e-9:
                    brute[(i, j)] += 1
    assert edge_multiset(sites) == brute


def test_honeycomb_open():
    lat = build_lattice("honeycomb", (3, 4), "open")
    # nn0 in every cell, nn1 needs c1 >= 1, nn2 needs c2 >= 1 (hand count)
    assert len(lat.bond_classes["nn"]) == 12 + 2 * 4 + 3 * 3


@pytest.mark.parametrize("L, W, boundary",
                         [(4, 2, "periodic"), (6, 3, "periodic"), (5, 3, "open"), (2, 2, "periodic")])
def test_ladder(L, W, boundary):
    """W-leg ladder, legs along x, open across them: bonds listed by explicit loops (site = x + L*y)."""
    lat = build_lattice("ladder", (L, W), boundary)
    periodic = boundary == "periodic"
    assert lat.n_sites == L * W and lat.dir_names == ("x",) and lat.coords.shape == (L * W, 1)
    legs = Counter(tuple(sorted((x + L * y, (x + 1) % L + L * y))) for y in range(W) for x in range(L)
                   if periodic or x < L - 1)
    rungs = Counter(tuple(sorted((x + L * y, x + L * (y + 1)))) for y in range(W - 1) for x in range(L))
    assert edge_multiset(lat.bond_classes["leg"]) == legs
    assert edge_multiset(lat.bond_classes["rung"]) == rungs
    assert edge_multiset(lat.bond_classes["nn"]) == legs + rungs
    assert np.all(lat.bond_disps["leg"] == 1.0) and np.all(lat.bond_disps["rung"] == 0.0)
    x, y = np.arange(L * W) % L, np.arange(L * W) // L
    assert np.array_equal(lat.coords[:, 0], x) and np.array_equal(lat.sublattice, (x + y) % 2)
    assert lat.site_index(1, W) == -1 and lat.site_index(1, W - 1) == 1 + L * (W - 1)
    assert lat.site_index(L, 0) == (0 if periodic else -1)
    assert lat.n_vbs_dirs == 1 and np.array_equal(lat.vbs_bonds, lat.bond_classes["leg"])
    assert np.array_equal(lat.vbs_phase, (-1) ** x[lat.vbs_bonds[:, 0]])
    model = compile_model(*ladder(L, W, g=0.5, boundary=boundary))
    assert model.group_names == ("leg", "rung") and model.open_boundaries == (not periodic)
    assert model.n_dirs == 1 and model.linear_size == L


def test_ladder_errors():
    with pytest.raises(ModelError, match="even length along x") as err:
        build_lattice("ladder", (5, 2))
    assert err.value.where == "size[0]"
    with pytest.raises(ModelError, match="at least 2") as err:
        build_lattice("ladder", (4, 1))
    assert err.value.where == "size[1]"
    assert build_lattice("ladder", (4, 3)).n_sites == 12  # an odd number of legs is bipartite


# ------------------------------------------------------------------------------------- explicit bonds


def test_from_bonds_two_colouring_and_classes():
    bonds = [[0, 1], [1, 2], [2, 3], [3, 0], [4, 5]]  # a 4-cycle and a separate dimer
    lat = Lattice.from_bonds(6, bonds, classes=["a", "b", "a", "b", "c"])
    assert lat.sublattice.tolist() == [0, 1, 0, 1, 0, 1]
    assert lat.n_dirs == 0 and lat.coords.shape == (6, 0)
    assert lat.bond_classes["a"].tolist() == [[0, 1], [2, 3]]
    assert len(lat.bond_classes["all"]) == 5
    mapped = Lattice.from_bonds(4, {"p": [[0, 1]], "q": [[1, 2], [0, 1]]})
    assert len(mapped.bond_classes["all"]) == 2


def test_from_bonds_errors():
    with pytest.raises(ModelError, match="bipartite") as err:
        Lattice.from_bonds(3, [[0, 1], [1, 2], [2, 0]])
    assert err.value.where in ("bonds[0]", "bonds[1]", "bonds[2]")  # any bond of the triangle closes it
    with pytest.raises(ModelError, match="different sites"):
        Lattice.from_bonds(3, [[0, 1], [1, 1]])
    with pytest.raises(ModelError, match="out of range"):
        Lattice.from_bonds(3, [[0, 3]])
    with pytest.raises(ModelError, match="repeats"):
        Lattice.from_bonds(3, [[0, 1], [1, 0]])
    with pytest.raises(ModelError, match="reserved"):
        Lattice.from_bonds(3, [[0, 1]], classes=["all"])
    with pytest.raises(ModelError, match="class names"):
        Lattice.from_bonds(3, [[0, 1]], classes=["a", "b"])


# ---------------------------------------------------------------------------------------- lattice errors


@pytest.mark.parametrize(
    "kind, size, boundary, where, text",
    [
        ("sqare", (4, 4), "periodic", "kind", "did you mean 'square'"),
        ("triangular", (4, 4), "periodic", "kind", "known:"),
        ("square", (4, 4, 4), "periodic", "size", "needs 2 size entries"),
        ("chain", (4, 4), "periodic", "size", "needs 1 size entry"),
        ("square", (4, 1), "periodic", "size[1]", "at least 2"),
        ("square", (4, 4.5), "periodic", "size[1]", "integer"),
        ("chain", 5, "periodic", "size[0]", "even"),
        ("square", (4, 5), "periodic", "size[1]", "not bipartite"),
        ("bilayer", (3, 4), "periodic", "size[0]", "even"),
        ("cubic", (4, 4, 3), "periodic", "size[2]", "even"),
        ("square", (4, 4), "periodc", "boundary", "did you mean 'periodic'"),
    ],
)
def test_lattice_errors(kind, size, boundary, where, text):
    with pytest.raises(ModelError) as err:
        build_lattice(kind, size, boundary)
    assert err.value.where == where
    assert text in err.value.message
    assert str(err.value) == f"{where}: {err.value.message}"


def test_odd_sizes_that_are_allowed():
    assert build_lattice("honeycomb", (3, 3)).n_sites == 18  # bipartite for any size
    assert build_lattice("square", (5, 3), "open").n_sites == 15


def test_model_error_basics():
    err = ModelError("boom", "terms[1].bonds")
    assert isinstance(err, ValueError)
    assert str(err) == "terms[1].bonds: boom"
    assert str(ModelError("boom")) == "boom"
    again = pickle.loads(pickle.dumps(err))
    assert (again.message, again.where) == ("boom", "terms[1].bonds")
    assert err.within("model").where == "model.terms[1].bonds"


# ------------------------------------------------------------------------------------------------ shapes


def block_of(lat, sites):
    """(width, height) of the bounding box of a term's sites on the torus (positions unwrapped)."""
    lx, ly = lat.size
    x, y = lat.coords[sites].T
    x = (x - x[0] + lx // 2) % lx
    y = (y - y[0] + ly // 2) % ly
    return int(np.ptp(x)) + 1, int(np.ptp(y)) + 1


def terms_of(model, group):
    idx = np.flatnonzero(model.term_group == model.group_names.index(group))
    return [model.bond_sites[model.term_bonds[model.term_start[t]:model.term_start[t + 1]]] for t in idx]


def test_jq2_terms():
    L = 6
    model = compile_model(*jq2(L, J=1.0, Q=2.0))
    n = L * L
    q2 = terms_of(model, "q2")
    assert len(q2) == 2 * n and all(t.shape == (2, 2) for t in q2)
    assert len(terms_of(model, "nn")) == 2 * n
    lat = build_lattice("square", L)
    nn = edge_multiset(lat.bond_classes["nn"])
    uses: Counter = Counter()
    for t in q2:
        assert len(set(t.ravel().tolist())) == 4  # site-disjoint
        assert block_of(lat, t.ravel()) == (2, 2)  # the four corners of one plaquette
        for b in t:
            assert edge_multiset([b]) <= nn  # both bonds are nearest-neighbour bonds
            uses[tuple(sorted(b.tolist()))] += 1
        d0, d1 = (lat.coords[b[1]] - lat.coords[b[0]] for b in t)
        assert np.array_equal(d0, d1)  # parallel
    # every nn bond is one of the two parallel bonds of exactly two plaquettes (hand count)
    assert set(uses.values()) == {2} and len(uses) == 2 * n
    # Q bonds coincide with J bonds, so the deduplicated bond table holds just the 2N nn bonds
    assert len(model.bond_sites) == 2 * n
    assert model.group_names == ("nn", "q2") and model.max_bonds_per_term == 2


def test_jq3_terms():
    L = 6
    model = compile_model(*jq3(L, J=1.0, Q=1.0))
    n = L * L
    lat = build_lattice("square", L)
    q3 = terms_of(model, "q3")
    assert len(q3) == 2 * n and all(t.shape == (3, 2) for t in q3)
    uses: Counter = Counter()
    for t in q3:
        assert len(set(t.ravel().tolist())) == 6
        assert block_of(lat, t.ravel()) in {(2, 3), (3, 2)}
        for b in t:
            uses[tuple(sorted(b.tolist()))] += 1
    # a bond is the bottom, middle or top of a column of three: 3 placements each (hand count)
    assert set(uses.values()) == {3} and len(uses) == 2 * n
    assert model.max_bonds_per_term == 3


def test_shape_rotations():
    lat = build_lattice("square", 4)
    assert len(rotations(lat, parse_shape("plaquette-pair")[1])) == 2
    assert len(rotations(lat, parse_shape("column-of-three")[1])) == 2
    chiral = [[[0, 0], [1, 0]], [[1, 1], [1, 2]]]  # an L-like pair, no 180-degree symmetry
    assert len(rotations(lat, parse_shape(chiral)[1])) == 4
    sites, disp = place_shape(lat, chiral)
    assert sites.shape == (4 * 16, 2, 2)
    assert place_shape(lat, "plaquette-pair", symmetrize=False)[0].shape == (16, 2, 2)


def test_shapes_open_and_bilayer():
    lat = build_lattice("square", 5, "open")
    # an x-oriented plaquette pair fits at (L-1)^2 corners, and so does the y-oriented one
    assert place_shape(lat, "plaquette-pair")[0].shape[0] == 2 * 4 * 4
    # column of three: (L-1)*(L-2) placements per orientation
    assert place_shape(lat, "column-of-three")[0].shape[0] == 2 * 4 * 3
    bl = build_lattice("bilayer", 4)
    sites = place_shape(bl, "plaquette-pair")[0]
    assert sites.shape[0] == 2 * bl.n_sites
    layer = sites // 16
    assert np.all(layer == layer[:, :1, :1])  # never mixes the layers


def test_long_bonds_distinct_by_displacement():
    """One site pair, two displacements: (1, 2) and (1, -2) on a 4 x 4 torus are different bonds."""
    lat = build_lattice("square", 4)
    terms = [ProjectorProductTerm([[[0, 0], [1, 2]]], 1.0, symmetrize=False, name="up"),
             ProjectorProductTerm([[[0, 0], [1, -2]]], 1.0, symmetrize=False, name="down")]
    model = compile_model(lat, terms)
    assert model.n_terms == 32
    assert len(model.bond_sites) == 32
    assert len(edge_multiset(model.bond_sites)) == 16
    assert set(map(tuple, model.bond_disp.tolist())) == {(1.0, 2.0), (1.0, -2.0)}


@pytest.mark.parametrize(
    "lat, shape, text",
    [
        (build_lattice("honeycomb", 4), "plaquette-pair", "honeycomb"),
        (build_lattice("square", 4), [[[0, 0], [2, 0]]], "same sublattice"),
        (build_lattice("square", 4), [[[0, 0], [1, 0]], [[1, 0], [1, 1]]], "site-disjoint"),
        (build_lattice("square", (4, 2)), "column-of-three", "wraps onto itself"),
        (build_lattice("square", 4), [[[0, 0], [3, 0]]], "half the periodic length"),
        (build_lattice("square", 4), "plaquette-pairs", "did you mean 'plaquette-pair'"),
        (build_lattice("square", 4), [[0, 1]], "list of 1 to 3 bonds"),
    ],
)
def test_shape_errors(lat, shape, text):
    with pytest.raises(ModelError) as err:
        compile_model(lat, [HeisenbergTerm("nn", 1.0), ProjectorProductTerm(shape, 1.0, name="myq")])
    assert text in str(err.value)
    assert err.value.where.startswith("terms[1].shape")
    assert "term 1 ('myq')" in err.value.message


# ------------------------------------------------------------------------------------------- compilation


def test_energy_constant_is_sum_of_quarter_J():
    L, g = 4, 0.5
    model = compile_model(*bilayer(L, g))
    n = 2 * L * L
    assert model.group_names == ("intra", "inter")
    assert np.allclose(model.group_constant, [2 * n * 1.0 / 4, (n // 2) * g / 4])
    assert model.energy_constant == pytest.approx((2 * n + g * n / 2) / 4)
    assert np.all(model.term_coupling[model.term_group == 1] == g)
    cd = compile_model(*columnar_dimer(4, 3.0))
    assert np.allclose(cd.group_constant, [3.0 * 8 / 4, 1.0 * 24 / 4])


def test_compiled_fields():
    L = 4
    model = compile_model(*jq2(L, J=1.0, Q=0.5))
    lat = build_lattice("square", L)
    assert model.n_sites == 16 and model.linear_size == L and model.n_dirs == 2
    assert model.dir_names == ("x", "y") and np.array_equal(model.dir_lengths, [L, L])
    assert np.array_equal(model.phase, np.where((lat.coords.sum(axis=1) % 2) == 0, 1, -1))
    assert model.phase.dtype == np.int8 and model.bond_sites.dtype == np.int32
    assert model.term_start.dtype == np.int32 and model.term_bonds.dtype == np.int32
    assert model.term_start[0] == 0 and model.term_start[-1] == len(model.term_bonds)
    assert np.all(model.term_coupling > 0)
    assert model.vbs_bonds.shape == (32, 2) and model.n_vbs_dirs == 2
    assert not model.open_boundaries and model.lattice_kind == "square"
    assert np.all(model.phase[model.bond_sites[:, 0]] != model.phase[model.bond_sites[:, 1]])
    for arr in (model.bond_sites, model.bond_disp, model.term_bonds, model.site_coords):
        assert arr.flags.c_contiguous
    assert compile_model(*jq2(L, 1.0, 0.5, boundary="open")).open_boundaries


def test_zero_coupling_keeps_group():
    model = compile_model(*jq2(4, J=1.0, Q=0.0))
    assert model.group_names == ("nn", "q2")
    assert model.group_constant.tolist() == [8.0, 0.0]
    assert model.n_terms == 32 and model.max_bonds_per_term == 1


def test_group_name_suffixes():
    lat = build_lattice("square", 4)
    model = compile_model(lat, [HeisenbergTerm("x", 1.0), HeisenbergTerm("x", 0.5), HeisenbergTerm("y", 1.0),
                                ProjectorProductTerm("plaquette-pair", 1.0)])
    assert model.group_names == ("x", "x#2", "y", "q2")
    assert len(model.bond_sites) == 32  # the doubled x class shares its bonds


def test_round_trip_arrays():
    for model in (compile_model(*jq3(4, 1.0, 1.0)),
                  compile_model(*heisenberg("honeycomb", (3, 2), boundary="open")),
                  compile_model(Lattice.from_bonds(4, [[0, 1], [2, 3]]), [HeisenbergTerm("all", 1.0)])):
        back = CompiledModel.from_arrays(model.to_arrays())
        for name in CompiledModel.__dataclass_fields__:
            if name == "extra":
                continue
            a, b = getattr(model, name), getattr(back, name)
            if isinstance(a, np.ndarray):
                assert a.dtype == b.dtype and np.array_equal(a, b), name
            else:
                assert a == b, name


def test_explicit_lattice_model():
    lat = Lattice.from_bonds(4, [[0, 1], [1, 2], [2, 3]])
    model = compile_model(lat, [HeisenbergTerm("all", 2.0)])
    assert model.n_dirs == 0 and model.linear_size == 0 and model.bond_disp.shape == (3, 0)
    assert model.open_boundaries and model.lattice_kind == "explicit"
    assert model.energy_constant == pytest.approx(3 * 2.0 / 4)


@pytest.mark.parametrize(
    "terms, where, text",
    [
        ([], "terms", "no terms"),
        ([HeisenbergTerm("nnn", 1.0)], "terms[0].bonds", "did you mean 'nn'"),
        ([HeisenbergTerm("nn", 1.0), HeisenbergTerm("x", -1.0, name="fm")], "terms[1].coupling",
         "term 1 ('fm')"),
        ([ProjectorProductTerm("plaquette-pair", -0.1)], "terms[0].coupling", "Q >= 0"),
        ([HeisenbergTerm("nn", float("nan"))], "terms[0].coupling", "finite"),
        ([HeisenbergTerm("nn", 0.0), ProjectorProductTerm("bond", 0)], "terms", "every coupling is zero"),
        ([HeisenbergTerm("nn", 1.0, name="a/b")], "terms[0].name", "'/'"),
        (["nn"], "terms[0]", "HeisenbergTerm"),
    ],
)
def test_compile_errors(terms, where, text):
    with pytest.raises(ModelError) as err:
        compile_model(build_lattice("square", 4), terms)
    assert err.value.where == where
    assert text in str(err.value)


def test_empty_class_is_an_error():
    lat = Lattice.from_bonds(4, [[0, 1], [2, 3]], classes=["a", "a"])
    lat.bond_classes["b"] = np.zeros((0, 2), np.int32)  # an empty class, e.g. from user data
    lat.bond_disps["b"] = np.zeros((0, 0))
    with pytest.raises(ModelError, match="no bonds") as err:
        compile_model(lat, [HeisenbergTerm("a", 1.0), HeisenbergTerm("b", 1.0)])
    assert err.value.where == "terms[1].bonds"


def test_same_sublattice_bond_is_rejected():
    lat = build_lattice("square", 4)
    lat.bond_classes["bad"] = np.array([[0, 2]], np.int32)  # next-nearest neighbours, same sublattice
    lat.bond_disps["bad"] = np.array([[2.0, 0.0]])
    with pytest.raises(ModelError) as err:
        compile_model(lat, [HeisenbergTerm("nn", 1.0), HeisenbergTerm("bad", 1.0)])
    assert err.value.where == "terms[1].bonds"
    assert "(0, 2)" in err.value.message and "term 1 ('bad')" in err.value.message


# ------------------------------------------------------------------------------ exact small Hamiltonians


def test_four_site_ring_ground_state():
    """Exact: on a 4-site ring H = (J/2)(S_tot^2 - S_A^2 - S_B^2) with A, B the two sublattice pairs,
    so E0 = (J/2)(0 - 2 - 2) = -2J."""
    J = 1.3
    h = hamiltonian_from_compiled(compile_model(*heisenberg("chain", 4, J=J)))
    assert np.linalg.eigvalsh(h)[0] == pytest.approx(-2 * J)


def test_six_site_ring_ground_state():
    """From memory: the 6-site Heisenberg ring has E0 = -2.8027756 J; the operator is also checked against
    a direct S.S construction."""
    model = compile_model(*heisenberg("chain", 6))
    h = hamiltonian_from_compiled(model)
    direct = sum(sdot(6, i, (i + 1) % 6) for i in range(6))
    assert np.allclose(h, direct.toarray())
    assert np.linalg.eigvalsh(h)[0] == pytest.approx(-2.8027756, abs=1e-6)


def test_two_by_two_torus_doubles_bonds():
    """Common practice, no source: on the 2 x 2 torus every nearest-neighbour pair is joined twice (once
    directly, once across the boundary), so H = 2 x (4-site ring) and E0 = -4J."""
    h = hamiltonian_from_compiled(compile_model(*heisenberg("square", 2)))
    assert np.linalg.eigvalsh(h)[0] == pytest.approx(-4.0)


def test_jq2_operator_matches_direct_construction():
    """H = J sum S.S - Q sum_plaquettes (S.S - 1/4)(S.S - 1/4), both orientations, built by explicit loops."""
    lx, ly, J, Q = 4, 2, 0.7, 1.9
    lat = build_lattice("square", (lx, ly))
    model = compile_model(lat, [HeisenbergTerm("nn", J), ProjectorProductTerm("plaquette-pair", Q)])
    n = lx * ly
    eye = sparse.identity(2**n, format="csr")

    def s(x, y):
        return (x % lx) + lx * (y % ly)

    def pair(i, j):
        return sdot(n, i, j) - 0.25 * eye

    direct = 0 * eye
    for x in range(lx):
        for y in range(ly):
            direct = direct + J * (sdot(n, s(x, y), s(x + 1, y)) + sdot(n, s(x, y), s(x, y + 1)))
            direct = direct - Q * pair(s(x, y), s(x + 1, y)) @ pair(s(x, y + 1), s(x + 1, y + 1))
            direct = direct - Q * pair(s(x, y), s(x, y + 1)) @ pair(s(x + 1, y), s(x + 1, y + 1))
    assert np.allclose(hamiltonian_from_compiled(model), direct.toarray())
