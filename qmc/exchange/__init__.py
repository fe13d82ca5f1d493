"""Replica exchange: the acceptance rule, ladders of chains, and the ranks that run one ladder."""

__all__: list[str] = []
