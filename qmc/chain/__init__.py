"""One Markov chain: the simulation state, its observables, the alias tables of the diagonal update, and
what is judged from its bins alone (binning errors, precision targets, beta doubling)."""

__all__: list[str] = []
