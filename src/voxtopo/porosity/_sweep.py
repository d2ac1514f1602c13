"""Union-find sweeps over one phase of a signed distance, deepest voxels first.

Two questions about the sublevel sets ``{f < level}`` of a signed distance ``f``
(negative in the phase being swept) are answered here in one pass each, exactly, without
trying radii:

* percolation: the level at which the voxels touching the inlet face and those touching
  the outlet face of an axis first fall into one component. Each face is a virtual node
  of the union-find (indices ``n`` and ``n + 1``); a voxel on a face is joined to its node
  as it enters the sweep.
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
from numba import njit

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


@njit(cache=True, nogil=True)
def _percolation_kernel(order, shape, axis, offsets):
    nz, ny, nx = shape[0], shape[1], shape[2]
    n = nz * ny * nx
    inlet, outlet = n, n + 1
    parent = np.full(n + 2, -1, dtype=np.int64)
    parent[inlet] = inlet
    parent[outlet] = outlet
    last = shape[axis] - 1
    for step in range(order.shape[0]):
        v = order[step]
        parent[v] = v
        z = v // (ny * nx)
        y = (v // nx) % ny
        x = v % nx
        coord = z if axis == 0 else (y if axis == 1 else x)
        if coord == 0:
            a, b = _find(parent, v), _find(parent, inlet)
            if a != b:
                parent[a] = b
        if coord == last:
            a, b = _find(parent, v), _find(parent, outlet)
            if a != b:
                parent[a] = b
        for k in range(offsets.shape[0]):
            w = _neighbour(offsets, k, z, y, x, nz, ny, nx)
            if w < 0 or parent[w] < 0:
                continue
            a, b = _find(parent, v), _find(parent, w)
            if a != b:
                parent[a] = b
        if _find(parent, inlet) == _find(parent, outlet):
            return step
    return -1


@njit(cache=True, nogil=True)
def _basin_kernel(order, values, shape, offsets, query_voxel, query_level, on_border):
    nz, ny, nx = shape[0], shape[1], shape[2]
    n = nz * ny * nx
    parent = np.full(n, -1, dtype=np.int64)
    size = np.zeros(n, dtype=np.int64)
    claimed = np.zeros(n, dtype=np.int64)
    border = np.zeros(n, dtype=np.bool_)
    nq = query_voxel.shape[0]
    out_size = np.zeros(nq, dtype=np.int64)
    out_own = np.zeros(nq, dtype=np.int64)
    out_border = np.zeros(nq, dtype=np.bool_)
    q = 0
    for step in range(order.shape[0] + 1):
        level = values[order[step]] if step < order.shape[0] else np.inf
        # answer every query whose level is not above the next voxel's value: the basin
        # is then exactly the component of {f < query level}
        while q < nq and query_level[q] <= level:
            r = _find(parent, query_voxel[q]) if parent[query_voxel[q]] >= 0 else -1
            if r >= 0:
                out_size[q] = size[r]
                out_own[q] = size[r] - claimed[r]
                out_border[q] = border[r]
                claimed[r] = size[r]
            q += 1
        if step == order.shape[0]:
            break
        v = order[step]
        parent[v] = v
        size[v] = 1
        border[v] = on_border[v]
        z = v // (ny * nx)
        y = (v // nx) % ny
        x = v % nx
        for k in range(offsets.shape[0]):
            w = _neighbour(offsets, k, z, y, x, nz, ny, nx)
            if w < 0 or parent[w] < 0:
                continue
            a, b = _find(parent, v), _find(parent, w)
            if a != b:
                parent[a] = b
                size[b] += size[a]
                claimed[b] += claimed[a]
                border[b] = border[b] or border[a]
    return out_size, out_own, out_border


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
def sweep_order(values: np.ndarray, phase: np.ndarray) -> np.ndarray:
    """Flat indices of the ``phase`` voxels by increasing value, ties by flat index."""
    flat = values.ravel()
    candidates = np.flatnonzero(phase.ravel())
    return candidates[np.argsort(flat[candidates], kind="stable")]


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


def percolation_step(order, shape, axis, neighbourhood, python=False) -> int:
    """Position in ``order`` of the voxel that first joins the two faces of ``axis``
    (-1 when never): see the module docstring."""
    shape3 = as_3d_shape(shape)
    axis3 = axis + (3 - len(shape))
    offsets = neighbour_offsets(neighbourhood)
    if python:
        return percolation_step_python(order, shape3, axis3, offsets)
    return int(_percolation_kernel(np.ascontiguousarray(order, dtype=np.int64),
                                   np.array(shape3, dtype=np.int64), axis3, offsets))


def basins(order, values, shape, neighbourhood, query_voxel, query_level, python=False,
           edge=None):
    """(size, own, border) of each query's basin; queries must be sorted by level.

    ``edge``: flat bool array of the voxels that count as border (default: the scan's outer
    layer, :func:`border_voxels`); a region of interest adds its own rim."""
    shape3 = as_3d_shape(shape)
    offsets = neighbour_offsets(neighbourhood)
    flat_values = np.ascontiguousarray(values.ravel(), dtype=np.float64)
    on_border = border_voxels(shape) if edge is None else np.ascontiguousarray(edge.ravel())
    query_voxel = np.ascontiguousarray(query_voxel, dtype=np.int64)
    query_level = np.ascontiguousarray(query_level, dtype=np.float64)
    if python:
        return basins_python(order, flat_values, shape3, offsets, query_voxel, query_level,
                             on_border)
    return _basin_kernel(np.ascontiguousarray(order, dtype=np.int64), flat_values,
                         np.array(shape3, dtype=np.int64), offsets, query_voxel, query_level,
                         on_border)
