"""``python -m qmc``: the command line (see :mod:`qmc.cli.main`)."""

from qmc.cli.main import main

__all__: list[str] = []

if __name__ == "__main__":
    main()
