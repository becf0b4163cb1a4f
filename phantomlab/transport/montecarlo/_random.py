"""Counter-free, per-batch random streams for the Monte Carlo kernels (layer 2).

Each batch of photons owns one xoroshiro128+ generator (Blackman & Vigna 2018, "Scrambled
linear pseudorandom number generators", arXiv:1805.01407; ACM TOMS 47:36, 2021) whose
128-bit state is drawn from :class:`numpy.random.SeedSequence` spawned once per batch.
A batch's numbers therefore depend only on ``(seed, batch index)``, never on which thread
runs it, which is what makes a fixed seed give identical tallies on any number of threads.

The uniform double is built from the top 53 bits, ``(x >> 11) * 2**-53``, so it lies in
[0, 1); the kernels use ``1 - u`` where a value in (0, 1] is needed (logarithms).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["batch_states", "next_uint64", "uniform"]

_SHIFT_A = np.uint64(24)
_SHIFT_B = np.uint64(16)
_ROT_C = np.uint64(37)
_SIXTY_FOUR = np.uint64(64)
_MANTISSA_SHIFT = np.uint64(11)
_TWO_TO_MINUS_53 = 1.0 / 9007199254740992.0


@njit(cache=True, inline="always")
def _rotl(x, k):
    return (x << k) | (x >> (_SIXTY_FOUR - k))


@njit(cache=True, inline="always")
def next_uint64(state):
    """Advance a xoroshiro128+ state (uint64[2], updated in place); return 64 bits."""
    s0 = state[0]
    s1 = state[1]
    result = s0 + s1
    s1 ^= s0
    state[0] = _rotl(s0, _SHIFT_A) ^ s1 ^ (s1 << _SHIFT_B)
    state[1] = _rotl(s1, _ROT_C)
    return result


@njit(cache=True, inline="always")
def uniform(state):
    """A uniform double in [0, 1) from the generator ``state`` (uint64[2])."""
    return float(next_uint64(state) >> _MANTISSA_SHIFT) * _TWO_TO_MINUS_53


def batch_states(seed: int, batches: int) -> np.ndarray:
    """One independent generator state per batch, shape (batches, 2), dtype uint64.

    Parameters
    ----------
    seed : int
        Non-negative master seed.
    batches : int
        Number of independent streams.

    Returns
    -------
    ndarray of uint64, shape (batches, 2)
        Never all-zero rows (the one forbidden xoroshiro state).
    """
    children = np.random.SeedSequence(int(seed)).spawn(int(batches))
    states = np.empty((int(batches), 2), dtype=np.uint64)
    for index, child in enumerate(children):
        words = child.generate_state(2, dtype=np.uint64)
        if words[0] == 0 and words[1] == 0:  # probability 2**-128; keep the state legal
            words[1] = np.uint64(0x9E3779B97F4A7C15)
        states[index] = words
    return states
