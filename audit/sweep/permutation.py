"""A keyed pseudo-random permutation of 0..N-1 that maps any index without storing the others.

The Latin hypercube needs, on every axis, a random permutation of its N strata. Drawing one
with ``Generator.permutation(N)`` holds N integers per axis and forces all points to be made
together. Instead each index is sent through a balanced Feistel network on the smallest even
number of bits that covers N (at most 4N values), repeating the network while the result is
N or more ("cycle walking"). A Feistel network is a bijection whatever its round function, and
cycle walking keeps it one on 0..N-1, so the result is a true permutation; with four rounds of
a well-mixing round function it behaves like a random one for a design's purposes.
"""
from __future__ import annotations

import numpy as np

#: Four rounds: the number after which a Feistel network with good round functions is
#: indistinguishable from a random permutation (Luby–Rackoff).
ROUNDS = 4


def permutation_keys(rng: np.random.Generator, axes: int) -> np.ndarray:
    """(axes, ROUNDS) uint64 round keys, drawn from ``rng``."""
    return rng.integers(0, np.iinfo(np.uint64).max, size=(axes, ROUNDS), dtype=np.uint64, endpoint=True)


def keyed_permutation(index: np.ndarray, size: int, keys: np.ndarray) -> np.ndarray:
    """π(index) for the permutation π of 0..size-1 defined by ``keys``.

    Args:
        index: integers in 0..size-1, any shape.
        size: N ≥ 1.
        keys: (ROUNDS,) uint64 round keys.

    Returns:
        int64 array of the same shape: distinct indices give distinct results.
    """
    half_bits = max(1, ((size - 1).bit_length() + 1) // 2)
    flat = np.asarray(index, dtype=np.uint64).ravel()
    result = np.empty_like(flat)
    pending = np.arange(flat.size)
    current = flat
    while pending.size:
        current = _feistel(current, half_bits, keys)
        inside = current < size
        result[pending[inside]] = current[inside]
        pending, current = pending[~inside], current[~inside]
    return result.astype(np.int64).reshape(np.shape(index))


def _feistel(value: np.ndarray, half_bits: int, keys: np.ndarray) -> np.ndarray:
    mask = np.uint64((1 << half_bits) - 1)
    shift = np.uint64(half_bits)
    left, right = value >> shift, value & mask
    for key in keys:
        left, right = right, left ^ (_mix(right ^ key) & mask)
    return (left << shift) | right


def _mix(value: np.ndarray) -> np.ndarray:
    """The splitmix64 finaliser: every input bit affects every output bit (uint64 wraps)."""
    value = (value ^ (value >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    value = (value ^ (value >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return value ^ (value >> np.uint64(31))
