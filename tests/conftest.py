"""Test-suite setup.

* Makes the helper modules in tests/ importable by plain name (``helpers.*``; test modules import from
  there, never from each other).
* ``make_config``: a small configuration file in ``tmp_path`` from keyword overrides (helpers.configs).
* Defaults OpenBLAS to one thread (``OPENBLAS_NUM_THREADS``, unless already set): the dense
  diagonalizations of the exact reference run several times slower with two BLAS threads as soon as
  another process shares the two cores.  Must happen before numpy is first imported.
"""

import os
import sys

import pytest

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

_HERE = os.path.dirname(os.path.abspath(__file__))
if _HERE not in sys.path:
    sys.path.insert(0, _HERE)


@pytest.fixture
def make_config(tmp_path):
    """Builds a small configuration in the test's ``tmp_path`` from keyword overrides and returns its path:
    ``make_config("c.toml", seed=5, scan={"L": [4], "beta": 1.0}, warmup_steps=50, measure_steps=1000,
    bins=20)``; see helpers.configs.config_text for every keyword (lattice, size, terms, exchange, ...)."""
    from helpers.configs import write_config

    def make(name: str = "config.toml", **kw):
        return write_config(tmp_path, name, **kw)

    return make
