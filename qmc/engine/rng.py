"""Explicit, checkpointable random numbers for the numba kernels: xoshiro256**.

The generator state is four uint64 words held in a plain numpy array, so it can be saved and restored
bit-exactly (numba's global RNG cannot).  Kernels copy the words into local scalars, draw with
:func:`next_double`, and write the words back at the end.

Algorithm: xoshiro256** 1.0 (Blackman and Vigna, "Scrambled linear pseudorandom number generators",
ACM Trans. Math. Softw. 47, 36 (2021)).  Doubles are the top 53 bits times 2^-53, uniform on [0, 1).

Independent streams: :func:`stream_seed` feeds the master seed and a canonical text key (task parameters and
replica index) to ``numpy.random.SeedSequence``; the stream depends on nothing else (not on MPI rank,
task order or number of processes).
"""

from __future__ import annotations

import hashlib

import numpy as np
from numba import njit

__all__ = ["stream_seed", "next_double", "load_state", "draw_doubles"]

_U = np.uint64
_R = np.float64(1.0 / 9007199254740992.0)  # 2^-53


@njit(inline="always")
def _rotl(x, k):
    return (x << _U(k)) | (x >> _U(64 - k))


@njit(inline="always")
def next_double(s0, s1, s2, s3):
    """Advance the state (four uint64 scalars) and return (u, s0, s1, s2, s3), u uniform in [0, 1)."""
    result = _rotl(s1 * _U(5), 7) * _U(9)
    t = s1 << _U(17)
    s2 ^= s0
    s3 ^= s1
    s1 ^= s2
    s0 ^= s3
    s2 ^= t
    s3 = _rotl(s3, 45)
    return np.float64(result >> _U(11)) * _R, s0, s1, s2, s3


@njit(inline="always")
def load_state(state):
    """The four words of a uint64[4] state array as scalars."""
    return state[0], state[1], state[2], state[3]


@njit(cache=True)
def draw_doubles(state, n):
    """Draw n doubles from ``state`` (advancing it in place); used by tests of the generator."""
    s0, s1, s2, s3 = load_state(state)
    out = np.empty(n, dtype=np.float64)
    for i in range(n):
        u, s0, s1, s2, s3 = next_double(s0, s1, s2, s3)
        out[i] = u
    state[0] = s0
    state[1] = s1
    state[2] = s2
    state[3] = s3
    return out


def stream_seed(master_seed: int, key: str) -> np.ndarray:
    """Four uint64 state words for the stream identified by ``key`` under ``master_seed``.

    ``key`` is hashed (SHA-256) into 32-bit words used as the SeedSequence spawn key, so different keys give
    statistically independent streams and the same (seed, key) always gives the same stream.
    """
    if master_seed < 0:
        raise ValueError("master seed must be a non-negative integer")
    digest = hashlib.sha256(key.encode()).digest()
    spawn_key = tuple(int.from_bytes(digest[i : i + 4], "little") for i in range(0, 32, 4))
    seq = np.random.SeedSequence(entropy=int(master_seed), spawn_key=spawn_key)
    words = seq.generate_state(4, dtype=np.uint64)
    if not np.any(words):  # the all-zero state is the one forbidden state of xoshiro
        words[0] = np.uint64(0x9E3779B97F4A7C15)
    return words.astype(np.uint64)
