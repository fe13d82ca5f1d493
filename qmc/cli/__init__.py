"""The ``qmc`` command line."""

__all__: list[str] = []
