"""Configuration: the TOML schema and parser, expressions of scan names, scan expansion, example templates."""

__all__: list[str] = []
