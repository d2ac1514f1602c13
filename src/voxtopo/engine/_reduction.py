"""Dimension 1 of a 3D volume by a cohomology reduction over an implicit cubical complex.

Loops (tunnels, handles) of a sublevel filtration cannot be had from a union-find, so this
module reduces a coboundary matrix, but never builds it: every cell is addressed by index
arithmetic, its value is read from the voxels around it, and only the columns that really
need a reduction leave a trace in memory.

The complex
-----------
Cells live in the doubled grid: a cell has coordinates ``c = (c0, c1, c2)`` and its
dimension is the number of odd coordinates. Grid corners sit at even coordinates.

* ``"vertex"`` construction (6-neighbourhood; gudhi's ``vertices``): voxel ``i`` is the
  vertex ``c = 2 i``; the grid runs over ``0 .. 2 n - 2`` and a cell takes the largest
  value of its vertices.
* ``"voxel"`` construction (26-neighbourhood; gudhi's ``top_dimensional_cells``): voxel
  ``i`` is the cube ``c = 2 i + 1``; the grid runs over ``0 .. 2 n`` (the closed box) and
  a cell takes the smallest value of the cubes it bounds.

Order of the filtration and tie rule
------------------------------------
Voxels are ranked once by ``(value, C-order flat index)`` (a stable sort; a counting sort
for 8- and 16-bit data). Every cell takes the *rank* of the voxel its value comes from
(vertex construction: the highest-ranked vertex; voxel construction: the lowest-ranked
cube around it): its *representative voxel*. Cells are ordered by

    (rank of the representative voxel, dimension, offset code)

where the offset code ``9 (o0 + 1) + 3 (o1 + 1) + (o2 + 1)`` numbers the position
``o = c - centre(voxel)`` in ``{-1, 0, 1}^3`` of the cell around its voxel. A face never
has a higher rank than its coface (it has fewer vertices, or bounds more cubes) and has a
lower dimension, so this order puts faces before cofaces; it orders values like the
filtration does, so its persistence pairs have the same values as any other valid order
(gudhi's included). A cell of a given dimension is identified by its *key*
``32 * rank + code``: comparing keys is comparing positions in the filtration, and the key
gives the cell back through the sorted voxel list.

The reduction
-------------
Cohomology (de Silva, Morozov & Vejdemo-Johansson 2011, "Dualities in persistent
(co)homology"): edges are visited from the last to the first; the column of an edge is
its coboundary (the at most four squares around it) and its pivot the earliest square.
Clearing (Chen & Kerber 2011, "Persistent homology computation with a twist"): an edge
that joins two components of the sublevel set kills a dimension-0 class, so its column is
zero and is skipped. Most of these edges are found in one pass in memory order, from the
3x3x3 block around each voxel alone (where the cells present before the voxel are
connected within its cube, an own edge joins two components exactly when one end lies
in a part made of the voxel's own corners only); a union-find over the grid corners, its
links set by that pass, decides the rest in value order (the dimension-0 *diagram*
itself comes from ``_union_find.py``).
Apparent and emergent pairs (Bauer 2021, "Ripser: efficient computation of Vietoris-Rips
persistence barcodes", J. Appl. Comput. Topol.): when the earliest square of an edge's
coboundary is the pivot of no column visited before, the edge pairs with it at once, with
no reduction; in the voxel construction that square is always a face of the edge's own
cube, found from the edge's code alone. One bit per square says whether it is already a
pivot. The column that owns such a square needs no table either: it is the first-visited
of the square's (at most four) edges, not cleared, whose earliest square it is. Only
columns that needed an addition are remembered, in a hash table from their pivot square
to the reduced column itself, so memory grows with the number of truly reduced columns,
not with the volume.

Memory per voxel. Integer values in the voxel construction (8- and 16-bit scans, and the
padded copies through which their vertex construction is reduced) need no array of ranks: a
voxel's rank is *composed* as ``(level << b) | v`` from its value's level and its flat
index ``v`` (``b`` bits), which orders the voxels exactly as ``(value, flat index)`` and
gives the voxel back from the rank with a mask. They hold one 32-bit word of flags per
voxel (own edges left by the clearing, squares already a pivot) and, during the clearing
only, a union-find parent per grid corner. Other values hold their ranks (4 bytes up to
2^31 voxels, else 8) and the sorted order (4), which takes over the clearing's buffer.
The reduced columns kept take 5 bytes an entry (the cell's voxel and code; its key is
composed again on reading), in a pool grown in place, and the pivot table 16 bytes a
slot; both grow with the columns that really needed a reduction (measured and planned in
:func:`phase_bytes`).

Coefficients are Z/2. Without periodic boundaries the box is contractible, so every loop
dies and there are no essential dimension-1 classes.
"""

from __future__ import annotations

import itertools
import threading

import numpy as np
from numba import njit

from ..errors import InputError
from . import _levels, _union_find

__all__ = ["pairs_dim1", "pairs_dim1_explicit", "bytes_needed", "phase_bytes",
           "composes_ranks", "scratch_size", "voxel_ranks", "CONSTRUCTIONS"]

CONSTRUCTIONS = ("voxel", "vertex")

#: Bits of a cell key that hold the offset code (27 codes fit in 5 bits).
CODE_BITS = 5
_CODE_MASK = (1 << CODE_BITS) - 1

#: Offset codes of the edges around a voxel, ascending (vertex construction: the six
#: half-edges to the face neighbours; voxel construction: the twelve edges of the cube).
_EDGE_CODES_VERTEX = np.array(
    [9 * (a + 1) + 3 * (b + 1) + (c + 1)
     for a, b, c in itertools.product((-1, 0, 1), repeat=3) if abs(a) + abs(b) + abs(c) == 1],
    dtype=np.int64)
_EDGE_CODES_VOXEL = np.array(
    [9 * (a + 1) + 3 * (b + 1) + (c + 1)
     for a, b, c in itertools.product((-1, 0, 1), repeat=3) if (a, b, c).count(0) == 1],
    dtype=np.int64)


#: Offset codes of the squares around a voxel that can take their value from it.
_SQUARE_CODES_VERTEX = np.array(
    [9 * (a + 1) + 3 * (b + 1) + (c + 1)
     for a, b, c in itertools.product((-1, 0, 1), repeat=3) if abs(a) + abs(b) + abs(c) == 2],
    dtype=np.int64)
_SQUARE_CODES_VOXEL = np.array(
    [9 * (a + 1) + 3 * (b + 1) + (c + 1)
     for a, b, c in itertools.product((-1, 0, 1), repeat=3) if (a, b, c).count(0) == 2],
    dtype=np.int64)

#: Each voxel has one 32-bit word, stored at the voxel's rank so that the sweeps in value
#: order read them in sequence: bits 0-11 say which of its own edges are columns
#: (own and not cleared), bits 12-23 which of its own squares are already a pivot.
_SQUARE_SHIFT = 12

#: Voxel construction (six own squares): bit ``square bit + 12`` (bits 24-29) says that a
#: reduced column with that square as pivot is stored.
_STORED_SHIFT = 12


def _bit_of(codes, first):
    """code -> bit of that cell in a voxel's word (-1: not such a cell)."""
    bit = np.full(27, -1, dtype=np.int64)
    bit[codes] = first + np.arange(codes.size)
    return bit


_EDGE_BIT_VERTEX = _bit_of(_EDGE_CODES_VERTEX, 0)
_EDGE_BIT_VOXEL = _bit_of(_EDGE_CODES_VOXEL, 0)
_SQUARE_BIT_VERTEX = _bit_of(_SQUARE_CODES_VERTEX, _SQUARE_SHIFT)
_SQUARE_BIT_VOXEL = _bit_of(_SQUARE_CODES_VOXEL, _SQUARE_SHIFT)

#: Number of voxel ranks the reduction handles between two progress reports.
_PROGRESS_STEPS = 10

#: Phase name given to the progress callback.
PHASE = "dimension 1"


# --------------------------------------------------------------------------- ranks
#
# ``ranks`` is a tuple ``(levels, offset, sign, bits)`` read by the kernels below. With
# ``bits >= 0`` the ranks are *composed*: the rank of voxel ``v`` is
# ``(sign * levels[v] + offset) << bits | v``, where ``levels`` are the integer values
# themselves, so no array of ranks or of the sorted order is held (8- and 16-bit scans).
# Composed ranks are not consecutive, but they order the voxels exactly as ``(value, flat
# index)`` does, and comparisons are all the reduction makes of them; a voxel's flag word
# then sits at the voxel itself. With ``bits == -1`` ``levels`` holds the ranks
# 0 .. n - 1 (any other values) and the flag words sit at the ranks.


@njit(cache=True, inline="always")
def _level(ranks, v):
    levels, offset, sign, bits = ranks
    return sign * np.int64(levels[v]) + offset


@njit(cache=True, inline="always")
def _rank(ranks, v):
    bits = ranks[3]
    if bits < 0:
        return _level(ranks, v)
    return (_level(ranks, v) << bits) | v


@njit(cache=True, inline="always")
def _voxel(ranks, order, r):
    """The voxel of rank ``r``."""
    bits = ranks[3]
    if bits < 0:
        return np.int64(order[r])
    return r & ((np.int64(1) << bits) - 1)


@njit(cache=True, inline="always")
def _word_at(ranks, r):
    """Position of the flag word of the voxel of rank ``r``."""
    bits = ranks[3]
    if bits < 0:
        return r
    return r & ((np.int64(1) << bits) - 1)


def composed_ranks(flat: np.ndarray, superlevel: bool):
    """``ranks`` composed from integer values (see above), or None when the values are
    not integers or their levels and the voxel indices do not fit in a cell key."""
    if flat.dtype.kind not in "ui" or flat.size == 0:
        return None
    low, high = int(flat.min()), int(flat.max())
    bits = max(1, (flat.size - 1).bit_length())
    if (high - low).bit_length() + bits + CODE_BITS > 62:
        return None
    offset, sign = (high, -1) if superlevel else (-low, 1)
    return flat, np.int64(offset), np.int64(sign), np.int64(bits)


@njit(cache=True, nogil=True)
def _ranks_of(ranks, voxels):
    out = np.empty(voxels.size, dtype=np.int64)
    for j in range(voxels.size):
        out[j] = _rank(ranks, np.int64(voxels[j]))
    return out


# --------------------------------------------------------------------------- cells


@njit(cache=True)
def _cell_key(c0, c1, c2, ranks, n0, n1, n2, vertex):
    """Key ``32 * rank + code`` of the cell at doubled-grid coordinates ``c``."""
    b0 = b1 = b2 = 0
    if vertex:
        best = np.int64(-1)
        for i0 in range(c0 >> 1, ((c0 + 1) >> 1) + 1):
            for i1 in range(c1 >> 1, ((c1 + 1) >> 1) + 1):
                base = (i0 * n1 + i1) * n2
                for i2 in range(c2 >> 1, ((c2 + 1) >> 1) + 1):
                    r = _rank(ranks, base + i2)
                    if r > best:
                        best = r
                        b0, b1, b2 = i0, i1, i2
        code = 9 * (c0 - 2 * b0 + 1) + 3 * (c1 - 2 * b1 + 1) + (c2 - 2 * b2 + 1)
    else:
        best = np.int64(1) << 62
        for i0 in range(max((c0 - 1) >> 1, 0), min(c0 >> 1, n0 - 1) + 1):
            for i1 in range(max((c1 - 1) >> 1, 0), min(c1 >> 1, n1 - 1) + 1):
                base = (i0 * n1 + i1) * n2
                for i2 in range(max((c2 - 1) >> 1, 0), min(c2 >> 1, n2 - 1) + 1):
                    r = _rank(ranks, base + i2)
                    if r < best:
                        best = r
                        b0, b1, b2 = i0, i1, i2
        code = 9 * (c0 - 2 * b0) + 3 * (c1 - 2 * b1) + (c2 - 2 * b2)
    return (best << CODE_BITS) | code


@njit(cache=True, inline="always")
def _own_square_code(code):
    """Voxel construction: code of the earliest of the two faces of a cube that contain
    the cube's edge ``code`` (the face with the smaller code)."""
    o0, o1, o2 = code // 9 - 1, (code // 3) % 3 - 1, code % 3 - 1
    if o0 == 0:
        return min(code - 3 * o1, code - o2)
    if o1 == 0:
        return min(code - 9 * o0, code - o2)
    return min(code - 9 * o0, code - 3 * o1)


@njit(cache=True)
def _earliest_own_coface(i0, i1, i2, code, r, ranks, n0, n1, n2, vertex):
    """Key of the earliest square around an edge that is voxel ``i``'s own (rank ``r``).

    Voxel construction: the other cubes around the edge come later, so the two faces of
    the voxel's own cube that contain the edge have rank ``r`` and the earlier of them (the
    smaller code) is the answer, without reading any rank. Vertex construction: the squares
    spanned with the four face neighbours of the edge's two ends.
    """
    o0, o1, o2 = code // 9 - 1, (code // 3) % 3 - 1, code % 3 - 1
    if not vertex:
        return (np.int64(r) << CODE_BITS) | _own_square_code(code)
    best = np.int64(-1)
    other = ((i0 + o0) * n1 + (i1 + o1)) * n2 + (i2 + o2)
    here = (i0 * n1 + i1) * n2 + i2
    for axis in range(3):
        if (axis == 0 and o0 != 0) or (axis == 1 and o1 != 0) or (axis == 2 and o2 != 0):
            continue
        weight = 9 if axis == 0 else (3 if axis == 1 else 1)
        stride = n1 * n2 if axis == 0 else (n2 if axis == 1 else 1)
        position = i0 if axis == 0 else (i1 if axis == 1 else i2)
        extent = n0 if axis == 0 else (n1 if axis == 1 else n2)
        for t in (-1, 1):
            if position + t < 0 or position + t >= extent:
                continue
            side = _rank(ranks, here + t * stride)
            far = _rank(ranks, other + t * stride)
            if side < r and far < r:
                key = (np.int64(r) << CODE_BITS) | (code + weight * t)
            elif side > far:
                key = (side << CODE_BITS) | (code - weight * t)
            else:
                key = (far << CODE_BITS) | (26 - code - weight * t)
            if best < 0 or key < best:
                best = key
    return best


@njit(cache=True)
def _cell_coords(key, order, ranks, n1, n2, vertex):
    """Doubled-grid coordinates of the cell with ``key``."""
    v = _voxel(ranks, order, key >> CODE_BITS)
    code = key & _CODE_MASK
    i2 = v % n2
    i1 = (v // n2) % n1
    i0 = v // (n1 * n2)
    shift = 0 if vertex else 1
    return (2 * i0 + shift + code // 9 - 1, 2 * i1 + shift + (code // 3) % 3 - 1,
            2 * i2 + shift + code % 3 - 1)


@njit(cache=True, inline="always")
def _marked(key, words, ranks, square_bit):
    """Whether the square ``key`` is already the pivot of a column."""
    return (words[_word_at(ranks, key >> CODE_BITS)] >> square_bit[key & _CODE_MASK]) & 1


@njit(cache=True)
def _coboundary_at(c0, c1, c2, ranks, n0, n1, n2, vertex, out):
    """Write the keys of the squares around the edge at ``c`` into ``out``; return how many."""
    e0, e1, e2 = (2 * n0 - 1, 2 * n1 - 1, 2 * n2 - 1) if vertex else (2 * n0 + 1, 2 * n1 + 1,
                                                                      2 * n2 + 1)
    count = 0
    if c0 % 2 == 0:
        if c0 > 0:
            out[count] = _cell_key(c0 - 1, c1, c2, ranks, n0, n1, n2, vertex)
            count += 1
        if c0 < e0 - 1:
            out[count] = _cell_key(c0 + 1, c1, c2, ranks, n0, n1, n2, vertex)
            count += 1
    if c1 % 2 == 0:
        if c1 > 0:
            out[count] = _cell_key(c0, c1 - 1, c2, ranks, n0, n1, n2, vertex)
            count += 1
        if c1 < e1 - 1:
            out[count] = _cell_key(c0, c1 + 1, c2, ranks, n0, n1, n2, vertex)
            count += 1
    if c2 % 2 == 0:
        if c2 > 0:
            out[count] = _cell_key(c0, c1, c2 - 1, ranks, n0, n1, n2, vertex)
            count += 1
        if c2 < e2 - 1:
            out[count] = _cell_key(c0, c1, c2 + 1, ranks, n0, n1, n2, vertex)
            count += 1
    return count


@njit(cache=True)
def _coboundary(key, order, ranks, n0, n1, n2, vertex, out):
    """Write the keys of the squares around edge ``key`` into ``out``; return how many."""
    c0, c1, c2 = _cell_coords(key, order, ranks, n1, n2, vertex)
    return _coboundary_at(c0, c1, c2, ranks, n0, n1, n2, vertex, out)


@njit(cache=True)
def _boundary(key, order, ranks, n0, n1, n2, vertex, out):
    """Write the keys of the four edges of square ``key`` into ``out``; return 4."""
    c0, c1, c2 = _cell_coords(key, order, ranks, n1, n2, vertex)
    count = 0
    if c0 % 2 == 1:
        out[count] = _cell_key(c0 - 1, c1, c2, ranks, n0, n1, n2, vertex)
        out[count + 1] = _cell_key(c0 + 1, c1, c2, ranks, n0, n1, n2, vertex)
        count += 2
    if c1 % 2 == 1:
        out[count] = _cell_key(c0, c1 - 1, c2, ranks, n0, n1, n2, vertex)
        out[count + 1] = _cell_key(c0, c1 + 1, c2, ranks, n0, n1, n2, vertex)
        count += 2
    if c2 % 2 == 1:
        out[count] = _cell_key(c0, c1, c2 - 1, ranks, n0, n1, n2, vertex)
        out[count + 1] = _cell_key(c0, c1, c2 + 1, ranks, n0, n1, n2, vertex)
        count += 2
    return count


@njit(cache=True, nogil=True)
def _counting_order(flat, offset, levels):
    """Stable counting sort of small non-negative integers ``flat - offset``."""
    counts = np.zeros(levels + 1, dtype=np.int64)
    for v in range(flat.size):
        counts[np.int64(flat[v]) - offset + 1] += 1
    for k in range(levels):
        counts[k + 1] += counts[k]
    order = np.empty(flat.size, dtype=np.int64)
    for v in range(flat.size):
        slot = np.int64(flat[v]) - offset
        order[counts[slot]] = v
        counts[slot] += 1
    return order


def voxel_order(values: np.ndarray) -> np.ndarray:
    """C-order flat voxel indices sorted by ``(value, flat index)``.

    8- and 16-bit data (and integers spanning few levels) take a counting sort; float32
    values a radix sort of their order-preserving bits (int32 indices); the rest numpy's
    stable sort.
    """
    flat = values.reshape(-1)
    if np.issubdtype(flat.dtype, np.integer) and flat.size:
        low, high = int(flat.min()), int(flat.max())
        if high - low < max(1 << 16, flat.size):
            return _counting_order(flat, low, high - low + 1)
    if flat.dtype == np.float32 and _union_find.index_dtype(flat.size) == np.int32:
        return _radix_order(flat.view(np.uint32))
    return np.argsort(flat, kind="stable")


#: The sign bit and all bits of a float32, for its order-preserving key.
_SIGN32 = np.uint32(1 << 31)
_ONES32 = np.uint32(0xFFFFFFFF)

#: Bits of the key sorted per pass of the float32 radix sort (3 passes cover 32 bits).
_RADIX_BITS = 11


@njit(cache=True, nogil=True)
def _radix_order(raw_bits):
    """Flat indices sorted by float32 value (given as its raw bits), ties by index.

    The bits are made order-preserving (negative values: all bits flipped; positive: the
    sign bit set), then a least-significant-digit radix sort in three passes of 11 bits;
    each pass is stable, so equal values keep their index order.
    """
    n = raw_bits.size
    keys = np.empty(n, dtype=np.uint32)
    for v in range(n):  # -0.0 is 0.0: the same key
        keys[v] = _levels.order_key(raw_bits[v], _SIGN32, _ONES32)
    buckets = 1 << _RADIX_BITS
    counts = np.zeros((3, buckets), dtype=np.int64)
    for v in range(n):
        key = keys[v]
        for p in range(3):
            counts[p, (key >> np.uint32(_RADIX_BITS * p)) & np.uint32(buckets - 1)] += 1
    order = np.arange(n, dtype=np.int32)
    spare = np.empty(n, dtype=np.int32)
    spare_keys = np.empty(n, dtype=np.uint32)
    for p in range(3):
        start = 0
        for b in range(buckets):
            size = counts[p, b]
            counts[p, b] = start
            start += size
        shift = np.uint32(_RADIX_BITS * p)
        # keys travel with their indices, so that every pass reads in sequence
        for j in range(n):
            key = keys[j]
            b = (key >> shift) & np.uint32(buckets - 1)
            slot = counts[p, b]
            spare[slot] = order[j]
            spare_keys[slot] = key
            counts[p, b] = slot + 1
        order, spare = spare, order
        keys, spare_keys = spare_keys, keys
    return order


@njit(cache=True, nogil=True)
def _value_starts(flat, order, starts):
    """Write the first rank of each distinct value of ``flat`` (sorted by ``order``) into
    ``starts``; return how many there are (with ``starts`` of size 0: only count them)."""
    count = 0
    for r in range(order.size):
        if r == 0 or flat[order[r]] != flat[order[r - 1]]:
            if starts.size:
                starts[count] = r
            count += 1
    return count


@njit(cache=True, nogil=True)
def _ranks_of_order(order, rank):
    for r in range(order.size):
        rank[order[r]] = r


@njit(cache=True, nogil=True)
def _order_of_ranks(rank, order):
    for v in range(rank.size):
        order[rank[v]] = v


@njit(cache=True, inline="always")
def _rises(ranks, starts, r, p):
    """Whether the voxel of rank ``p`` (> ``r``) has a larger value than that of ``r``."""
    bits = ranks[3]
    if bits >= 0:
        return (p >> bits) > (r >> bits)
    return _value_rises(starts, r, p)


@njit(cache=True, inline="always")
def _value_rises(starts, r, p):
    """Whether the voxel of rank ``p`` (> ``r``) has a larger value than the voxel of rank
    ``r``: a distinct value starts after ``r`` and no later than ``p``."""
    low, high = 0, starts.size
    while low < high:
        middle = (low + high) >> 1
        if starts[middle] <= r:
            low = middle + 1
        else:
            high = middle
    return low < starts.size and starts[low] <= p


def _counting_sorts(flat) -> bool:
    """Whether the ranks of ``flat`` come from a counting sort (integers over few levels)."""
    if not np.issubdtype(flat.dtype, np.integer) or flat.size == 0:
        return False
    return int(flat.max()) - int(flat.min()) < max(1 << 16, flat.size)


def voxel_ranks(values: np.ndarray, superlevel: bool = False):
    """(rank, starts): the position of every voxel in the order ``(value, flat index)``
    (superlevel: values from the highest down, ties still by flat index), and the first
    rank of each distinct value, ascending.

    Integers over few levels (8- and 16-bit data) take a counting sort that writes the
    ranks directly; other values are sorted (:func:`voxel_order`, after reversing their
    order for a superlevel sweep) and the order is dropped once the ranks are written.
    Ranks and starts have the engine's index type.
    """
    flat = values.reshape(-1)
    index_type = _union_find.index_dtype(flat.size)
    rank = np.empty(flat.size, dtype=index_type)
    if _counting_sorts(flat):
        low, high = int(flat.min()), int(flat.max())
        counts = _union_find.value_histogram(flat, low, high - low + 1, superlevel)
        _union_find.counting_ranks(flat, low, counts, superlevel, rank)
        present = counts[counts > 0]
        starts = np.zeros(present.size, dtype=index_type)
        np.cumsum(present[:-1], out=starts[1:])
        return rank, starts
    swept = reversed_order_values(flat) if superlevel else flat
    order = voxel_order(swept)
    _ranks_of_order(order, rank)
    starts = np.empty(_value_starts(swept, order, np.empty(0, dtype=index_type)),
                      dtype=index_type)
    _value_starts(swept, order, starts)
    return rank, starts


def reversed_order_values(values: np.ndarray) -> np.ndarray:
    """Values whose sublevel sweep is the superlevel sweep of ``values``, exactly.

    Integers take the bitwise complement (``~v = -v - 1``; ``255 - v`` for uint8), which
    reverses the order without overflow; floats are negated, which is exact.
    """
    if values.dtype == bool:
        return ~values.astype(np.uint8)
    if values.dtype.kind in "ui":
        return ~values
    return -values


@njit(cache=True, nogil=True)
def _flagged(words, bit, found):
    """Write into ``found`` the positions of ``words`` with ``bit`` set, ascending; return
    how many there are (with ``found`` of size 0: only count them)."""
    count = 0
    for i in range(words.size):
        if (words[i] >> bit) & 1:
            if found.size:
                found[count] = i
            count += 1
    return count


@njit(cache=True, nogil=True)
def _flagged_voxels(ranks, words, bit, found):
    """:func:`_flagged` for voxels in memory order, whose words sit at their ranks."""
    count = 0
    for v in range(words.size):
        if (words[_word_at(ranks, _rank(ranks, v))] >> bit) & 1:
            if found.size:
                found[count] = v
            count += 1
    return count


def _positions_flagged(words, bit, index_type, ranks=None):
    """Positions (ranks; with ``ranks``: voxels) whose word has ``bit`` set, without an
    array as long as the volume."""
    empty = np.empty(0, dtype=index_type)
    if ranks is None:
        found = np.empty(_flagged(words, bit, empty), dtype=index_type)
        _flagged(words, bit, found)
    else:
        found = np.empty(_flagged_voxels(ranks, words, bit, empty), dtype=index_type)
        _flagged_voxels(ranks, words, bit, found)
    return found


# --------------------------------------------------------------------------- clearing


def _later_neighbours(codes, vertex):
    """For each edge code, the 3x3x3-block positions (9 a + 3 b + c) of the voxels that must
    come later than the centre voxel for the edge to be the centre's own (-1 pads)."""
    table = np.full((codes.size, 3), -1, dtype=np.int64)
    for k, code in enumerate(codes):
        offset = (code // 9 - 1, (code // 3) % 3 - 1, code % 3 - 1)
        if vertex:
            # the edge's other end must come *earlier*: stored as a single entry
            table[k, 0] = 9 * (offset[0] + 1) + 3 * (offset[1] + 1) + (offset[2] + 1)
            continue
        spans = [(0, o) if o else (0,) for o in offset]
        around = [9 * (a + 1) + 3 * (b + 1) + (c + 1)
                  for a, b, c in itertools.product(*spans) if (a, b, c) != (0, 0, 0)]
        table[k, :len(around)] = around
    return table


_LATER_VERTEX = _later_neighbours(_EDGE_CODES_VERTEX, True)
_LATER_VOXEL = _later_neighbours(_EDGE_CODES_VOXEL, False)


def _corner_tables():
    """Voxel construction: for each of the 8 corners of a cube (local index 4 a + 2 b + c),
    the 3x3x3-block positions of the 7 other cubes around it; for each of the 12 edges (in
    code order), the local indices of its two end corners."""
    around = np.empty((8, 7), dtype=np.int64)
    for q, (a, b, c) in enumerate(itertools.product((0, 1), repeat=3)):
        cubes = [9 * (a + x) + 3 * (b + y) + (c + z)
                 for x, y, z in itertools.product((0, 1), repeat=3)]
        around[q] = [p for p in cubes if p != 13]
    ends = np.empty((_EDGE_CODES_VOXEL.size, 2), dtype=np.int64)
    for k, code in enumerate(_EDGE_CODES_VOXEL):
        offset = (code // 9 - 1, (code // 3) % 3 - 1, code % 3 - 1)
        for end in (0, 1):
            corner = [end if o == 0 else (o + 1) // 2 for o in offset]
            ends[k, end] = 4 * corner[0] + 2 * corner[1] + corner[2]
    return around, ends


def _bridges():
    """Vertex construction: (edge bit, edge bit, block position) for each pair of face
    neighbours on different axes and the edge neighbour that joins them."""
    steps = [int(code) - 13 for code in _EDGE_CODES_VERTEX]
    table = [(k, j, 13 + steps[k] + steps[j]) for k in range(6) for j in range(k + 1, 6)
             if abs(steps[k]) != abs(steps[j])]
    return np.array(table, dtype=np.int64)


_CORNER_AROUND, _EDGE_ENDS_VOXEL = _corner_tables()
_BRIDGES_VERTEX = _bridges()

#: Flag bit of a voxel whose own edges the local clearing could not decide.
_IRREGULAR_BIT = 31


@njit(cache=True, inline="always")
def _local_find(parent, x):
    while parent[x] != x:
        x = parent[x]
    return x


def _masks(positions):
    """27-bit masks of 3x3x3-block positions, one per row of ``positions`` (-1 pads)."""
    masks = np.zeros(positions.shape[0], dtype=np.int64)
    for k, row in enumerate(positions):
        for p in row:
            if p >= 0:
                masks[k] |= 1 << int(p)
    return masks


#: Voxel construction: the other cubes around each cube edge, and around each corner.
_EDGE_MASK_VOXEL = _masks(_LATER_VOXEL)
_CORNER_MASK_VOXEL = _masks(_CORNER_AROUND)


def _block_offsets(n1, n2):
    """Flat offsets of the 26 neighbours in the 3x3x3 block, and their block positions."""
    positions = np.array([p for p in range(27) if p != 13], dtype=np.int64)
    offsets = np.array([((p // 9 - 1) * n1 + (p // 3) % 3 - 1) * n2 + p % 3 - 1
                        for p in positions], dtype=np.int64)
    return offsets, positions


@njit(cache=True, nogil=True)
def _own_edges(ranks, n0, n1, n2, vertex, later, words, parent, offsets, positions, memo,
               first_layer, stop_layer):
    """One pass in memory order that sets up the clearing.

    For each voxel ``v`` of rank ``r``, bit ``k`` of ``words[r]`` is set when the ``k``-th edge around it
    exists and takes its value from ``v`` (vertex construction: the edge to a face
    neighbour that comes earlier; voxel construction: a cube edge whose other cubes come
    later; voxels outside the volume count as missing or as later).

    Then the clearing, decided here wherever the 3x3x3 block around ``v`` suffices: the
    cells present before ``v`` within its cube (voxel construction: the corners and edges
    shared with earlier cubes; vertex construction: the earlier face neighbours, joined
    through earlier edge neighbours) are checked for being connected there. If they are
    (or there are none), an own edge of ``v`` joins two components exactly when one of its
    ends belongs to a part made of ``v``'s own corners only, which a union-find over the 8
    corners (or 7 voxels) tells; those edges are cleared, and the union-find ``parent``
    links each of ``v``'s own corners to an earlier corner (or to one of them, the root).
    Otherwise the voxel gets the flag bit ``_IRREGULAR_BIT`` and its own corners stay roots
    for :func:`_death_edges`. ``parent`` must be all -1 on entry; ``offsets`` and
    ``positions`` come from :func:`_block_offsets`; ``memo`` (voxel construction: 2^20
    entries of ``_UNKNOWN``) remembers the outcome of each pattern of own corners and edges.
    Only the z-layers ``first_layer`` to ``stop_layer - 1`` are visited, so that two
    threads can share the pass (each writes the flags and corner links of its own voxels).
    """
    local = np.empty(8, dtype=np.int64)
    m1, m2 = n1 + 1, n2 + 1
    for i0 in range(first_layer, stop_layer):
        for i1 in range(n1):
            for i2 in range(n2):
                v = (i0 * n1 + i1) * n2 + i2
                r = _rank(ranks, v)
                slot = _word_at(ranks, r)
                # bit p: the block position p holds a voxel that comes earlier
                earlier = np.int64(0)
                if 0 < i0 < n0 - 1 and 0 < i1 < n1 - 1 and 0 < i2 < n2 - 1:
                    for t in range(26):
                        earlier |= np.int64(_rank(ranks, v + offsets[t]) < r) << positions[t]
                else:
                    for t in range(26):
                        p = positions[t]
                        j0, j1, j2 = i0 + p // 9 - 1, i1 + (p // 3) % 3 - 1, i2 + p % 3 - 1
                        if (0 <= j0 < n0 and 0 <= j1 < n1 and 0 <= j2 < n2
                                and _rank(ranks, v + offsets[t]) < r):
                            earlier |= np.int64(1) << p
                bits = np.uint32(0)
                if vertex:
                    for k in range(6):
                        if (earlier >> later[k, 0]) & 1:
                            bits |= np.uint32(1 << k)
                    first = -1
                    count = 0
                    for k in range(6):
                        if (bits >> k) & 1:
                            count += 1
                            if first < 0:
                                first = k
                    regular = True
                    if count >= 2:
                        for k in range(6):
                            local[k] = k
                        for t in range(_BRIDGES_VERTEX.shape[0]):
                            p, q, w = (_BRIDGES_VERTEX[t, 0], _BRIDGES_VERTEX[t, 1],
                                       _BRIDGES_VERTEX[t, 2])
                            if (bits >> p) & 1 and (bits >> q) & 1 and (earlier >> w) & 1:
                                gp = _local_find(local, p)
                                gq = _local_find(local, q)
                                local[gp] = gq
                        root = _local_find(local, first)
                        for k in range(first + 1, 6):
                            if (bits >> k) & 1 and _local_find(local, k) != root:
                                regular = False
                    if not regular:
                        bits |= np.uint32(1) << np.uint32(_IRREGULAR_BIT)
                    elif first >= 0:
                        bits &= ~np.uint32(1 << first)
                        code = later[first, 0]
                        parent[v] = v + ((code // 9 - 1) * n1 + (code // 3) % 3 - 1) * n2 \
                            + code % 3 - 1
                    words[slot] = bits
                    continue
                for k in range(12):
                    if not earlier & _EDGE_MASK_VOXEL[k]:
                        bits |= np.uint32(1 << k)
                fresh = 0
                for q in range(8):
                    if not earlier & _CORNER_MASK_VOXEL[q]:
                        fresh |= 1 << q
                # the outcome depends on these 20 bits alone; few patterns occur, so each
                # is worked out once and remembered
                key = fresh | (np.int64(bits) << 8)
                outcome = memo[key]
                if outcome == _UNKNOWN:
                    outcome = _clear_in_cube(fresh, bits, local)
                    memo[key] = outcome
                if outcome >> np.uint32(_IRREGULAR_BIT):
                    words[slot] = bits | (np.uint32(1) << np.uint32(_IRREGULAR_BIT))
                    continue
                words[slot] = outcome & np.uint32(0xFFF)
                anchor = np.int64(outcome >> np.uint32(12)) & 15
                if anchor == 8:  # no earlier corner: corner 0 is the new component's root
                    anchor = 0
                    fresh &= ~1
                target = ((i0 + (anchor >> 2)) * m1 + i1 + ((anchor >> 1) & 1)) * m2 \
                    + i2 + (anchor & 1)
                for q in range(8):
                    if (fresh >> q) & 1:
                        parent[((i0 + (q >> 2)) * m1 + i1 + ((q >> 1) & 1)) * m2
                               + i2 + (q & 1)] = target


#: Marks a pattern of :func:`_own_edges`' table not worked out yet.
_UNKNOWN = np.uint32(0xFFFFFFFF)


@njit(cache=True)
def _clear_in_cube(fresh, bits, local):
    """Voxel construction: the local clearing of a cube whose own corners are ``fresh``
    (8 bits) and own edges ``bits`` (12 bits).

    Returns the flag bit ``_IRREGULAR_BIT`` when the earlier corners are not connected
    within the cube; otherwise the own edges left as columns (bits 0-11) and, in bits
    12-15, an earlier corner to link the own corners to (8: there is none).
    """
    for q in range(8):
        local[q] = q
    for k in range(12):
        if not (bits >> k) & 1:
            ga = _local_find(local, _EDGE_ENDS_VOXEL[k, 0])
            gb = _local_find(local, _EDGE_ENDS_VOXEL[k, 1])
            local[ga] = gb
    anchor = 8
    root = -1
    for q in range(8):
        if not (fresh >> q) & 1:
            g = _local_find(local, q)
            if anchor == 8:
                anchor = q
                root = g
            elif g != root:
                return np.uint32(1) << np.uint32(_IRREGULAR_BIT)
    left = bits
    for k in range(12):
        if (bits >> k) & 1:
            ga = _local_find(local, _EDGE_ENDS_VOXEL[k, 0])
            gb = _local_find(local, _EDGE_ENDS_VOXEL[k, 1])
            if ga != gb:
                local[ga] = gb
                left &= ~np.uint32(1 << k)
    return np.uint32(left) | (np.uint32(anchor) << np.uint32(12))


@njit(cache=True, inline="always")
def _find(parent, x):
    """Root of ``x``; a root holds minus the size of its set (union by size)."""
    root = x
    while parent[root] >= 0:
        root = parent[root]
    while x != root:
        up = parent[x]
        parent[x] = root
        x = up
    return root


@njit(cache=True, nogil=True)
def _death_edges(undecided, ranks, n0, n1, n2, vertex, edge_codes, words, parent):
    """Clear in ``words`` every own edge of the voxels ``undecided`` (flat indices in rank
    order; those the local clearing left undecided) that joins two components when the
    edges are added in filtration order: these are the columns that clearing skips.

    A union-find over this module's own vertices (voxels, or grid corners in the voxel
    construction), whose links for the other voxels :func:`_own_edges` has set: a link
    always points to a corner present no later than the one it leaves, so the trees seen
    at rank ``r`` join exactly the corners connected at ``r``. It only feeds the clearing;
    the dimension-0 diagram comes from ``_union_find.py``.
    """
    m1, m2 = (n1, n2) if vertex else (n1 + 1, n2 + 1)
    shift = 0 if vertex else 1
    for j in range(undecided.size):
        v = np.int64(undecided[j])
        slot = _word_at(ranks, _rank(ranks, v))
        i2 = v % n2
        i1 = (v // n2) % n1
        i0 = v // (n1 * n2)
        bits = words[slot]
        for k in range(edge_codes.size):
            if not (bits >> k) & 1:
                continue
            code = edge_codes[k]
            c0 = 2 * i0 + shift + code // 9 - 1
            c1 = 2 * i1 + shift + (code // 3) % 3 - 1
            c2 = 2 * i2 + shift + code % 3 - 1
            # the two end corners of the edge, halving the doubled coordinates
            if c0 % 2 == 1:
                a = ((c0 - 1) // 2 * m1 + c1 // 2) * m2 + c2 // 2
                b = ((c0 + 1) // 2 * m1 + c1 // 2) * m2 + c2 // 2
            elif c1 % 2 == 1:
                a = (c0 // 2 * m1 + (c1 - 1) // 2) * m2 + c2 // 2
                b = (c0 // 2 * m1 + (c1 + 1) // 2) * m2 + c2 // 2
            else:
                a = (c0 // 2 * m1 + c1 // 2) * m2 + (c2 - 1) // 2
                b = (c0 // 2 * m1 + c1 // 2) * m2 + (c2 + 1) // 2
            ra = _find(parent, a)
            rb = _find(parent, b)
            if ra != rb:
                if parent[ra] > parent[rb]:
                    ra, rb = rb, ra
                parent[ra] += parent[rb]
                parent[rb] = ra
                words[slot] &= ~np.uint32(1 << k)
        words[slot] &= ~(np.uint32(1) << np.uint32(_IRREGULAR_BIT))


@njit(cache=True, nogil=True)
def _pair_own_squares(words, edge_codes, square_bit, counters):
    """Voxel construction: pair each voxel's edge columns with its own squares at once,
    voxel by voxel, and flag (``_IRREGULAR_BIT``) the voxels that need a reduction.

    A square takes the rank of the earlier of its two cubes, and a column's pivot is a
    square later than its edge, so a voxel's own squares can be the pivot only of columns
    of the voxel's own edges or of earlier voxels' edges, which the reduction visits after
    the voxel. When the voxel is visited, then, its squares are marked by its own edges
    alone, and if no two of its edges (last first) want the same square, every one of them
    pairs with its earliest own square, as :func:`_reduce_ranks` would do: those pairs
    (of zero persistence) are marked here. A voxel where two edges want the same square
    keeps no marks and is flagged, for :func:`_reduce_ranks` to visit in value order.
    """
    flag = np.uint32(1) << np.uint32(_IRREGULAR_BIT)
    for r in range(words.size):
        bits = words[r]
        marks = np.uint32(0)
        paired = 0
        for k in range(edge_codes.size - 1, -1, -1):
            if not (bits >> k) & 1:
                continue
            square = np.uint32(1) << np.uint32(square_bit[_own_square_code(edge_codes[k])])
            if marks & square:
                paired = -1
                break
            marks |= square
            paired += 1
        if paired < 0:
            words[r] = bits | flag
        else:
            words[r] = bits | marks
            counters[4] += paired


# --------------------------------------------------------------------------- pivot table


@njit(cache=True, inline="always")
def _slot(key, mask):
    h = key * np.int64(-7046029254386353131)
    h ^= h >> 29
    return h & mask


@njit(cache=True)
def _table_find(table_keys, table_vals, key):
    mask = table_keys.size - 1
    s = _slot(key, mask)
    while table_keys[s] != -1:
        if table_keys[s] == key:
            return table_vals[s]
        s = (s + 1) & mask
    return -1


@njit(cache=True)
def _table_put(table_keys, table_vals, key, value):
    mask = table_keys.size - 1
    s = _slot(key, mask)
    while table_keys[s] != -1:
        s = (s + 1) & mask
    table_keys[s] = key
    table_vals[s] = value


@njit(cache=True, nogil=True)
def _table_grow(table_keys, table_vals):
    new_keys = np.full(table_keys.size * 2, -1, dtype=np.int64)
    new_vals = np.empty(table_keys.size * 2, dtype=np.int64)
    for s in range(table_keys.size):
        if table_keys[s] != -1:
            _table_put(new_keys, new_vals, table_keys[s], table_vals[s])
    return new_keys, new_vals


# --------------------------------------------------------------------------- working column


@njit(cache=True)
def _heap_push(heap, size, key):
    if size == heap.size:
        bigger = np.empty(heap.size * 2, dtype=np.int64)
        bigger[:size] = heap[:size]
        heap = bigger
    j = size
    heap[j] = key
    while j > 0:
        up = (j - 1) >> 1
        if heap[up] <= key:
            break
        heap[j] = heap[up]
        j = up
    heap[j] = key
    return heap, size + 1


@njit(cache=True)
def _heap_pop(heap, size):
    size -= 1
    last = heap[size]
    j = 0
    while True:
        child = 2 * j + 1
        if child >= size:
            break
        if child + 1 < size and heap[child + 1] < heap[child]:
            child += 1
        if heap[child] >= last:
            break
        heap[j] = heap[child]
        j = child
    if size > 0:
        heap[j] = last
    return size


@njit(cache=True)
def _heap_pivot(heap, size):
    """Smallest entry that survives Z/2 cancellation (-1 if none), left on the heap."""
    while size > 0:
        top = heap[0]
        size = _heap_pop(heap, size)
        if size > 0 and heap[0] == top:
            size = _heap_pop(heap, size)
            continue
        heap, size = _heap_push(heap, size, top)
        return top, heap, size
    return np.int64(-1), heap, size


# --------------------------------------------------------------------------- reduction


@njit(cache=True)
def _unreduced_owner(square, edge, order, ranks, words, edge_bit, n0, n1, n2, vertex, faces):
    """Edge visited before ``edge`` (a larger key) whose coboundary, unreduced, has
    ``square`` as pivot, or -1. The first such edge visited (largest key) is the owner.

    Voxel construction: an edge's earliest own coface is a face of the edge's own cube
    with the cube's rank, so the owner is one of the square's edges that belong to the
    square's cube; its flags and the codes tell, without reading a rank.
    """
    if not vertex:
        r = square >> CODE_BITS
        code = square & _CODE_MASK
        flags = words[_word_at(ranks, r)]
        owner = np.int64(-1)
        offset = (code // 9 - 1, (code // 3) % 3 - 1, code % 3 - 1)
        for axis in range(3):
            if offset[axis] != 0:
                continue
            weight = 9 if axis == 0 else (3 if axis == 1 else 1)
            for t in (-1, 1):
                face = code + weight * t
                key = (r << CODE_BITS) | face
                if key <= edge or key <= owner:
                    continue
                if not (flags >> edge_bit[face]) & 1:
                    continue
                if _own_square_code(face) == code:
                    owner = key
        return owner
    _boundary(square, order, ranks, n0, n1, n2, vertex, faces)
    owner = np.int64(-1)
    for j in range(4):
        face = faces[j]
        if face <= edge or face <= owner:
            continue
        if not (words[_word_at(ranks, face >> CODE_BITS)] >> edge_bit[face & _CODE_MASK]) & 1:
            continue
        v = _voxel(ranks, order, face >> CODE_BITS)
        i2 = v % n2
        i1 = (v // n2) % n1
        i0 = v // (n1 * n2)
        if _earliest_own_coface(i0, i1, i2, face & _CODE_MASK, face >> CODE_BITS, ranks, n0, n1,
                                n2, vertex) == square:
            owner = face
    return owner


#: Bytes of an entry of the pool of kept columns: a cell in 40 bits (a 32-bit and an 8-bit
#: array). With composed ranks the entry is the cell's voxel and code, and its key is
#: composed again from the voxel's value when it is read; else it is the key itself.
POOL_ENTRY_BYTES = 5

#: Entries the pool must have free before a voxel's edges are visited (the caller grows it
#: in place when the reduction stops short of this), and its first size.
_POOL_RESERVE = 1 << 16
_FIRST_POOL_ENTRIES = 1 << 20

#: The most voxels whose cells (voxel and code) fit in a pool entry.
_MOST_VOXELS = 1 << (8 * POOL_ENTRY_BYTES - CODE_BITS)


@njit(cache=True, inline="always")
def _pool_raw(pool_low, pool_high, at):
    return (np.int64(pool_high[at]) << 32) | np.int64(pool_low[at])


@njit(cache=True, inline="always")
def _pool_put(pool_low, pool_high, at, entry):
    pool_low[at] = np.uint32(entry & 0xFFFFFFFF)
    pool_high[at] = np.uint8(entry >> 32)


@njit(cache=True)
def _pool_read(pool_low, pool_high, at, ranks):
    """The key of the cell at entry ``at``."""
    entry = _pool_raw(pool_low, pool_high, at)
    bits = ranks[3]
    if bits < 0:
        return entry
    return (_level(ranks, entry >> CODE_BITS) << (bits + CODE_BITS)) | entry


@njit(cache=True)
def _pool_write(pool_low, pool_high, at, key, ranks):
    """Keep the cell of ``key`` at entry ``at``."""
    bits = ranks[3]
    if bits >= 0:
        key &= (np.int64(1) << (bits + CODE_BITS)) - 1
    _pool_put(pool_low, pool_high, at, key)


@njit(cache=True, nogil=True)
def _reduce_ranks(r_high, r_low, first_edge, listed, use_list, starts, order, ranks, words,
                  n0, n1, n2, vertex, edge_codes, edge_bit, square_bit, table_keys,
                  table_vals, pool_low, pool_high, reserve, counters, births, deaths):
    """Visit the edges of the voxels of rank ``r_high`` down to ``r_low`` (inclusive),
    last edge first, and pair each with a square. With ``use_list``, visit instead the
    ranks ``listed[r_high]`` down to ``listed[r_low]`` (``listed`` ascending). The first
    voxel's edges are visited from edge ``first_edge`` down.

    ``words`` holds, per voxel, a bit for each of its own edges that clearing left and
    one for each of its own squares that is already the pivot of a column; ``starts``
    the first rank of each distinct value (:func:`voxel_ranks`). ``counters`` = [table
    entries, pool length, pairs written, columns reduced, columns paired without
    reduction, columns left empty, heap pushes]. The reduced columns are kept in
    ``pool_low`` / ``pool_high`` (a length, then the entries), which this function never
    grows: when they have less than ``reserve`` entries free before a voxel, or
    too few for a column, it stops there.

    Returns ``(step, edge, table_keys, table_vals, births, deaths)``: ``step < r_low``
    when every voxel was visited, else where to go on (with ``edge``) once the pool has
    grown; the table and the output arrays may have grown.
    """
    shift = 0 if vertex else 1
    faces = np.empty(4, dtype=np.int64)
    cofaces = np.empty(6, dtype=np.int64)
    heap = np.empty(64, dtype=np.int64)
    for step in range(r_high, r_low - 1, -1):
        if pool_low.size - counters[1] < reserve:
            return step, edge_codes.size - 1 if step != r_high else first_edge, \
                table_keys, table_vals, births, deaths
        r = np.int64(listed[step]) if use_list else np.int64(step)
        v = _voxel(ranks, order, r)
        i2 = v % n2
        i1 = (v // n2) % n1
        i0 = v // (n1 * n2)
        bits = words[_word_at(ranks, r)]
        last = first_edge if step == r_high else edge_codes.size - 1
        for k in range(last, -1, -1):
            if not (bits >> k) & 1:
                continue
            code = edge_codes[k]
            edge = (np.int64(r) << CODE_BITS) | code
            pivot = _earliest_own_coface(i0, i1, i2, code, r, ranks, n0, n1, n2, vertex)
            if pivot < 0:
                counters[5] += 1
                continue
            if not _marked(pivot, words, ranks, square_bit):
                counters[4] += 1
            else:
                counters[3] += 1
                size = 0
                count = _coboundary_at(2 * i0 + shift + code // 9 - 1,
                                       2 * i1 + shift + (code // 3) % 3 - 1,
                                       2 * i2 + shift + code % 3 - 1,
                                       ranks, n0, n1, n2, vertex, cofaces)
                for j in range(count):
                    heap, size = _heap_push(heap, size, cofaces[j])
                counters[6] += count
                while True:
                    # voxel construction: a bit next to the square's mark says whether a
                    # reduced column is stored for it, which spares most table lookups
                    stored = -1
                    if vertex or (words[_word_at(ranks, pivot >> CODE_BITS)] >> np.uint32(
                            square_bit[pivot & _CODE_MASK] + _STORED_SHIFT)) & 1:
                        stored = _table_find(table_keys, table_vals, pivot)
                    if stored >= 0:
                        length = _pool_raw(pool_low, pool_high, stored)
                        for j in range(length):
                            heap, size = _heap_push(heap, size, _pool_read(
                                pool_low, pool_high, stored + 1 + j, ranks))
                        counters[6] += length
                    else:
                        owner = _unreduced_owner(pivot, edge, order, ranks, words, edge_bit,
                                                 n0, n1, n2, vertex, faces)
                        if owner < 0:
                            raise RuntimeError("a pivot square has no owner column")
                        count = _coboundary(owner, order, ranks, n0, n1, n2, vertex, cofaces)
                        for j in range(count):
                            heap, size = _heap_push(heap, size, cofaces[j])
                        counters[6] += count
                    pivot, heap, size = _heap_pivot(heap, size)
                    if pivot < 0 or not _marked(pivot, words, ranks, square_bit):
                        break
                if pivot < 0:
                    counters[5] += 1
                    continue
                # keep the reduced column itself (pivot first), as the heap drains; the
                # heap's size bounds the column's length
                start = counters[1]
                if start + 1 + size > pool_low.size:
                    counters[7] = start + 1 + size
                    return step, k, table_keys, table_vals, births, deaths
                write = start + 1
                while True:
                    entry, heap, size = _heap_pivot(heap, size)
                    if entry < 0:
                        break
                    size = _heap_pop(heap, size)
                    _pool_write(pool_low, pool_high, write, entry, ranks)
                    write += 1
                _pool_put(pool_low, pool_high, start, write - start - 1)
                counters[1] = write
                if 4 * (counters[0] + 1) > 3 * table_keys.size:  # at most 3/4 full
                    table_keys, table_vals = _table_grow(table_keys, table_vals)
                _table_put(table_keys, table_vals, pivot, start)
                counters[0] += 1
                if not vertex:
                    words[_word_at(ranks, pivot >> CODE_BITS)] |= np.uint32(1) << np.uint32(
                        square_bit[pivot & _CODE_MASK] + _STORED_SHIFT)
            words[_word_at(ranks, pivot >> CODE_BITS)] |= np.uint32(1) << np.uint32(
                square_bit[pivot & _CODE_MASK])
            # equal ranks are a zero-persistence pair; only others need the (random) read
            if (pivot >> CODE_BITS) != r and _rises(ranks, starts, r, pivot >> CODE_BITS):
                n = counters[2]
                if n == births.size:
                    bigger_b = np.empty(births.size * 2, dtype=np.int64)
                    bigger_d = np.empty(births.size * 2, dtype=np.int64)
                    bigger_b[:n] = births[:n]
                    bigger_d[:n] = deaths[:n]
                    births, deaths = bigger_b, bigger_d
                births[n] = v
                deaths[n] = _voxel(ranks, order, pivot >> CODE_BITS)
                counters[2] = n + 1
    return r_low - 1, 0, table_keys, table_vals, births, deaths


class _Pool:
    """The reduced columns kept: 40-bit entries in a 32-bit and an 8-bit array, grown in
    place (``ndarray.resize``: the allocator can move the pages rather than copy them, so
    the pool is not held twice while it grows)."""

    def __init__(self):
        self.low = np.empty(_FIRST_POOL_ENTRIES, dtype=np.uint32)
        self.high = np.empty(_FIRST_POOL_ENTRIES, dtype=np.uint8)

    def grow(self, needed: int) -> None:
        size = max(int(needed), self.low.size + self.low.size // 2)
        self.low.resize(size, refcheck=False)
        self.high.resize(size, refcheck=False)


# --------------------------------------------------------------------------- public


def _check(values, construction):
    if construction not in CONSTRUCTIONS:
        raise InputError(f"The construction must be one of {list(CONSTRUCTIONS)}, "
                         f"got {construction!r}.")
    values = np.asarray(values)
    if values.ndim != 3:
        raise InputError(f"Dimension 1 by reduction needs a 3D volume (z, y, x), got an array "
                         f"of shape {values.shape}; give 2D images to the union-find.")
    if values.size == 0:
        raise InputError(f"Cannot compute persistence of an empty volume of shape "
                         f"{values.shape}; give at least one voxel.")
    if values.size > _MOST_VOXELS:
        raise InputError(f"Dimension 1 of a volume of {values.size} voxels is beyond the "
                         f"reduction's {_MOST_VOXELS} voxels (cells are kept in 40 bits); "
                         f"crop or downsample it.")
    if values.dtype == bool:
        values = values.astype(np.uint8)
    if not (np.issubdtype(values.dtype, np.integer) or np.issubdtype(values.dtype, np.floating)):
        raise InputError(f"Cannot compute persistence of {values.dtype} values; give gray "
                         f"values as integers or floats.")
    if np.issubdtype(values.dtype, np.floating) and not np.isfinite(values).all():
        bad = int(np.count_nonzero(~np.isfinite(values)))
        raise InputError(f"The volume has {bad} NaN or infinite voxels; fill or mask them "
                         f"before computing persistence.")
    if values.dtype == np.float16:
        values = values.astype(np.float32)
    return np.ascontiguousarray(values)


def pairs_dim1(values, construction, progress=None, *, superlevel=False, threads=1,
               scratch=None):
    """Finite dimension-1 persistence pairs of the sublevel filtration of a 3D volume.

    Parameters
    ----------
    values : ndarray, shape (z, y, x)
        Gray values (integers or floats, finite). One-voxel-thin axes are fine.
    construction : {"voxel", "vertex"}
        "voxel": voxels are the cubes of the complex and lower cells take the smallest
        value around them (26-neighbourhood); "vertex": voxels are the vertices and a
        cell takes the largest value of its vertices (6-neighbourhood).
    progress : callable(phase, fraction), optional
        Called with ``"dimension 1"`` and the fraction done at coarse checkpoints; raise
        ``voxtopo.Cancelled`` inside it to stop.
    superlevel : bool
        Sweep the values from the highest down (the superlevel filtration) instead; the
        pairs keep the scan's own values (birth the higher one).
    threads : int
        With 2 or more, the memory-order pass is shared by two threads (the result is
        the same).
    scratch : ndarray of int, optional
        A buffer of at least :func:`scratch_size` entries the caller no longer needs
        (the sweeps' union-find links): it holds the clearing's union-find and then the
        sorted voxel order, instead of a new array of that size.

    Returns
    -------
    birth, death : ndarray of float64
        Values of the pairs with ``death != birth``, read from ``values``.
    birth_index, death_index : ndarray of int64
        C-order flat indices of the voxels the birth and death values come from.

    Notes
    -----
    A cohomology reduction with clearing and apparent/emergent pairs over an implicit
    cubical complex; see the module docstring for the cells, the tie rule and the method.
    Without periodic boundaries there are no essential loops.

    References
    ----------
    de Silva, Morozov & Vejdemo-Johansson 2011, "Dualities in persistent (co)homology".
    Chen & Kerber 2011, "Persistent homology computation with a twist".
    Bauer 2021, "Ripser: efficient computation of Vietoris-Rips persistence barcodes",
    J. Appl. Comput. Topol.

    Examples
    --------
    A ring of low voxels around a high centre in one slice: one loop, born when the ring
    is closed (value 0) and filled when the centre enters (value 5).

    >>> import numpy as np
    >>> ring = np.full((1, 3, 3), 0.0); ring[0, 1, 1] = 5.0
    >>> birth, death, birth_index, death_index = pairs_dim1(ring, "vertex")
    >>> birth.tolist(), death.tolist(), death_index.tolist()
    ([0.0], [5.0], [4])
    """
    birth, death, birth_index, death_index, _ = reduce_dim1(
        values, construction, progress, superlevel=superlevel, threads=threads,
        scratch=scratch)
    return birth, death, birth_index, death_index


def scratch_size(shape, construction) -> int:
    """Entries of the buffer :func:`pairs_dim1` can take as ``scratch``: one per grid
    corner (voxel construction) or voxel (vertex construction)."""
    if construction == "vertex":
        return int(np.prod(shape, dtype=np.int64))
    return int(np.prod([n + 1 for n in shape], dtype=np.int64))


def reduce_dim1(values, construction, progress=None, *, superlevel=False, threads=1,
                scratch=None):
    """:func:`pairs_dim1` plus a dict of counts (columns reduced, columns paired at once,
    pairs of positive persistence, reduction-matrix entries kept, heap pushes, voxels
    the local clearing left undecided, voxels the reduction visited, the pool's and the
    pivot table's final sizes), which the benchmarks print and the memory plan is
    calibrated on."""
    values = _check(values, construction)
    vertex = construction == "vertex"
    n0, n1, n2 = values.shape
    voxels = values.size
    if progress is not None:
        progress(PHASE, 0.0)
    flat = values.reshape(-1)
    index_type = _union_find.index_dtype(voxels)
    # the voxel construction of integer values needs no array of ranks nor of the order
    ranks = None if vertex else composed_ranks(flat, superlevel)
    if ranks is None:
        rank, starts = voxel_ranks(values, superlevel)
        ranks = (rank, np.int64(0), np.int64(1), np.int64(-1))
    else:
        rank, starts = None, np.empty(0, dtype=index_type)
    composed = rank is None
    edge_codes = _EDGE_CODES_VERTEX if vertex else _EDGE_CODES_VOXEL
    edge_bit = _EDGE_BIT_VERTEX if vertex else _EDGE_BIT_VOXEL
    square_bit = _SQUARE_BIT_VERTEX if vertex else _SQUARE_BIT_VOXEL
    if progress is not None:
        progress(PHASE, 0.1)

    words = np.empty(voxels, dtype=np.uint32)
    corners = scratch_size(values.shape, construction)
    if isinstance(scratch, list):  # a buffer given away: it is freed once done with
        scratch = scratch.pop() if scratch else None
    if scratch is None or scratch.size < corners:
        scratch = np.empty(corners, dtype=_union_find.index_dtype(corners))
    parent = scratch[:corners]
    parent.fill(-1)
    offsets, positions = _block_offsets(n1, n2)
    later = _LATER_VERTEX if vertex else _LATER_VOXEL
    memo = np.full(1 if vertex else 1 << 20, _UNKNOWN, dtype=np.uint32)
    if threads >= 2 and n0 >= 2:
        # the upper half of the layers in a second thread, with its own pattern table
        middle = n0 // 2
        other = np.full(memo.size, _UNKNOWN, dtype=np.uint32)
        helper = threading.Thread(target=_own_edges, args=(
            ranks, n0, n1, n2, vertex, later, words, parent, offsets, positions, other,
            middle, n0))
        helper.start()
        try:
            _own_edges(ranks, n0, n1, n2, vertex, later, words, parent, offsets, positions,
                       memo, 0, middle)
        finally:
            helper.join()
        del other
    else:
        _own_edges(ranks, n0, n1, n2, vertex, later, words, parent, offsets, positions, memo,
                   0, n0)
    if progress is not None:
        progress(PHASE, 0.15)
    undecided = _positions_flagged(words, _IRREGULAR_BIT, index_type, ranks)
    undecided = undecided[np.argsort(_ranks_of(ranks, undecided), kind="stable")]
    _death_edges(undecided, ranks, n0, n1, n2, vertex, edge_codes, words, parent)
    undecided_voxels = undecided.size
    del undecided, parent
    if composed:
        order = np.empty(0, dtype=index_type)
        del scratch
    else:
        # the clearing's union-find is done with: its buffer now holds the voxels in order
        order = scratch[:voxels]
        _order_of_ranks(rank, order)
    if progress is not None:
        progress(PHASE, 0.25)

    table_keys = np.full(1024, -1, dtype=np.int64)
    table_vals = np.empty(1024, dtype=np.int64)
    pool = _Pool()
    counters = np.zeros(8, dtype=np.int64)
    births = np.empty(1024, dtype=np.int64)
    deaths = np.empty(1024, dtype=np.int64)
    if vertex:
        # an edge's earliest square may belong to a later voxel: every voxel is visited
        listed = np.empty(0, dtype=index_type)
        visits = voxels
    else:
        _pair_own_squares(words, edge_codes, square_bit, counters)
        listed = _positions_flagged(words, _IRREGULAR_BIT, index_type)
        if composed:  # the flagged voxels' ranks, ascending
            listed = np.sort(_ranks_of(ranks, listed))
        np.bitwise_and(words, ~(np.uint32(1) << np.uint32(_IRREGULAR_BIT)), out=words)
        visits = listed.size
    steps = np.linspace(visits, 0, _PROGRESS_STEPS + 1).astype(np.int64)
    for step in range(_PROGRESS_STEPS):
        high, low = steps[step] - 1, steps[step + 1]
        edge = edge_codes.size - 1
        while high >= low:
            high, edge, table_keys, table_vals, births, deaths = _reduce_ranks(
                high, low, edge, listed, not vertex, starts, order, ranks, words, n0, n1,
                n2, vertex, edge_codes, edge_bit, square_bit, table_keys, table_vals,
                pool.low, pool.high, _POOL_RESERVE, counters, births, deaths)
            if high >= low:
                pool.grow(max(counters[1] + _POOL_RESERVE, counters[7]))
        if progress is not None:
            progress(PHASE, 0.25 + 0.75 * (step + 1) / _PROGRESS_STEPS)
    if counters[5]:
        raise RuntimeError(f"{counters[5]} dimension-1 columns did not pair in a box, which "
                           f"cannot happen; this is a bug in voxtopo's reduction.")
    counts = {"reduced": int(counters[3]), "paired_at_once": int(counters[4]),
              "pairs": int(counters[2]), "kept_entries": int(counters[1]),
              "heap_pushes": int(counters[6]), "undecided_voxels": int(undecided_voxels),
              "listed_voxels": int(listed.size), "pool_entries": int(pool.low.size),
              "table_slots": int(table_keys.size)}
    del words, rank, order, listed, pool
    birth_index = births[:counters[2]].copy()
    death_index = deaths[:counters[2]].copy()
    birth = flat[birth_index].astype(np.float64)
    death = flat[death_index].astype(np.float64)
    keep = death != birth
    return birth[keep], death[keep], birth_index[keep], death_index[keep], counts


#: Planned per voxel, measured on 256^3 uint16 noisy sintered beads (the data of
#: benchmarks/bench_memory.py; `reduce_dim1` counts them): reduced columns kept, their
#: entries, the voxels the local clearing leaves undecided and the voxels the reduction
#: visits. Smooth data have far fewer of each. Measured: 0.073, 0.78, 0.025, 0.070.
_PLANNED_COLUMNS = 0.075
_PLANNED_ENTRIES = 0.8
_PLANNED_UNDECIDED = 0.03
_PLANNED_LISTED = 0.075

#: Bytes of a slot of the pivot table (an 8-byte key and an 8-byte pool position) and the
#: most slots per column (the table is kept between 3/8 and 3/4 full).
_TABLE_SLOT_BYTES = 16
_SLOTS_PER_COLUMN = 8 / 3


def composes_ranks(shape, dtype) -> bool:
    """Whether :func:`reduce_dim1` composes ranks (no arrays of ranks or order) for an
    array of ``shape`` and ``dtype`` whatever its values (integers whose whole range, one
    level more for a padded copy, fits in a cell key beside the voxel index)."""
    dtype = np.dtype(dtype)
    voxels = int(np.prod(shape, dtype=np.int64))
    bits = max(1, (voxels - 1).bit_length())
    return dtype.kind in "uib" and 8 * dtype.itemsize + 1 + bits + CODE_BITS <= 62


def phase_bytes(shape, dtype, *, superlevel=False) -> tuple[int, int, bool]:
    """(bytes of the clearing, bytes of the reduction proper, whether the buffer lent as
    ``scratch`` is held through the reduction) of :func:`pairs_dim1` on the voxel
    construction of an array of ``shape`` and ``dtype``, the scratch buffer (one index
    per grid corner, :func:`scratch_size`) not included.

    Both phases hold one 32-bit word of flags per voxel. The clearing adds the voxels it
    leaves undecided, with their ranks and sort order. The reduction adds the ranks of
    the voxels it visits (sorted), the reduced columns kept (5-byte entries) and the
    pivot table, planned per voxel as measured on noisy 16-bit scans (smooth data need
    less). Values that do not compose ranks (:func:`composes_ranks`) also hold the ranks
    throughout (4 or 8 bytes per voxel), first sorted (a float32 radix sort 16 bytes per
    voxel, numpy's sort about 12, plus a reversed copy of the values for a superlevel
    sweep, and a start rank per distinct value), and the sorted order, in the scratch
    buffer, through the reduction.
    """
    voxels = int(np.prod(shape, dtype=np.int64))
    dtype = np.dtype(dtype)
    words = 4 * voxels
    undecided = int(_PLANNED_UNDECIDED * voxels) * (4 + 8 + 8)
    kept = (_PLANNED_ENTRIES * voxels * POOL_ENTRY_BYTES
            + _PLANNED_COLUMNS * voxels * _SLOTS_PER_COLUMN * _TABLE_SLOT_BYTES)
    listed = int(_PLANNED_LISTED * voxels) * 8
    clearing = words + undecided
    reducing = int(words + listed + kept)
    if composes_ranks(shape, dtype):
        return clearing, reducing, False
    index = _union_find.index_dtype(voxels).itemsize
    rank = voxels * index
    if dtype.kind in "uib" and dtype.itemsize <= 2:
        ranking = 0  # a counting sort writes the ranks
    else:
        radix = dtype == np.float32 and index == 4
        ranking = (voxels * (16 if radix else 12) + (voxels * dtype.itemsize if superlevel
                                                     else 0) + voxels * index)
    return max(ranking, rank + clearing), rank + reducing, True


def bytes_needed(shape, dtype, *, superlevel=False, with_scratch=False) -> int:
    """Peak bytes :func:`pairs_dim1` needs for a volume of ``shape`` and ``dtype`` in the
    voxel construction: the larger of its two phases (:func:`phase_bytes`), with the
    scratch buffer where it is held (none when the caller lends it: ``with_scratch``).

    Examples
    --------
    >>> 1e9 < bytes_needed((512, 512, 512), "uint8") < 2e9
    True
    """
    clearing, reducing, holds = phase_bytes(shape, dtype, superlevel=superlevel)
    corners = int(np.prod([n + 1 for n in shape], dtype=np.int64))
    buffer = 0 if with_scratch else corners * _union_find.index_dtype(corners).itemsize
    return max(clearing + buffer, reducing + (buffer if holds else 0))


# --------------------------------------------------------------------------- twin


def _explicit_cells(values, construction):
    """Every cell of the complex with its representative voxel, dimension and code."""
    vertex = construction == "vertex"
    shape = values.shape
    order = np.argsort(values.reshape(-1), kind="stable")
    rank = np.empty(values.size, dtype=np.int64)
    rank[order] = np.arange(values.size)
    extent = [2 * n - 1 if vertex else 2 * n + 1 for n in shape]
    cells = {}
    for c in itertools.product(*(range(e) for e in extent)):
        if vertex:
            spans = [sorted({x // 2, (x + 1) // 2}) for x in c]
        else:
            spans = [sorted({max((x - 1) // 2, 0), min(x // 2, n - 1)})
                     for x, n in zip(c, shape)]
        around = [int(np.ravel_multi_index(i, shape)) for i in itertools.product(*spans)]
        pick = max if vertex else min
        voxel = pick(around, key=lambda w: rank[w])
        centre = [2 * i + (0 if vertex else 1) for i in np.unravel_index(voxel, shape)]
        code = sum(w * (x - m + 1) for w, x, m in zip((9, 3, 1), c, centre))
        dim = sum(x % 2 for x in c)
        cells[c] = (int(rank[voxel]), dim, code, voxel)
    return cells


def pairs_dim1_explicit(values, construction):
    """Plain column reduction of an explicit boundary matrix; a readable twin of
    :func:`pairs_dim1` for tiny volumes (used in tests).

    The filtration order is the documented one (rank of the representative voxel, then
    dimension, then offset code), so the pairs, locations included, equal the kernel's.
    Returns the same four arrays as :func:`pairs_dim1`.

    Examples
    --------
    >>> import numpy as np
    >>> ring = np.full((1, 3, 3), 0.0); ring[0, 1, 1] = 5.0
    >>> pairs_dim1_explicit(ring, "vertex")[1].tolist()
    [5.0]
    """
    values = _check(values, construction)
    cells = _explicit_cells(values, construction)
    ordered = sorted(cells, key=lambda c: cells[c][:3])
    position = {c: j for j, c in enumerate(ordered)}
    columns = []
    for c in ordered:
        faces = set()
        for axis in range(3):
            if c[axis] % 2 == 1:
                for step in (-1, 1):
                    face = list(c)
                    face[axis] += step
                    faces.add(position[tuple(face)])
        columns.append(faces)
    owner_of_low = {}
    flat = values.reshape(-1)
    births, deaths = [], []
    for j, column in enumerate(columns):
        while column and max(column) in owner_of_low:
            column ^= columns[owner_of_low[max(column)]]
        if column:
            low = max(column)
            owner_of_low[low] = j
            if cells[ordered[j]][1] == 2:
                birth_voxel, death_voxel = cells[ordered[low]][3], cells[ordered[j]][3]
                if flat[death_voxel] > flat[birth_voxel]:
                    births.append(birth_voxel)
                    deaths.append(death_voxel)
    birth_index = np.array(births, dtype=np.int64)
    death_index = np.array(deaths, dtype=np.int64)
    return (flat[birth_index].astype(np.float64), flat[death_index].astype(np.float64),
            birth_index, death_index)
