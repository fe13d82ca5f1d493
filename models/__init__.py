"""Sign-problem-free S=1/2 and SU(N) Hamiltonians: lattices, terms, and their compilation for the SSE engine.

Lattices are declared as data (:mod:`models.unit_cell`, the built-in kinds in :mod:`models.catalog`) and
tiled by one builder (:mod:`models.tiling`).  Pure Python + numpy.  Typical use::

    from qmc.models import compile_model, jq2
    model = compile_model(*jq2(16, J=1.0, Q=0.5))
"""

from .catalog import LATTICES
from .compile import MAX_COLOURS, compile_model, group_names
from .compiled import CompiledModel
from .errors import ModelError
from .lattice import BOUNDARIES, LATTICE_KINDS, Lattice, build_lattice, tile_lattice
from .named import NAMED_MODELS, bilayer, columnar_dimer, heisenberg, jq2, jq3, ladder
from .shapes import SHAPE_LATTICES, SHAPES, parse_shape, place_shape, rotations, translate_shape
from .terms import FieldTerm, HeisenbergTerm, ProjectorProductTerm, ProjectorTerm, Term, XXZTerm
from .unit_cell import Site, UnitCell

__all__ = [
    "BOUNDARIES", "CompiledModel", "FieldTerm", "HeisenbergTerm", "LATTICES", "LATTICE_KINDS", "Lattice",
    "MAX_COLOURS", "ModelError", "NAMED_MODELS", "ProjectorProductTerm", "ProjectorTerm", "SHAPES",
    "SHAPE_LATTICES", "Site", "Term", "UnitCell", "bilayer",
    "build_lattice", "columnar_dimer", "compile_model", "group_names", "heisenberg", "jq2", "jq3",
    "ladder", "parse_shape", "place_shape", "rotations", "tile_lattice", "translate_shape", "XXZTerm",
]
