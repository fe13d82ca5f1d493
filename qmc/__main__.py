"""``python -m qmc``: the command line (see :mod:`qmc.cli`)."""

from qmc.cli import main

__all__: list[str] = []

if __name__ == "__main__":
    main()
