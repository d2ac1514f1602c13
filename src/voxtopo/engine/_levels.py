"""Float values over few distinct levels, replaced by their level numbers.

A distance transform, a float32 reconstruction of integer data or a thresholded field has
few distinct values among many voxels. The engine then runs on the *level* of every voxel
(1 for the smallest distinct value, 2 for the next, ...) in uint16 or uint32: the order
``(value, flat index)`` is the same, so the pairs and their locations are the same, and
integer levels take the engine's lighter path (counting sorts, ranks composed from value
and index, :mod:`voxtopo.engine._reduction`) instead of sorting the floats and holding
their ranks and order. The pairs' values are read back from the float values at their
locations (:mod:`voxtopo.engine.own`), so nothing is rounded.

The distinct values are found in one pass with an open-addressing hash set of their
order-preserving integer keys, which stops as soon as there are more than
:data:`MOST_LEVELS`; a second pass writes each voxel's level.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["float_levels", "MOST_LEVELS"]

#: Most distinct values replaced by levels (uint16 up to 2^16 of them, else uint32); the
#: hash set, kept at most half full, then holds at most 2^23 slots of 9 bytes (float64).
MOST_LEVELS = 1 << 22

#: Multiplier of the hash (Knuth's multiplicative hashing, the 64-bit golden ratio).
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)


@njit(cache=True, inline="always")
def order_key(bits, top, ones):
    """Order-preserving unsigned key of a float's raw bits (``top``: the sign bit,
    ``ones``: all bits of the float's width, both of its unsigned type); -0.0 and 0.0 get
    the same key."""
    if bits == top:
        bits = bits ^ top
    # numba widens ``~`` of a uint32 to 64 bits, so the bits are flipped by ``ones``
    return bits ^ ones if bits & top else bits | top


@njit(cache=True, inline="always")
def _shift(slots):
    """64 - log2(slots): the top bits of the product pick one of ``slots`` slots."""
    shift = 64
    while slots > 1:
        slots >>= 1
        shift -= 1
    return shift


@njit(cache=True, inline="always")
def _slot(key, shift):
    return np.int64((np.uint64(key) * _GOLDEN) >> np.uint64(shift))


@njit(cache=True, nogil=True)
def _distinct_keys(raw, start, top, ones, table, used, count):
    """Put the distinct keys of ``raw[start:]`` into ``table`` (``used`` marks the filled
    slots, ``count`` of them) until it is half full; return (where it stopped, count)."""
    shift = _shift(table.size)
    mask = table.size - 1
    full = table.size >> 1
    for v in range(start, raw.size):
        key = order_key(raw[v], top, ones)
        s = _slot(key, shift)
        while used[s] and table[s] != key:
            s = (s + 1) & mask
        if not used[s]:
            if count == full:
                return v, count
            used[s] = True
            table[s] = key
            count += 1
    return raw.size, count


@njit(cache=True, nogil=True)
def _number_slots(table, used, keys, numbers):
    """``numbers[s]``: 1 + the position of ``table[s]`` among the sorted distinct ``keys``."""
    for s in range(table.size):
        if used[s]:
            numbers[s] = np.searchsorted(keys, table[s]) + 1


@njit(cache=True, nogil=True)
def _write_levels(raw, top, ones, table, used, numbers, levels):
    shift = _shift(table.size)
    mask = table.size - 1
    for v in range(raw.size):
        key = order_key(raw[v], top, ones)
        s = _slot(key, shift)
        while table[s] != key or not used[s]:
            s = (s + 1) & mask
        levels[v] = numbers[s]


def float_levels(values: np.ndarray, most: int | None = None):
    """The level number of every value of a float array, in its shape, and the value of
    each level; None when the values are not floats or have more than ``most`` distinct
    values (default :data:`MOST_LEVELS`).

    Levels count the distinct values from 1 for the smallest, so that ``levels[a] <
    levels[b]`` exactly when ``values[a] < values[b]``; 0 is left free, so that a copy
    padded below the smallest level (the engine's vertex construction) keeps the type.
    They are uint16 up to 65534 distinct values, else uint32. ``values`` must be finite.

    Returns
    -------
    (levels, level_values) or None
        ``level_values[k]`` is the value of level ``k`` in the input's dtype (-0.0 is
        0.0); ``level_values[0]`` repeats the smallest value.

    Examples
    --------
    >>> levels, level_values = float_levels(np.array([2.5, -1.0, 2.5, 0.0, -0.0]))
    >>> levels.tolist(), level_values[levels].tolist()
    ([3, 1, 3, 2, 2], [2.5, -1.0, 2.5, 0.0, 0.0])
    >>> float_levels(np.arange(5.0), most=4) is None
    True
    """
    most = MOST_LEVELS if most is None else int(most)
    if values.dtype.kind != "f" or values.dtype.itemsize not in (4, 8) or values.size == 0:
        return None
    unsigned = np.uint32 if values.dtype.itemsize == 4 else np.uint64
    raw = np.ascontiguousarray(values).reshape(-1).view(unsigned)
    top = unsigned(1 << (8 * values.dtype.itemsize - 1))
    ones = unsigned((1 << (8 * values.dtype.itemsize)) - 1)
    table = np.zeros(1 << 12, dtype=unsigned)
    used = np.zeros(table.size, dtype=np.bool_)
    start, count = _distinct_keys(raw, 0, top, ones, table, used, 0)
    while start < raw.size:  # half full: twice the slots, the keys put in again
        if count >= most:
            return None
        keys = table[used]
        table = np.zeros(2 * table.size, dtype=unsigned)
        used = np.zeros(table.size, dtype=np.bool_)
        _, count = _distinct_keys(keys, 0, unsigned(0), unsigned(0), table, used, 0)
        start, count = _distinct_keys(raw, start, top, ones, table, used, count)
    if count > most:
        return None
    keys = np.sort(table[used])
    numbers = np.zeros(table.size, dtype=np.uint32)
    _number_slots(table, used, keys, numbers)
    levels = np.empty(raw.size, dtype=np.uint16 if count < (1 << 16) - 1 else np.uint32)
    _write_levels(raw, top, ones, table, used, numbers, levels)
    # the keys back to the floats' bits (the inverse of order_key), level 0 repeating level 1
    keys = np.concatenate([keys[:1], keys])
    bits = np.where(keys & top, keys ^ top, keys ^ ones)
    return levels.reshape(values.shape), bits.view(values.dtype)
