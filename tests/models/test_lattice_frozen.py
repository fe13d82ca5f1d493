"""The built-in lattices are bit-identical to the ones built before lattices became declarations.

``tests/data/lattices_before_declaration.npz`` holds every array of every built-in lattice kind at a few
sizes and both boundary kinds, as built by commit c48469a (the per-kind builders, before the unit-cell
declarations of ``models/unit_cell.py``), together with the placements of the two named projector shapes on
the square-type lattices.  Site numbering, bond order inside each class, the order of the classes,
displacements, coordinates, sublattices and the dimer pattern must all be reproduced exactly: the
Monte Carlo chain depends on every one of them (tests/chain/test_stored_bins.py checks the chain itself).

The file was written once with ``PYTHONPATH=tests python tests/models/test_lattice_frozen.py --write`` at that
commit; the data, not the old code, is what the test keeps.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest
from helpers.paths import DATA
from qmc.models import build_lattice, place_shape

FROZEN = DATA / "lattices_before_declaration.npz"

#: (kind, size, boundary); periodic length 2 is included because it keeps both bonds (0, 1) and (1, 0)
CASES = [
    *[("chain", (n,), "periodic") for n in (2, 4, 6)],
    *[("chain", (n,), "open") for n in (2, 5, 6)],
    *[("square", s, "periodic") for s in ((2, 2), (4, 4), (4, 6), (6, 2))],
    *[("square", s, "open") for s in ((2, 3), (3, 5), (4, 4))],
    *[("bilayer", s, "periodic") for s in ((2, 2), (4, 4), (4, 2))],
    *[("bilayer", s, "open") for s in ((2, 2), (3, 4))],
    *[("honeycomb", s, "periodic") for s in ((2, 2), (3, 5), (4, 4))],
    *[("honeycomb", s, "open") for s in ((2, 3), (3, 4))],
    *[("cubic", s, "periodic") for s in ((2, 2, 2), (2, 4, 2), (4, 4, 6))],
    *[("cubic", s, "open") for s in ((2, 3, 4), (3, 3, 3))],
]
_FIELDS = ("n_sites", "sublattice", "coords", "dir_lengths", "vbs_bonds", "vbs_dir", "vbs_phase",
           "n_vbs_dirs", "sites_per_cell", "cell_stride", "sub_stride")
_SHAPES = ("plaquette-pair", "column-of-three")


def _case_key(kind: str, size: tuple[int, ...], boundary: str) -> str:
    return f"{kind}|{'x'.join(map(str, size))}|{boundary}"


def lattice_arrays(kind: str, size: tuple[int, ...], boundary: str) -> dict[str, np.ndarray]:
    """Every array of one built lattice (and its shape placements), keyed ``kind|size|boundary|field``."""
    lat = build_lattice(kind, size, boundary)
    pre = _case_key(kind, size, boundary) + "|"
    out = {pre + f: np.asarray(getattr(lat, f)) for f in _FIELDS}
    out[pre + "dir_names"] = np.array(lat.dir_names, dtype="U8")
    out[pre + "classes"] = np.array(list(lat.bond_classes), dtype="U32")
    for name in lat.bond_classes:
        out[pre + f"class:{name}:sites"] = lat.bond_classes[name]
        out[pre + f"class:{name}:disps"] = lat.bond_disps[name]
    if kind in ("square", "bilayer"):
        for shape in _SHAPES:
            try:
                sites, disp = place_shape(lat, shape)
            except Exception:  # e.g. a column of three wraps onto itself on a short torus
                continue
            out[pre + f"shape:{shape}:sites"] = sites
            out[pre + f"shape:{shape}:disps"] = disp
    return out


def _stored() -> dict[str, np.ndarray]:
    with np.load(FROZEN) as z:
        return {k: z[k] for k in z.files}


@pytest.mark.parametrize("case", CASES, ids=[_case_key(*c) for c in CASES])
def test_lattice_matches_stored(case) -> None:
    stored = {k: v for k, v in _stored().items() if k.startswith(_case_key(*case) + "|")}
    assert stored, f"no stored arrays for {case}"
    got = lattice_arrays(*case)
    assert sorted(got) == sorted(stored)
    for key, want in stored.items():
        have = got[key]
        assert have.dtype == want.dtype, key
        np.testing.assert_array_equal(have, want, err_msg=key)


if __name__ == "__main__":
    if sys.argv[1:] != ["--write"]:
        sys.exit("usage: PYTHONPATH=tests python tests/models/test_lattice_frozen.py --write"
                 "   (overwrites the stored lattices)")
    arrays: dict[str, np.ndarray] = {}
    for c in CASES:
        arrays.update(lattice_arrays(*c))
    np.savez_compressed(FROZEN, **arrays)
    print(f"wrote {len(arrays)} arrays to {FROZEN}")
