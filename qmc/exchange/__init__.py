"""Replica exchange in memory: the chains of an exchange group side by side, with swaps.

- :mod:`qmc.exchange.rule`     the acceptance rule of a swap between two couplings
- :mod:`qmc.exchange.ladder`   the ladder: chains in lockstep, swap rounds, walkers; checks of a group
- :mod:`qmc.exchange.team`     the processes that run one ladder (blocks of chains, their communicator)
- :mod:`qmc.exchange.meeting`  the ladder protocol: what team members say to each other, and when
- :mod:`qmc.exchange.records`  what a ladder keeps in its task files (/exchange group, checkpoints)

Running a ladder with its task files is :mod:`qmc.run.ladder_run`.
"""

__all__: list[str] = []
