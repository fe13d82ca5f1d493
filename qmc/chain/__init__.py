"""One Markov chain: the simulation state, its observables and the alias tables of the diagonal update."""

__all__: list[str] = []
