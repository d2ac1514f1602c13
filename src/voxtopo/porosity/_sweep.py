"""Union-find sweeps over one phase of a signed distance, deepest voxels first.

Two questions about the sublevel sets ``{f < level}`` of a signed distance ``f``
(negative in the phase being swept) are answered here in one pass each, exactly, without
trying radii:

* percolation: the level at which the voxels touching the inlet face and those touching
  the outlet face of an axis first fall into one component. Each component's root keeps
  the faces it touches (six bits, two per axis), so one sweep answers all the axes: an
  axis percolates when a component first holds both of its faces.
* basins: for each feature (birth voxel, query level) the component of ``{f < level}``
  that holds the birth voxel -- its size, the part of it not already claimed by an earlier
  (nested) basin, and whether it reaches the scan border.

Voxels enter in the order given (increasing ``f``, ties by flat index) and are joined to the
neighbours that entered before them; the neighbourhood is the one of the persistence
construction (26/8 for the voxel construction, 6/4 for the vertex construction), so the
components are those of the diagram. 2D arrays are swept as a single-slice 3D array.

Each numba kernel has a pure-Python twin (``*_python``) small enough to read; the tests run
both on tiny inputs and require the same answer.
"""

from __future__ import annotations

import numpy as np
from numba import njit, types
from numba.typed import Dict

from ..engine._union_find import index_dtype

#: neighbourhood -> offsets (dz, dy, dx) of the neighbours, for a 3D (or single-slice) grid
_FULL = [(dz, dy, dx) for dz in (-1, 0, 1) for dy in (-1, 0, 1) for dx in (-1, 0, 1)
         if (dz, dy, dx) != (0, 0, 0)]
_FACE = [o for o in _FULL if sum(abs(c) for c in o) == 1]


def neighbour_offsets(neighbourhood: int) -> np.ndarray:
    """(k, 3) int64 offsets: 26 or 8 give the full block, 6 or 4 the face neighbours.

    In 2D the z offsets fall outside the single slice and are skipped by the bounds check.
    """
    if neighbourhood in (26, 8):
        return np.array(_FULL, dtype=np.int64)
    if neighbourhood in (6, 4):
        return np.array(_FACE, dtype=np.int64)
    raise ValueError(f"neighbourhood must be 4, 6, 8 or 26, got {neighbourhood}")


def as_3d_shape(shape) -> tuple[int, int, int]:
    """(z, y, x) shape; a 2D (y, x) image is one slice."""
    return (1,) + tuple(shape) if len(shape) == 2 else tuple(shape)


# ---------------------------------------------------------------------------- numba kernels
@njit(cache=True, inline="always")
def _find(parent, i):
    root = i
    while parent[root] != root:
        root = parent[root]
    while parent[i] != root:  # path compression keeps later finds short
        nxt = parent[i]
        parent[i] = root
        i = nxt
    return root


@njit(cache=True, inline="always")
def _neighbour(offsets, k, z, y, x, nz, ny, nx):
    """Flat index of the ``k``-th neighbour of voxel (z, y, x), -1 when off the grid."""
    zz, yy, xx = z + offsets[k, 0], y + offsets[k, 1], x + offsets[k, 2]
    if zz < 0 or zz >= nz or yy < 0 or yy >= ny or xx < 0 or xx >= nx:
        return -1
    return (zz * ny + yy) * nx + xx


#: ``parent`` entry of a voxel that has not entered the percolation sweep; a root holds
#: ``-1 - faces`` (``faces``: 6 bits, see :func:`_percolation_kernel`), so from -1 to -64
_NOT_ENTERED = -65


@njit(cache=True)
def _joining_order(offsets):
    """(order, earlier) for visiting a voxel's neighbours: face neighbours first, and for
    the ``i``-th neighbour visited the bits ``j < i`` of the earlier ones adjacent to it.
    Two neighbours of a voxel that are adjacent to each other and have both entered a
    sweep are already in one component (the later joined the earlier as it entered), so a
    neighbour adjacent to an earlier entered one needs no union: with the full
    neighbourhood a face neighbour alone covers 17 of the 26."""
    count = offsets.shape[0]
    order = np.argsort(np.abs(offsets).sum(axis=1), kind="mergesort")
    earlier = np.zeros(count, np.int64)
    for i in range(count):
        for j in range(i):
            for k in range(count):
                if (offsets[order[i], 0] - offsets[order[j], 0] == offsets[k, 0]
                        and offsets[order[i], 1] - offsets[order[j], 1] == offsets[k, 1]
                        and offsets[order[i], 2] - offsets[order[j], 2] == offsets[k, 2]):
                    earlier[i] |= np.int64(1) << j
    return order, earlier


@njit(cache=True, nogil=True)
def _percolation_kernel(order, shape, wanted, offsets, parent):
    """Step of ``order`` at which the first and last faces of each wanted axis join (-1:
    never), for all the axes in one sweep. A component's root keeps which faces it
    touches (bit 2a: the first face of axis a, bit 2a + 1: its last face) in its own
    ``parent`` entry, as ``-1 - faces``; ``parent``: one entry per voxel, all
    _NOT_ENTERED (index type wide enough for the voxel count)."""
    nz, ny, nx = shape[0], shape[1], shape[2]
    steps = np.full(3, -1, np.int64)
    joining, earlier = _joining_order(offsets)
    left = 0
    for a in range(3):
        left += wanted[a]
    for step in range(order.shape[0]):
        if left == 0:
            break
        v = np.int64(order[step])
        z = v // (ny * nx)
        y = (v // nx) % ny
        x = v % nx
        faces = 0
        for a in range(3):
            coord = z if a == 0 else (y if a == 1 else x)
            if coord == 0:
                faces |= 1 << (2 * a)
            if coord == shape[a] - 1:
                faces |= 2 << (2 * a)
        parent[v] = -1 - faces
        entered = np.int64(0)
        for i in range(joining.shape[0]):
            w = _neighbour(offsets, joining[i], z, y, x, nz, ny, nx)
            if w < 0 or parent[w] == _NOT_ENTERED:
                continue
            entered |= np.int64(1) << i
            if entered & earlier[i]:
                continue
            r = _root(parent, w)
            if r != v:
                faces |= -1 - np.int64(parent[r])
                parent[r] = v
                parent[v] = -1 - faces
        for a in range(3):
            if wanted[a] and steps[a] < 0 and (faces >> (2 * a)) & 3 == 3:
                steps[a] = step
                left -= 1
    return steps


@njit(cache=True, inline="always")
def _bit(bits, i):
    return (bits[i >> 3] >> (i & 7)) & 1


@njit(cache=True, inline="always")
def _set_bit(bits, i):
    bits[i >> 3] |= np.uint8(1 << (i & 7))


@njit(cache=True, inline="always")
def _root(parent, i):
    """Root of ``i`` where a root holds minus its component's size (path compression)."""
    root = i
    while parent[root] >= 0:
        root = np.int64(parent[root])
    while parent[i] >= 0 and parent[i] != root:
        nxt = np.int64(parent[i])
        parent[i] = root
        i = nxt
    return root


@njit(cache=True, nogil=True)
def _basin_kernel(order, values, sign, shape, offsets, query_voxel, query_level, edge,
                  parent, border):
    """``parent``: one index per voxel (type wide enough for the voxel count); a root holds
    minus its size. ``border``: one zero bit per voxel; a root's bit says whether its
    component reaches the border. ``edge`` empty: the border is the scan's outer layer (of
    a 2D image when ``shape`` is one slice). After the sweep ``parent`` and ``border`` hold
    the connected pieces of the whole phase."""
    nz, ny, nx = shape[0], shape[1], shape[2]
    n = nz * ny * nx
    visited = np.zeros((n + 7) // 8, dtype=np.uint8)
    # voxels claimed by earlier queries, kept for the few roots that were queried
    has_claim = np.zeros((n + 7) // 8, dtype=np.uint8)
    claimed = Dict.empty(key_type=types.int64, value_type=types.int64)
    nq = query_voxel.shape[0]
    out_size = np.zeros(nq, dtype=np.int64)
    out_own = np.zeros(nq, dtype=np.int64)
    out_border = np.zeros(nq, dtype=np.bool_)
    outer_layer = edge.shape[0] == 0
    steps = order.shape[0]
    # a query is answered before the first step whose voxel's level is not below the
    # query's (the levels rise along ``order``): its basin is then exactly the component
    # of {f < query level}; found by bisection, so the sweep reads no value
    answer_at = np.empty(nq, np.int64)
    for i in range(nq):
        low, high = 0, steps
        while low < high:
            middle = (low + high) // 2
            if sign * values[order[middle]] < query_level[i]:
                low = middle + 1
            else:
                high = middle
        answer_at[i] = low
    # flat offsets of the neighbours of a voxel away from the faces (no bounds to check)
    flat = np.empty(offsets.shape[0], np.int64)
    for k in range(offsets.shape[0]):
        flat[k] = (offsets[k, 0] * ny + offsets[k, 1]) * nx + offsets[k, 2]
    joining, earlier = _joining_order(offsets)
    q = 0
    for step in range(steps + 1):
        while q < nq and answer_at[q] <= step:
            if _bit(visited, query_voxel[q]):
                r = _root(parent, query_voxel[q])
                size = -np.int64(parent[r])
                taken = claimed[r] if _bit(has_claim, r) else 0
                out_size[q] = size
                out_own[q] = size - taken
                out_border[q] = _bit(border, r) == 1
                claimed[r] = size
                _set_bit(has_claim, r)
            q += 1
        if step == steps:
            break
        v = np.int64(order[step])
        parent[v] = -1
        _set_bit(visited, v)
        z = v // (ny * nx)
        y = (v // nx) % ny
        x = v % nx
        if outer_layer:
            # a 2D image is one slice, whose z is no border
            on_edge = ((nz > 1 and (z == 0 or z == nz - 1)) or y == 0 or y == ny - 1
                       or x == 0 or x == nx - 1)
        else:
            on_edge = edge[v]
        if on_edge:
            _set_bit(border, v)
        inside = 0 < z < nz - 1 and 0 < y < ny - 1 and 0 < x < nx - 1
        root = v  # v's root, followed through the unions below
        entered = np.int64(0)
        for i in range(joining.shape[0]):
            if inside:
                w = v + flat[joining[i]]
            else:
                w = _neighbour(offsets, joining[i], z, y, x, nz, ny, nx)
                if w < 0:
                    continue
            if not _bit(visited, w):
                continue
            entered |= np.int64(1) << i
            if entered & earlier[i]:
                continue
            a, b = root, _root(parent, w)
            if a != b:
                if parent[a] < parent[b]:  # a is the larger: it stays the root
                    a, b = b, a
                parent[b] += parent[a]
                parent[a] = b
                root = b
                if _bit(border, a):
                    _set_bit(border, b)
                if _bit(has_claim, a):
                    taken = claimed.pop(a)
                    if _bit(has_claim, b):
                        claimed[b] += taken
                    else:
                        claimed[b] = taken
                        _set_bit(has_claim, b)
    return out_size, out_own, out_border


@njit(cache=True, inline="always")
def _slot_of(key, table, used, mask):
    """Slot of ``key`` in an open-addressing table (the empty slot where it would go)."""
    slot = np.int64((np.uint64(key) * np.uint64(0x9E3779B97F4A7C15)) >> np.uint64(40)) & mask
    while used[slot] and table[slot] != key:
        slot = (slot + 1) & mask
    return slot


@njit(cache=True, nogil=True)
def _distinct_keys(keys, inside, member):
    """Open-addressing table of the distinct ``keys`` of the voxels with ``inside == member``
    (table, used, first voxel of each key); the table grows to stay at most half full."""
    capacity = 1 << 12
    table = np.zeros(capacity, keys.dtype)
    used = np.zeros(capacity, np.bool_)
    first = np.zeros(capacity, np.int64)
    count = 0
    last_key = keys[0]
    seen_any = False
    for i in range(keys.shape[0]):
        if inside[i] != member:
            continue
        key = keys[i]
        if seen_any and key == last_key:  # neighbours along a line often share a value
            continue
        seen_any, last_key = True, key
        slot = _slot_of(key, table, used, capacity - 1)
        if used[slot]:
            continue
        used[slot], table[slot], first[slot] = True, key, i
        count += 1
        if 2 * count > capacity:
            old_table, old_used, old_first = table, used, first
            capacity *= 2
            table = np.zeros(capacity, keys.dtype)
            used = np.zeros(capacity, np.bool_)
            first = np.zeros(capacity, np.int64)
            for s in range(old_table.shape[0]):
                if old_used[s]:
                    t = _slot_of(old_table[s], table, used, capacity - 1)
                    used[t], table[t], first[t] = True, old_table[s], old_first[s]
    return table, used, first


@njit(cache=True, nogil=True)
def _ranked_order(values, keys, inside, member, descending, out):
    """Counting sort of the voxels with ``inside == member`` by the rank of their value
    among the distinct values (ties keep increasing flat index), into ``out``."""
    table, used, first = _distinct_keys(keys, inside, member)
    slots = np.flatnonzero(used)
    distinct = np.empty(slots.shape[0], np.float64)
    for j in range(slots.shape[0]):
        distinct[j] = -values[first[slots[j]]] if descending else values[first[slots[j]]]
    by_value = np.argsort(distinct)
    rank_of_slot = np.zeros(table.shape[0], np.int64)
    rank = -1
    for j in range(by_value.shape[0]):
        if j == 0 or distinct[by_value[j]] != distinct[by_value[j - 1]]:
            rank += 1  # equal values (0.0 and -0.0) share a rank
        rank_of_slot[slots[by_value[j]]] = rank
    start = np.zeros(rank + 2, np.int64)
    mask = table.shape[0] - 1
    for i in range(keys.shape[0]):
        if inside[i] == member:
            start[rank_of_slot[_slot_of(keys[i], table, used, mask)] + 1] += 1
    for r in range(rank + 1):
        start[r + 1] += start[r]
    for i in range(keys.shape[0]):
        if inside[i] == member:
            r = rank_of_slot[_slot_of(keys[i], table, used, mask)]
            out[start[r]] = i
            start[r] += 1


@njit(cache=True, nogil=True)
def _roots_of(parent, voxels):
    """Root of each voxel in a finished union-find (a root holds minus its size)."""
    roots = np.empty(voxels.shape[0], np.int64)
    for i in range(voxels.shape[0]):
        roots[i] = _root(parent, np.int64(voxels[i]))
    return roots


@njit(cache=True, nogil=True)
def _count_roots(parent, order):
    count = 0
    for i in range(order.shape[0]):
        if parent[order[i]] < 0:
            count += 1
    return count


@njit(cache=True, nogil=True)
def _face_roots(parent, phase, axis, end):
    """Roots of the ``phase`` voxels on the face ``end`` (0 or -1) of ``axis`` of a 3D
    grid, one per voxel (repeated)."""
    nz, ny, nx = phase.shape
    plane = phase.shape[axis] - 1 if end < 0 else 0
    rows, cols = (ny, nx) if axis == 0 else ((nz, nx) if axis == 1 else (nz, ny))
    roots = np.empty(rows * cols, np.int64)
    count = 0
    for r in range(rows):
        for c in range(cols):
            if axis == 0:
                z, y, x = plane, r, c
            elif axis == 1:
                z, y, x = r, plane, c
            else:
                z, y, x = r, c, plane
            if phase[z, y, x]:
                roots[count] = _root(parent, np.int64((z * ny + y) * nx + x))
                count += 1
    return roots[:count]


class Pieces:
    """The connected pieces of a whole phase, as its basin sweep left them: a union-find
    with one index per voxel (a root holds minus its piece's size) and one bit per voxel
    (a root's bit: its piece reaches the border). The same pieces as
    ``scipy.ndimage.label`` with the phase's neighbourhood, without a label array."""

    def __init__(self, parent: np.ndarray, border: np.ndarray, order: np.ndarray, shape):
        self.parent, self.border, self.shape = parent, border, as_3d_shape(shape)
        self._order = order

    def count(self) -> int:
        """Number of pieces."""
        return int(_count_roots(self.parent, self._order))

    def piece_of(self, voxels) -> np.ndarray:
        """The piece (its root's flat index) of each flat voxel index of the phase."""
        return _roots_of(self.parent, np.ascontiguousarray(voxels, dtype=np.int64))

    def at_border(self, pieces: np.ndarray) -> np.ndarray:
        """Whether each piece reaches the border (the scan's outer layer or ``edge``)."""
        pieces = np.asarray(pieces, dtype=np.int64)
        return ((self.border[pieces >> 3] >> (pieces & 7)) & 1).astype(bool)

    def sizes(self, pieces: np.ndarray) -> np.ndarray:
        """Voxels in each piece."""
        return -self.parent[np.asarray(pieces, dtype=np.int64)].astype(np.int64)

    def on_face(self, phase: np.ndarray, axis: int, end: int) -> np.ndarray:
        """The distinct pieces with a voxel of ``phase`` (bool, the swept phase) on the
        first (``end`` 0) or last (-1) face of ``axis``."""
        phase3 = phase.reshape(self.shape)
        axis3 = axis + 3 - phase.ndim
        return np.unique(_face_roots(self.parent, phase3, axis3, end))


# ------------------------------------------------------------------------ pure-Python twins
def _find_python(parent, i):
    while parent[i] != i:
        i = parent[i]
    return i


def _neighbours_python(v, shape, offsets):
    nz, ny, nx = shape
    z, y, x = v // (ny * nx), (v // nx) % ny, v % nx
    for dz, dy, dx in offsets:
        zz, yy, xx = z + dz, y + dy, x + dx
        if 0 <= zz < nz and 0 <= yy < ny and 0 <= xx < nx:
            yield (zz * ny + yy) * nx + xx


def percolation_step_python(order, shape, axis, offsets):
    """Twin of the percolation kernel: index into ``order`` of the voxel whose arrival
    joins the inlet face to the outlet face of ``axis``, or -1 when they never join."""
    nz, ny, nx = shape
    inlet, outlet = "inlet", "outlet"
    parent = {inlet: inlet, outlet: outlet}
    for step, v in enumerate(order):
        v = int(v)
        parent[v] = v
        coord = (v // (ny * nx), (v // nx) % ny, v % nx)[axis]
        joins = [w for w in _neighbours_python(v, shape, offsets) if w in parent]
        if coord == 0:
            joins.append(inlet)
        if coord == shape[axis] - 1:
            joins.append(outlet)
        for w in joins:
            parent[_find_python(parent, v)] = _find_python(parent, w)
        if _find_python(parent, inlet) == _find_python(parent, outlet):
            return step
    return -1


def basins_python(order, values, shape, offsets, query_voxel, query_level, on_border):
    """Twin of the basin kernel: for each query (sorted by level), the size of the
    component of ``{f < level}`` holding the voxel, its unclaimed part and its border flag."""
    sizes, owns, borders = [], [], []
    claimed_voxels = set()
    for voxel, level in zip(query_voxel, query_level):
        entered = {int(v) for v in order if values[v] < level}
        if int(voxel) not in entered:
            sizes.append(0)
            owns.append(0)
            borders.append(False)
            continue
        component, stack = {int(voxel)}, [int(voxel)]
        while stack:
            v = stack.pop()
            for w in _neighbours_python(v, shape, offsets):
                if w in entered and w not in component:
                    component.add(w)
                    stack.append(w)
        sizes.append(len(component))
        owns.append(len(component - claimed_voxels))
        borders.append(any(on_border[v] for v in component))
        claimed_voxels |= component
    return np.array(sizes, np.int64), np.array(owns, np.int64), np.array(borders, bool)


# ------------------------------------------------------------------------------ front end
def sweep_order(values: np.ndarray, phase: np.ndarray, *, member: bool = True,
                descending: bool = False) -> np.ndarray:
    """Flat indices of the voxels where ``phase == member``, by increasing value (by
    decreasing value with ``descending``), ties by flat index.

    A counting sort over the ranks of the distinct values (a distance transform has few):
    the only array as large as the phase is the result, of the narrowest index type
    (:func:`voxtopo.engine._union_find.index_dtype`)."""
    flat = np.ascontiguousarray(values).ravel()
    if flat.dtype not in (np.float32, np.float64):
        flat = flat.astype(np.float64)
    inside = np.ascontiguousarray(phase, dtype=bool).ravel()
    count = int(np.count_nonzero(inside)) if member else int(inside.size
                                                             - np.count_nonzero(inside))
    order = np.empty(count, dtype=index_dtype(flat.size))
    if count:
        keys = flat.view(np.uint32 if flat.itemsize == 4 else np.uint64)
        _ranked_order(flat, keys, inside, bool(member), bool(descending), order)
    return order


def border_voxels(shape) -> np.ndarray:
    """Flat bool array: True on the first or last slice along any axis of the scan."""
    on = np.zeros(shape, dtype=bool)
    for axis in range(len(shape)):
        index = [slice(None)] * len(shape)
        index[axis] = 0
        on[tuple(index)] = True
        index[axis] = -1
        on[tuple(index)] = True
    return on.ravel()


def percolation_steps(order, shape, axes, neighbourhood) -> dict:
    """Position in ``order`` of the voxel that first joins the two faces of each axis in
    ``axes`` (-1 when never), all from one sweep: see the module docstring."""
    shape3 = as_3d_shape(shape)
    shift = 3 - len(shape)
    wanted = np.zeros(3, dtype=np.int64)
    wanted[[a + shift for a in axes]] = 1
    voxels = int(np.prod(shape3, dtype=np.int64))
    parent = np.full(voxels, _NOT_ENTERED, dtype=index_dtype(voxels))
    steps = _percolation_kernel(np.asarray(order), np.array(shape3, dtype=np.int64), wanted,
                                neighbour_offsets(neighbourhood), parent)
    return {a: int(steps[a + shift]) for a in axes}


def percolation_step(order, shape, axis, neighbourhood, python=False) -> int:
    """Position in ``order`` of the voxel that first joins the two faces of ``axis``
    (-1 when never): see the module docstring."""
    if python:
        return percolation_step_python(order, as_3d_shape(shape), axis + (3 - len(shape)),
                                       neighbour_offsets(neighbourhood))
    return percolation_steps(order, shape, [axis], neighbourhood)[axis]


def basins(order, values, shape, neighbourhood, query_voxel, query_level, python=False,
           edge=None, flip=False):
    """(size, own, border) of each query's basin; queries must be sorted by level.

    ``values`` is swept as ``-values`` with ``flip`` (the solid of a signed distance),
    without a copy. ``edge``: flat bool array of the voxels that count as border (default:
    the scan's outer layer, :func:`border_voxels`); a region of interest adds its own rim.
    Besides ``order``, the kernel holds one index per voxel and three bits."""
    shape3 = as_3d_shape(shape)
    offsets = neighbour_offsets(neighbourhood)
    flat_values = np.ascontiguousarray(values).ravel()
    query_voxel = np.ascontiguousarray(query_voxel, dtype=np.int64)
    query_level = np.ascontiguousarray(query_level, dtype=np.float64)
    if python:
        on_border = border_voxels(shape) if edge is None else np.ravel(edge)
        depth = -flat_values if flip else flat_values
        return basins_python(order, depth, shape3, offsets, query_voxel, query_level,
                             on_border)
    size, own, touches, _ = _basins_and_pieces(order, flat_values, shape3, offsets, query_voxel,
                                               query_level, edge, flip)
    return size, own, touches


def _basins_and_pieces(order, flat_values, shape3, offsets, query_voxel, query_level, edge,
                       flip):
    on_border = np.zeros(0, dtype=bool) if edge is None else np.ascontiguousarray(edge).ravel()
    parent = np.empty(flat_values.size, dtype=index_dtype(flat_values.size))
    border = np.zeros((flat_values.size + 7) // 8, dtype=np.uint8)
    size, own, touches = _basin_kernel(np.asarray(order), flat_values, -1.0 if flip else 1.0,
                                       np.array(shape3, dtype=np.int64), offsets, query_voxel,
                                       query_level, on_border, parent, border)
    return size, own, touches, Pieces(parent, border, order, shape3)


def basins_and_pieces(order, values, shape, neighbourhood, query_voxel, query_level,
                      edge=None, flip=False):
    """:func:`basins` (``order`` must hold every voxel of the phase), and the phase's
    connected pieces from the same sweep (:class:`Pieces`); the basins' union-find is
    kept for them, so no label array is made."""
    size, own, touches, pieces = _basins_and_pieces(
        order, np.ascontiguousarray(values).ravel(), as_3d_shape(shape),
        neighbour_offsets(neighbourhood), np.ascontiguousarray(query_voxel, dtype=np.int64),
        np.ascontiguousarray(query_level, dtype=np.float64), edge, flip)
    return (size, own, touches), pieces
