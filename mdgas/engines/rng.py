"""A checkpointable random-number generator for compiled kernels.

xoshiro256** (Blackman & Vigna 2018) on a ``uint64[4]`` state array that lives in the
engine state, so a run resumed from a checkpoint draws exactly the same numbers as
the uninterrupted run. numba's own ``np.random`` inside kernels keeps hidden
per-thread state that cannot be saved, which is why kernels use this instead.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, uint64

_MASK = np.uint64(0xFFFFFFFFFFFFFFFF)


def seed_state(seed: int, stream: int = 0) -> np.ndarray:
    """Expand an integer seed (and a stream number) into a xoshiro256** state."""
    x = (int(seed) * 0x9E3779B97F4A7C15 + int(stream) * 0xD1B54A32D192ED03 + 1) & 0xFFFFFFFFFFFFFFFF
    out = np.empty(4, dtype=np.uint64)
    for i in range(4):  # splitmix64, the seeding recommended by the xoshiro authors
        x = (x + 0x9E3779B97F4A7C15) & 0xFFFFFFFFFFFFFFFF
        z = x
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & 0xFFFFFFFFFFFFFFFF
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & 0xFFFFFFFFFFFFFFFF
        out[i] = z ^ (z >> 31)
    return out


@njit(cache=True, inline="always")
def _rotl(x, k):
    return (x << uint64(k)) | (x >> uint64(64 - k))


@njit(cache=True)
def next_u64(s):
    result = _rotl(s[1] * uint64(5), 7) * uint64(9)
    t = s[1] << uint64(17)
    s[2] ^= s[0]
    s[3] ^= s[1]
    s[1] ^= s[2]
    s[0] ^= s[3]
    s[2] ^= t
    s[3] = _rotl(s[3], 45)
    return result


@njit(cache=True)
def uniform(s):
    """Uniform float64 in the open interval (0, 1)."""
    return ((next_u64(s) >> uint64(11)) + 0.5) * (1.0 / 9007199254740992.0)


@njit(cache=True)
def normal(s):
    """Standard normal deviate (Box-Muller; one of the pair is discarded for simplicity)."""
    u1 = uniform(s)
    u2 = uniform(s)
    return math.sqrt(-2.0 * math.log(u1)) * math.cos(2.0 * math.pi * u2)
