"""Test-suite setup.

* Makes the helper modules in tests/ importable by plain name.
* Defaults OpenBLAS to one thread (``OPENBLAS_NUM_THREADS``, unless already set): the dense
  diagonalizations of the exact reference run several times slower with two BLAS threads as soon as
  another process shares the two cores.  Must happen before numpy is first imported.
"""

import os
import sys

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

_HERE = os.path.dirname(os.path.abspath(__file__))
if _HERE not in sys.path:
    sys.path.insert(0, _HERE)
