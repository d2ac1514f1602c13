"""Union-find with the elder rule over a voxel grid: dimension 0, and dimension d-1 by duality.

One sweep visits the voxels in value order and joins each one to its neighbours that were
already visited; when two components meet, the younger one dies (elder rule) and, unless
it was born at the very value it dies at, leaves a persistence pair. The same sweep, run
the other way over the other construction's neighbourhood with the outside of the image
as one extra node, gives dimension d-1 (loops in 2D, cavities in 3D).

A sweep runs in two passes. :func:`link_regular_voxels` streams over the image in memory
order and links every voxel whose earlier neighbours are already connected to each other
inside its 3x3x3 cube (it cannot merge anything); :func:`sweep` then visits only the
other voxels, sorted, and does the merging. The result is that of visiting every voxel in
order, which :func:`sweep_reference` does in plain Python for the tests.

Order of the sweep and tie rule
-------------------------------
Voxels are ranked by ``(value, C-order flat index)``. An *ascending* sweep visits ranks
upwards, a *descending* sweep downwards. The elder of two components is the one whose
oldest voxel was visited first; each component is represented by that voxel (its root).
So among equal values the smaller flat index is elder in an ascending sweep and the larger
one in a descending sweep. The diagram's values do not depend on this rule (only which of
several equal-valued voxels is reported as a location does).

Which sweep gives what
----------------------
For a sublevel filtration of ``f`` (superlevel: swap "ascending" and "descending"):

=====================  ============  ==========  =======  ====================================
pairs                  neighbourhood  sweep       outside  pair (birth, death) from a merge
=====================  ============  ==========  =======  ====================================
dim 0, voxel constr.   corners (8/26) ascending  no       (f[root], f[v])
dim 0, vertex constr.  faces (4/6)    ascending  no       (f[root], f[v])
dim d-1, voxel constr. faces (4/6)    descending yes      (f[v], f[root])
dim d-1, vertex constr corners (8/26) descending yes      (f[v], f[root])
=====================  ============  ==========  =======  ====================================

``root`` is the oldest voxel of the component that dies, ``v`` the voxel being visited
when it dies; both are the pair's reported locations (their values are the pair's values).

Why the dual sweep is right (Garin, Heiss, Maggs, Bleile & Robins 2020, "Duality in
persistent homology of images"): by Alexander duality in the sphere ``R^d + {infinity}``
the (d-1)-cycles of the sublevel set ``K_t`` correspond one to one with the components of
the complement of ``K_t`` that do not reach the outside of the image. In the voxel
construction ``K_t`` is the union of the closed voxels with ``f <= t``; its complement is
made of the open voxels with ``f > t``, which touch each other only through shared faces
(4/6 neighbours), and of the outside, which touches every voxel of the image border. In the
vertex construction ``K_t`` is the cubical complex spanned by the voxel centres with
``f <= t``; two centres with ``f > t`` are joined in its complement as soon as they share a
unit cube, which makes the complement 8/26-connected. Lowering ``t`` grows the complement:
a bounded complement component is born when its highest voxel ``r`` leaves ``K_t`` (the
cavity dies at ``f[r]``) and ends when the voxel ``v`` that joins it to an elder component
leaves (the cavity was born at ``f[v]``). The outside is the eldest node of all and never
dies, so no (d-1)-class is essential, as expected for a filled box.
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: Flat indices fit in int32 below this many voxels (plus one node for the outside).
INT32_VOXELS = 2**31 - 2

#: Most merges one visited voxel can cause: all 26 neighbours and the outside.
MERGES_PER_VOXEL = 27


def index_dtype(voxels: int) -> np.dtype:
    """int32 while flat indices (and the outside node) fit, else int64.

    The engine's one switch between 32- and 64-bit indices: every array of flat indices,
    ranks or union-find links takes its type from here (tests lower the limit to run
    the 64-bit path on small volumes).
    """
    return np.dtype(np.int32) if voxels <= INT32_VOXELS else np.dtype(np.int64)


def neighbour_offsets(ndim: int, corners: bool) -> np.ndarray:
    """(k, 3) offsets (dz, dy, dx) of the neighbours of a voxel.

    ``corners=True``: voxels sharing a face, edge or corner (8 in 2D, 26 in 3D);
    ``corners=False``: voxels sharing a face (4 in 2D, 6 in 3D). 2D grids are handled as
    one z-slice, so their offsets have ``dz = 0``.
    """
    span = (-1, 0, 1)
    z_span = span if ndim == 3 else (0,)
    offsets = [(dz, dy, dx) for dz in z_span for dy in span for dx in span
               if (dz, dy, dx) != (0, 0, 0)
               and (corners or abs(dz) + abs(dy) + abs(dx) == 1)]
    return np.array(offsets, dtype=np.int64)


@njit(cache=True, nogil=True)
def value_histogram(values, low, levels, descending):
    """Voxels per level of ``values`` (integers from ``low`` to ``low + levels - 1``), as
    int64 counts (a single level may hold more than 2^31 voxels).

    The level of ``x`` is ``x - low``, or ``low + levels - 1 - x`` when ``descending``, so
    that the highest value comes first.
    """
    counts = np.zeros(levels, dtype=np.int64)
    top = low + levels - 1
    for i in range(values.size):
        x = np.int64(values[i])
        counts[top - x if descending else x - low] += 1
    return counts


@njit(cache=True, nogil=True)
def counting_ranks(values, low, counts, descending, rank):
    """Write into ``rank`` the position of every voxel in the order (level, flat index),
    levels as in :func:`value_histogram` whose ``counts`` are given: a counting sort that
    writes ranks, so no sorted order (nor its scratch) is ever held."""
    levels = counts.size
    next_rank = np.empty(levels, dtype=np.int64)
    total = np.int64(0)
    for k in range(levels):
        next_rank[k] = total
        total += counts[k]
    top = low + levels - 1
    for i in range(values.size):
        x = np.int64(values[i])
        k = top - x if descending else x - low
        rank[i] = next_rank[k]
        next_rank[k] += 1


@njit(cache=True, nogil=True)
def counting_order(keys, levels, order):
    """Fill ``order`` with the flat indices of ``keys`` sorted by key, ties by index.

    ``keys`` are small non-negative integers below ``levels`` (8- or 16-bit data shifted
    to start at 0); one histogram pass and one scatter pass, stable by construction.
    """
    counts = np.zeros(levels + 1, dtype=np.int64)
    for i in range(keys.size):
        counts[keys[i] + 1] += 1
    for k in range(levels):
        counts[k + 1] += counts[k]
    for i in range(keys.size):
        k = keys[i]
        order[counts[k]] = i
        counts[k] += 1


@njit(cache=True, inline="always")
def _find(parent, v):
    # Path halving keeps the trees shallow without a second pass or a rank array.
    while parent[v] != v:
        grand = parent[parent[v]]
        parent[v] = grand
        v = grand
    return v


@njit(cache=True, inline="always")
def _visited_before(values, a, b, ascending):
    va = values[a]
    vb = values[b]
    if ascending:
        return va < vb or (va == vb and a < b)
    return va > vb or (va == vb and a > b)


def _cube_masks():
    """Bit masks over the 3x3x3 cube around a voxel, bit ``9 (dz+1) + 3 (dy+1) + (dx+1)``:
    the positions at x = -1, x = +1, y = -1, y = +1, the 26 neighbours, the 6 faces."""
    bits = np.arange(27)
    x, y = bits % 3, (bits // 3) % 3

    def as_mask(chosen):
        return int(np.sum(1 << bits[chosen]))

    return (as_mask(x == 0), as_mask(x == 2), as_mask(y == 0), as_mask(y == 2),
            as_mask(bits >= 0) & ~(1 << 13),
            sum(1 << (13 + step) for step in (-9, -3, -1, 1, 3, 9)))


_X_LOW, _X_HIGH, _Y_LOW, _Y_HIGH, _CUBE, _FACES = _cube_masks()
_WHOLE_CUBE = (1 << 27) - 1


@njit(cache=True, inline="always")
def _grow(mask, corners):
    """Dilate a set of cube positions by one step of the 26 (or 6) neighbourhood."""
    if corners:
        # The box is separable: grow along x, then y, then z, clipping to the cube at
        # each step so that no bit shifted out of it comes back in.
        along_x = (mask | ((mask << 1) & ~_X_LOW) | ((mask >> 1) & ~_X_HIGH)) & _WHOLE_CUBE
        along_y = (along_x | ((along_x << 3) & ~_Y_LOW)
                   | ((along_x >> 3) & ~_Y_HIGH)) & _WHOLE_CUBE
        return (along_y | (along_y << 9) | (along_y >> 9)) & _CUBE
    return (mask | ((mask << 1) & ~_X_LOW) | ((mask >> 1) & ~_X_HIGH)
            | ((mask << 3) & ~_Y_LOW) | ((mask >> 3) & ~_Y_HIGH)
            | (mask << 9) | (mask >> 9)) & _CUBE


@njit(cache=True, nogil=True)
def link_regular_voxels(values, row_start, row_stop, ascending, shape, cube_offsets,
                        corners, with_outside, parent):
    """Pre-link the voxels that cannot merge anything; mark the others.

    Streams over the rows ``row_start .. row_stop-1`` (row ``z * size_y + y``) in memory
    order. A voxel whose earlier visited neighbours (in the sweep) are all connected to
    each other inside its 3x3x3 cube, through voxels visited before it, joins a component
    that already exists: the sweep would merge nothing there. Such a voxel points at its
    first visited neighbour in the cube (``parent[v] = u``); a voxel with no earlier neighbour is a new
    component (``parent[v] = v``); a voxel on the image border in a sweep with the outside
    and no earlier neighbour joins the outside (``parent[v] = n``). Every other voxel may
    merge components and is marked ``parent[v] = -1`` for :func:`sweep`, which visits
    only those, in order. Parent links always point to voxels visited earlier, so a
    ``find`` from a visited voxel never passes through a voxel the sweep has not reached.

    ``cube_offsets`` are the 26 (2D: 8) offsets of the cube in the order of
    :func:`neighbour_offsets` with corners; the neighbourhood used for joining is the
    full cube when ``corners`` is true, else its faces. Returns the number of marked
    voxels.
    """
    size_z, size_y, size_x = shape[0], shape[1], shape[2]
    plane = size_y * size_x
    k_offsets = cube_offsets.shape[0]
    flat_offsets = np.empty(k_offsets, dtype=np.int64)
    cube_bits = np.empty(k_offsets, dtype=np.int64)
    offset_at = np.zeros(27, dtype=np.int64)
    steps_in_z = False
    for k in range(k_offsets):
        dz, dy, dx = cube_offsets[k, 0], cube_offsets[k, 1], cube_offsets[k, 2]
        flat_offsets[k] = dz * plane + dy * size_x + dx
        position = 9 * (dz + 1) + 3 * (dy + 1) + (dx + 1)
        cube_bits[k] = 1 << position
        offset_at[position] = flat_offsets[k]
        if dz != 0:
            steps_in_z = True
    outside = values.size
    joined_bits = _CUBE if corners else _FACES
    # In the image's interior the tie rule is fixed by the offset's sign: a neighbour at
    # a lower flat index wins a tie in an ascending sweep, loses it in a descending one.
    # Splitting the offsets that way makes the test a single branch-free comparison;
    # neighbour_offsets lists them by increasing flat offset, the first half negative.
    lower_half = k_offsets // 2
    marked = 0
    for row in range(row_start, row_stop):
        z = row // size_y
        y = row - z * size_y
        inner_row = 0 < y < size_y - 1 and (not steps_in_z or 0 < z < size_z - 1)
        v = row * size_x
        for x in range(size_x):
            interior = inner_row and 0 < x < size_x - 1
            visited = 0
            if interior:
                here = values[v]
                if ascending:
                    for k in range(lower_half):
                        visited |= cube_bits[k] * (values[v + flat_offsets[k]] <= here)
                    for k in range(lower_half, k_offsets):
                        visited |= cube_bits[k] * (values[v + flat_offsets[k]] < here)
                else:
                    for k in range(lower_half):
                        visited |= cube_bits[k] * (values[v + flat_offsets[k]] > here)
                    for k in range(lower_half, k_offsets):
                        visited |= cube_bits[k] * (values[v + flat_offsets[k]] >= here)
            else:
                for k in range(k_offsets):
                    zz = z + cube_offsets[k, 0]
                    yy = y + cube_offsets[k, 1]
                    xx = x + cube_offsets[k, 2]
                    if (0 <= zz < size_z and 0 <= yy < size_y and 0 <= xx < size_x
                            and _visited_before(values, v + flat_offsets[k], v, ascending)):
                        visited |= cube_bits[k]
            joined = visited & joined_bits
            on_border = False
            if with_outside and not interior:
                on_border = (y == 0 or y == size_y - 1 or x == 0 or x == size_x - 1
                             or (with_outside == 3 and (z == 0 or z == size_z - 1)))
            if joined == 0:
                parent[v] = outside if on_border else v
            elif on_border:
                parent[v] = -1
                marked += 1
            else:
                lowest = joined & -joined
                reached = lowest
                while True:
                    grown = _grow(reached, corners) & visited
                    if grown == reached:
                        break
                    reached = grown
                if (joined & ~reached) != 0:
                    parent[v] = -1
                    marked += 1
                else:
                    # Any visited neighbour will do (they are all in one component);
                    # the first cube position is found without comparing values.
                    position = 0
                    while (lowest >> position) != 1:
                        position += 1
                    parent[v] = v + offset_at[position]
            v += 1
    return marked


@njit(cache=True, nogil=True)
def sweep(values, order, start, stop, ascending, shape, offsets, with_outside,
          parent, pair_root, pair_voxel, n_pairs):
    """Visit sweep steps ``start .. stop-1`` and record the pairs that die on the way.

    Parameters
    ----------
    values : 1D array
        The image, flattened in C order (any integer or float dtype).
    order : 1D int array
        Flat indices sorted by (value, index); step ``s`` visits ``order[s]`` in an
        ascending sweep and ``order[n - 1 - s]`` in a descending one.
    shape : int64 array (3,)
        (z, y, x) sizes; a 2D image is one z-slice.
    offsets : int64 array (k, 3)
        Neighbour offsets from :func:`neighbour_offsets`.
    with_outside : int
        0: no outside node. 2: the outside node (index ``n``) is a neighbour of every voxel
        on the y or x border (2D); 3: also on the z border (3D).
    parent : int array (n + 1,)
        Union-find forest, kept between calls; entries of unvisited voxels are unused.
    pair_root, pair_voxel : int arrays
        Output buffers: the dying component's oldest voxel and the voxel visited when it
        died. Written from ``n_pairs`` on.

    Returns
    -------
    (next_step, n_pairs) : the first step not yet visited (``stop`` unless the output
    buffers could not hold another voxel's merges) and the number of pairs written.
    """
    outside = values.size
    last = order.size - 1
    size_z, size_y, size_x = shape[0], shape[1], shape[2]
    plane = size_y * size_x
    k_offsets = offsets.shape[0]
    flat_offsets = np.empty(k_offsets, dtype=np.int64)
    for k in range(k_offsets):
        flat_offsets[k] = offsets[k, 0] * plane + offsets[k, 1] * size_x + offsets[k, 2]
    steps_in_z = False
    for k in range(k_offsets):
        if offsets[k, 0] != 0:
            steps_in_z = True
    capacity = pair_root.size
    if with_outside:
        parent[outside] = outside
    for step in range(start, stop):
        if capacity - n_pairs < MERGES_PER_VOXEL:
            return step, n_pairs
        v = order[step] if ascending else order[last - step]
        parent[v] = v
        root_v = v
        z = v // plane
        rest = v - z * plane
        y = rest // size_x
        x = rest - y * size_x
        interior = (0 < y < size_y - 1 and 0 < x < size_x - 1
                    and (not steps_in_z or 0 < z < size_z - 1))
        for k in range(k_offsets + 1):
            if k < k_offsets:
                if interior:
                    u = v + flat_offsets[k]
                else:
                    zz = z + offsets[k, 0]
                    yy = y + offsets[k, 1]
                    xx = x + offsets[k, 2]
                    if (zz < 0 or zz >= size_z or yy < 0 or yy >= size_y
                            or xx < 0 or xx >= size_x):
                        continue
                    u = v + flat_offsets[k]
                if not _visited_before(values, u, v, ascending):
                    continue
                root_u = _find(parent, u)
            else:
                if not with_outside or interior:
                    continue
                on_border = (y == 0 or y == size_y - 1 or x == 0 or x == size_x - 1
                             or (with_outside == 3 and (z == 0 or z == size_z - 1)))
                if not on_border:
                    continue
                root_u = outside
            if root_u == root_v:
                continue
            if root_u == outside or (root_v != outside
                                     and _visited_before(values, root_u, root_v, ascending)):
                young, old = root_v, root_u
            else:
                young, old = root_u, root_v
            parent[young] = old
            root_v = old
            if values[young] != values[v]:
                pair_root[n_pairs] = young
                pair_voxel[n_pairs] = v
                n_pairs += 1
    return stop, n_pairs


def sweep_reference(values: np.ndarray, ascending: bool, corners: bool,
                    with_outside: bool) -> list[tuple[int, int]]:
    """Pure-Python twin of :func:`sweep` over a whole (tiny) 2D or 3D array.

    Returns the (root, voxel) pairs in the order the kernel writes them, so tests can
    compare the two exactly. Readable rather than fast: dictionaries and tuples.
    """
    shape = values.shape
    flat = values.ravel()
    keys = sorted(range(flat.size), key=lambda i: (flat[i], i), reverse=not ascending)

    def visited_before(a, b):
        return ((flat[a], a) < (flat[b], b)) if ascending else ((flat[a], a) > (flat[b], b))

    outside = "outside"
    parent = {outside: outside} if with_outside else {}

    def find(v):
        while parent[v] != v:
            v = parent[v]
        return v

    offsets = [tuple(int(c) for c in row) for row in neighbour_offsets(len(shape), corners)]
    if len(shape) == 2:
        offsets = [(dy, dx) for _, dy, dx in offsets]
    pairs = []
    for v in keys:
        parent[v] = v
        here = np.unravel_index(v, shape)
        neighbours = []
        for offset in offsets:
            there = tuple(int(a) + int(b) for a, b in zip(here, offset))
            if all(0 <= c < s for c, s in zip(there, shape)):
                u = int(np.ravel_multi_index(there, shape))
                if visited_before(u, v):
                    neighbours.append(u)
        on_border = any(c == 0 or c == s - 1 for c, s in zip(here, shape))
        if with_outside and on_border:
            neighbours.append(outside)
        for u in neighbours:
            root_u, root_v = find(u), find(v)
            if root_u == root_v:
                continue
            u_is_elder = root_u == outside or (root_v != outside
                                               and visited_before(root_u, root_v))
            young, old = (root_v, root_u) if u_is_elder else (root_u, root_v)
            parent[young] = old
            if flat[young] != flat[v]:
                pairs.append((young, v))
    return pairs
