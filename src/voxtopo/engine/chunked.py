"""Out-of-core persistence: the exact dimension-0 (and d-1) diagram of a chunked array.

The engine takes arrays, not files: anything with ``shape``, ``dtype``, ``chunks`` and
``__getitem__`` (a zarr array, :class:`voxtopo.io.ChunkedArray` from
:func:`voxtopo.io.open_chunked`, a dask or numpy array) is read one chunk at a time. Each
chunk is swept by a dask task (:func:`voxtopo.engine._chunk_merge.reduce_chunk`),
which finishes the pairs it can decide alone and hands on a reduced graph of what it cannot.
Neighbouring blocks are then merged pairwise, level by level along the axis where the
blocks are thinnest, by further dask tasks that read the two voxel planes on either side
of their shared face, add the grid edges that cross it (of each strip of the face's rows
only a spanning forest in sweep order, at most one edge per voxel: the others close
cycles of earlier edges, which no sweep needs), and reduce again
(:func:`voxtopo.engine._chunk_merge.reduce_graph`). Only the last task sees the whole
volume's reduced graph, whose size is set by the faces between blocks, not by their
volume; :func:`planned_merges` gives the most each merge can hold.

::

    chunks:   [A][B][C][D]        one task each: sweep, finish what is inside
    merges:   [A+B]  [C+D]        one task each: plane pair at the shared face
    top:      [A+B+C+D]           every remaining merge is final; one essential class

A sweep can also follow the faces of the image each component touches (two bits per axis,
as the in-memory percolation sweep does): a component that reaches past its block hands
on the faces it gains as edges to no vertex, so that each merge knows them, and the first
voxel whose entry leaves one component on both faces of an axis is where the image is
crossed along it (:func:`chunked_persistence_and_crossings`).

The result equals the in-memory diagram of dimension 0 and, by the duality of image
constructions (Garin, Heiss, Maggs, Bleile & Robins 2020), of dimension d-1: the same
multiset of (birth, death) pairs, with locations that are voxels holding exactly those
values. Dimension 1 of a 3D volume needs the full boundary-matrix reduction and is not
computed out of core; the diagram says so in its notes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from itertools import product

import numpy as np

from ..diagram import Diagram, check_min_persistence
from ..errors import InputError, TooBigError
from ..io._chunked import chunks_of
from ..memory import BUDGET_FRACTION, ensure_fits, human, worker_memory_limits
from ..scan import Scan
from . import _chunk_merge as kernel
from ._pairs import RawPairs, check_exact_in_float64
from ._union_find import link_regular_voxels, neighbour_offsets
from .own import sorted_order

__all__ = ["BYTES_PER_CHUNK_VOXEL", "PlannedMerge", "chunked_merges", "chunked_merges_of_each",
           "chunked_persistence", "chunked_persistence_and_border_merges",
           "chunked_persistence_and_crossings", "planned_merge_bytes", "planned_merges"]

#: Memory of a dask worker before any task: the interpreter with numpy, scipy, zarr, dask
#: and numba's compiled kernels (measured: 0.38 GB resident in each worker of a local
#: cluster after a 32^3 run).
WORKER_BASELINE_BYTES = 400_000_000

#: Edges across a merged face taken at a time: one strip of the face's rows, of which a
#: spanning forest is kept (see :func:`_cross_edges`).
CROSS_STRIP_EDGES = 1 << 20

#: Bytes per voxel of one chunk task: the values as float64, the sort order, union-find
#: forest, flags and the four output buffers (int64 each).
BYTES_PER_CHUNK_VOXEL = 8 * 8 + 4

#: Bytes a merge task holds per vertex of its two blocks' reduced graphs: the blocks'
#: ids and values (16), their joined copy, its stable sort's order, the sorted copy and
#: the first-copy mask (41), the flags of the merged box (3), the union-find forest and
#: record buffers (34), the mark of the vertices it keeps, their places and the roots
#: (17) and the block it hands on (16).
BYTES_PER_MERGE_VERTEX = 16 + 41 + 3 + 34 + 17 + 16

#: Bytes a merge task holds per edge of its blocks' graphs: the blocks' columns (ends,
#: voxel, value: 32), their joined copy (32), both ends' positions (16) and the sweep
#: order with its spare buffer (16).
BYTES_PER_MERGE_EDGE = 32 + 32 + 16 + 16

#: Bytes per edge across the shared face that is kept (a spanning forest of each strip
#: of the face's rows): the strips' kept columns and their joined copy (64), then the
#: joined copy put in sweep order (its order and the sorted columns beside it: 72), then
#: the merge's joined columns (32), both ends' positions (16) and the sweep order with
#: its spare buffer (16); the strips' columns are let go before the merge's are made.
BYTES_PER_CROSSING_EDGE = 72

#: Bytes per edge of the strip whose spanning forest is being found: its columns from
#: each offset (32) and joined (32), both ends' places on the face with their shifted
#: copies (32), the sweep order with its reversed copy (16), the found flags (1) and the
#: side masks (3); the union-find forest over the places is at most 16 more, as a strip
#: has at least one edge for every two of its places.
BYTES_PER_STRIP_EDGE = 32 + 32 + 32 + 16 + 16 + 1 + 3

#: Bytes per voxel of the shared face: the two planes' values (float64) and ids (int64),
#: and the voxels' places on the face (int64).
BYTES_PER_FACE_VOXEL = 2 * (8 + 8) + 8

#: A block's reduced graph has one vertex per flagged voxel of its box and, beyond them,
#: the first voxels of the basins inside the box that reach a flagged voxel, its root and
#: the outside node; those basins are planned as at most this share of the flagged voxels
#: (measured: under 1 % of them in the sweeps of distance fields).
INNER_ROOTS_PER_FLAGGED_VOXEL = 1 / 16

@dataclass(frozen=True)
class _Sweep:
    ascending: bool
    corners: bool
    with_outside: bool
    #: bits of the image's faces to follow (2a and 2a + 1: the first and last face along
    #: axis a of the 3D grid): the sweep also finds where both faces of an axis first
    #: fall into one component
    faces: int = 0


@dataclass
class _Block:
    """A block of chunks summarised by its reduced graph (global C-order voxel ids); an
    edge whose ``edge_b`` is negative is a face gain (:func:`_face_edge_end`)."""

    lo: tuple
    hi: tuple
    vert_id: np.ndarray
    vert_value: np.ndarray
    edge_a: np.ndarray
    edge_b: np.ndarray
    edge_voxel: np.ndarray
    edge_value: np.ndarray


@dataclass
class _Pairs:
    young_id: np.ndarray
    young_value: np.ndarray
    voxel_id: np.ndarray
    voxel_value: np.ndarray
    #: per axis of the 3D grid, the voxel (-1: none) and value where a task saw both
    #: faces of the axis first fall into one component (faces followed only)
    crossing_id: np.ndarray = None
    crossing_value: np.ndarray = None


def _face_edge_end(bits):
    """The second end of a face-gain edge, which joins its vertex to no vertex: -1 - the
    bits of the faces gained (a vertex is never negative)."""
    return -1 - np.asarray(bits, np.int64)


def _first_crossings(ids, values, ascending):
    """Per axis, the (id, value) first in sweep order among ``ids`` (-1: none)."""
    found_id = np.full(3, -1, np.int64)
    found_value = np.full(3, np.nan)
    for a in range(3):
        seen = ids[:, a] >= 0
        if seen.any():
            order = _sweep_order(values[seen, a], ids[seen, a], ascending)
            found_id[a] = ids[seen, a][order[0]]
            found_value[a] = values[seen, a][order[0]]
    return found_id, found_value


def _face_bits(lo, hi, shape3, coords, wanted):
    """The bits of the image faces (among ``wanted``) each voxel of [lo, hi) lies on."""
    bits = np.zeros(np.broadcast(*coords).shape, dtype=np.uint8)
    for a in range(3):
        if wanted & (1 << (2 * a)) and lo[a] == 0:
            bits |= (coords[a] == 0).astype(np.uint8) << (2 * a)
        if wanted & (2 << (2 * a)) and hi[a] == shape3[a]:
            bits |= (coords[a] == shape3[a] - 1).astype(np.uint8) << (2 * a + 1)
    return bits


class _Grid:
    """The array as the tasks see it: its shape, the block shape of the tasks, and boxes
    read as C-contiguous arrays. Picklable when the array is (zarr arrays are)."""

    def __init__(self, array, chunks, name: str, edge=None):
        self.array = array
        self.edge = edge
        self.shape = tuple(int(n) for n in array.shape)
        self.dtype = np.dtype(array.dtype)
        self.chunks = tuple(int(c) for c in chunks)
        self.source = name

    @property
    def ndim(self) -> int:
        return len(self.shape)

    def read(self, lo, hi, array=None) -> np.ndarray:
        """The box [lo, hi) of the array (or of ``array`` on the same grid) as a
        C-contiguous array."""
        index = tuple(slice(int(a), int(b)) for a, b in zip(lo, hi))
        try:
            return np.ascontiguousarray(np.asarray((self.array if array is None
                                                    else array)[index]))
        except InputError:
            raise
        except Exception as exc:
            raise InputError(f"{self.source} could not be read at {list(zip(lo, hi))}; a "
                             f"chunk may be missing or corrupt "
                             f"({' '.join(str(exc).split())[:100]}).") from None


# --- geometry helpers (everything is handled in 3D; a 2D image is one z-slice) ---------------
def _pad3(t, fill):
    return (fill,) * (3 - len(t)) + tuple(t)


def _flags(lo, hi, shape3, coords):
    """1 where a voxel at global ``coords`` (tuple of arrays) has a neighbour outside the
    block [lo, hi) but inside the image."""
    flag = np.zeros(np.broadcast(*coords).shape, dtype=np.uint8)
    for a in range(3):
        if lo[a] > 0:
            flag |= (coords[a] == lo[a])
        if hi[a] < shape3[a]:
            flag |= (coords[a] == hi[a] - 1)
    return flag


def _grid_coords(lo, hi):
    return np.meshgrid(*[np.arange(a, b) for a, b in zip(lo, hi)], indexing="ij", sparse=True)


def _on_border(lo, hi, shape3, real_axes):
    coords = _grid_coords(lo, hi)
    border = np.zeros(tuple(b - a for a, b in zip(lo, hi)), dtype=np.uint8)
    for a in real_axes:
        border |= (coords[a] == 0) | (coords[a] == shape3[a] - 1)
    return border


def _read3(source: _Grid, lo, hi) -> np.ndarray:
    lo2, hi2 = lo[3 - source.ndim:], hi[3 - source.ndim:]
    block = source.read(lo2, hi2)
    return block.reshape(tuple(b - a for a, b in zip(lo, hi)))


def _sweep_order(values: np.ndarray, ids: np.ndarray, ascending: bool) -> np.ndarray:
    order = np.lexsort((ids, values))
    return order if ascending else order[::-1].copy()


def _later(value_a, id_a, value_b, id_b, ascending):
    """True where (value_b, id_b) is visited after (value_a, id_a)."""
    if ascending:
        return (value_b > value_a) | ((value_b == value_a) & (id_b > id_a))
    return (value_b < value_a) | ((value_b == value_a) & (id_b < id_a))


# --- the dask tasks ------------------------------------------------------------------
def _reduce_leaf(source: _Grid, lo, hi, sweep: _Sweep):
    shape3 = _pad3(source.shape, 1)
    n_total = int(np.prod(shape3))
    data = _read3(source, lo, hi)
    check_exact_in_float64(data, source.source)
    cshape = data.shape
    flat = data.reshape(-1)
    n = flat.size
    coords = _grid_coords(lo, hi)
    flagged = np.ascontiguousarray(np.broadcast_to(_flags(lo, hi, shape3, coords), cshape)
                                   ).reshape(-1)
    real_axes = range(3 - source.ndim, 3)
    if not sweep.with_outside:
        border = np.zeros(n, np.uint8)
    elif source.edge is not None:
        lo2, hi2 = lo[3 - source.ndim:], hi[3 - source.ndim:]
        border = source.read(lo2, hi2, source.edge).astype(np.uint8).reshape(-1)
    else:
        border = _on_border(lo, hi, shape3, real_axes).reshape(-1)
    face_of = np.zeros(1, np.uint8)
    if sweep.faces:
        face_of = np.ascontiguousarray(np.broadcast_to(
            _face_bits(lo, hi, shape3, coords, sweep.faces), cshape)).reshape(-1)
    # A streaming pass links every voxel whose entry cannot merge anything (as the
    # in-memory sweep does); the sweep then sorts and visits only the others, and every
    # voxel it must record: the flagged ones, with the outside the border, and the
    # voxels on the faces it follows.
    parent = np.empty(n + 1, np.int64)
    shape_of_chunk = np.array(cshape, np.int64)
    link_regular_voxels(flat, 0, cshape[0] * cshape[1], sweep.ascending, shape_of_chunk,
                        neighbour_offsets(source.ndim, True), sweep.corners, 0, parent)
    visit = (flagged | border) != 0
    if sweep.faces:
        visit |= face_of != 0
    parent[:n][visit] = -1
    del visit
    marked = np.flatnonzero(parent[:n] == -1)
    order = marked[sorted_order(flat[marked])]
    del marked
    offsets = neighbour_offsets(source.ndim, sweep.corners)
    touches = np.zeros(n + 1, np.uint8)
    capacity = n + 1 + (int(np.unpackbits(face_of).sum()) if sweep.faces else 0)
    kind = np.empty(capacity, np.uint8)
    young, old, voxel = (np.empty(capacity, np.int64) for _ in range(3))
    faces, told = (np.zeros(n + 1 if sweep.faces else 1, np.uint8) for _ in range(2))
    crossing = np.full(3, -1, np.int64)
    written = kernel.reduce_chunk(flat, order, shape_of_chunk, offsets, flagged,
                                  border, 1 if sweep.with_outside else 0, sweep.ascending,
                                  parent, touches, kind, young, old, voxel, face_of,
                                  sweep.faces, faces, told, crossing)
    del faces, told, face_of
    kind, young, old, voxel = kind[:written], young[:written], old[:written], voxel[:written]
    roots = np.flatnonzero(parent[:n] == np.arange(n))
    if sweep.with_outside:
        roots = np.append(roots, n)

    def to_global(local):
        local = np.asarray(local, np.int64)
        inside = local < n
        out = np.full(local.shape, n_total, np.int64)
        z, y, x = np.unravel_index(local[inside], cshape)
        out[inside] = np.ravel_multi_index((z + lo[0], y + lo[1], x + lo[2]), shape3)
        return out

    def value_of(local):
        local = np.asarray(local, np.int64)
        return np.where(local < n, flat[np.minimum(local, max(n - 1, 0))].astype(np.float64),
                        np.nan)

    final = kind == kernel.FINAL_PAIR
    pairs = _Pairs(to_global(young[final]), value_of(young[final]), to_global(voxel[final]),
                   flat[voxel[final]].astype(np.float64))
    if sweep.faces:
        seen = crossing >= 0
        pairs.crossing_id = np.where(seen, to_global(np.maximum(crossing, 0)), -1)
        pairs.crossing_value = np.where(seen, value_of(np.maximum(crossing, 0)), np.nan)
    # the edges handed on, in the order they were written: the sweep order
    carried = (kind == kernel.KEPT_EDGE) | (kind == kernel.FACE_GAIN)
    gain = kind[carried] == kernel.FACE_GAIN
    young, old, voxel = young[carried], old[carried], voxel[carried]
    # sorted local ids give sorted global ids: within a box, C order is the same on both
    # grids, and the outside node is last on both
    local_vertices = _marked(n + 1, young, old[~gain], roots)
    block = _Block(tuple(lo), tuple(hi), to_global(local_vertices), value_of(local_vertices),
                   to_global(young),
                   np.where(gain, _face_edge_end(old), to_global(np.where(gain, 0, old))),
                   to_global(voxel), flat[voxel].astype(np.float64))
    return pairs, block


def _marked(size: int, *positions) -> np.ndarray:
    """The sorted distinct positions among ``positions`` (each below ``size``), found by
    marking them rather than by sorting."""
    mark = np.zeros(size, bool)
    for some in positions:
        mark[some] = True
    return np.flatnonzero(mark)


def _joined_vertices(a: _Block, b: _Block):
    """The vertices (ids and values) of two blocks, by id. Each block's ids are sorted,
    and the two share at most the outside node: a stable sort of the two runs is one merge
    (timsort), after which the outside node's second copy is dropped."""
    vert_id = np.concatenate([a.vert_id, b.vert_id])
    vert_value = np.concatenate([a.vert_value, b.vert_value])
    order = np.argsort(vert_id, kind="stable")
    vert_id, vert_value = vert_id[order], vert_value[order]
    first = np.ones(vert_id.size, bool)
    first[1:] = vert_id[1:] != vert_id[:-1]
    return vert_id[first], vert_value[first]


def _cross_edges(source: _Grid, a: _Block, b: _Block, axis: int, sweep: _Sweep):
    """Grid edges between the last plane of ``a`` and the first plane of ``b`` along
    ``axis`` (both blocks span the same box on the other axes)."""
    shape3 = _pad3(source.shape, 1)
    plane = b.lo[axis]
    lo_a, hi_a = list(a.lo), list(a.hi)
    lo_a[axis], hi_a[axis] = plane - 1, plane
    lo_b, hi_b = list(b.lo), list(b.hi)
    lo_b[axis], hi_b[axis] = plane, plane + 1
    values_a = _read3(source, lo_a, hi_a).astype(np.float64)
    values_b = _read3(source, lo_b, hi_b).astype(np.float64)
    ids_a = np.ravel_multi_index(np.meshgrid(*[np.arange(p, q) for p, q in zip(lo_a, hi_a)],
                                             indexing="ij"), shape3)
    ids_b = np.ravel_multi_index(np.meshgrid(*[np.arange(p, q) for p, q in zip(lo_b, hi_b)],
                                             indexing="ij"), shape3)
    others = [k for k in range(3) if k != axis]
    takes = []
    for offset in neighbour_offsets(source.ndim, sweep.corners):
        if offset[axis] != 1:
            continue
        take_a = [slice(None)] * 3
        take_b = [slice(None)] * 3
        for k in others:
            d = int(offset[k])
            size = values_a.shape[k]
            take_a[k] = slice(max(0, -d), size - max(0, d))
            take_b[k] = slice(max(0, d), size - max(0, -d))
        takes.append((tuple(take_a), tuple(take_b)))
    # The face is cut into strips of rows along its longest axis; of each strip's edges
    # only a spanning forest in sweep order is kept (at most one edge per vertex): the
    # rest close cycles of earlier edges, which the merge's sweep skips anyway. So a merge
    # holds about two edges per face voxel instead of nine, and one strip's at a time.
    rows_axis = max(others, key=lambda k: values_a.shape[k])
    rows = values_a.shape[rows_axis]
    # a voxel's place on the face: 2p on a's plane and 2p + 1 on b's (p its place in
    # the plane), so that a strip's edges join places in a short range
    place = 2 * np.arange(values_a.size, dtype=np.int64).reshape(values_a.shape)
    per_row = len(takes) * max(values_a.size // max(rows, 1), 1)
    step = max(1, CROSS_STRIP_EDGES // per_row)
    kept = []
    for first in range(0, rows, step):
        strip = []
        for take_a, take_b in takes:
            start = take_a[rows_axis].start
            stop = min(take_a[rows_axis].stop, first + step)
            if stop <= max(first, start):
                continue
            # the same rows of both sides' views: A's rows first .. first + step
            local = slice(max(first - start, 0), stop - start)
            pick_a, pick_b = list(take_a), list(take_b)
            pick_a[rows_axis] = slice(start + local.start, start + local.stop)
            pick_b[rows_axis] = slice(take_b[rows_axis].start + local.start,
                                      take_b[rows_axis].start + local.stop)
            va, ia = values_a[tuple(pick_a)].ravel(), ids_a[tuple(pick_a)].ravel()
            vb, ib = values_b[tuple(pick_b)].ravel(), ids_b[tuple(pick_b)].ravel()
            b_later = _later(va, ia, vb, ib, sweep.ascending)
            strip.append((ia, ib, np.where(b_later, ib, ia), np.where(b_later, vb, va),
                          place[tuple(pick_a)].ravel(), place[tuple(pick_b)].ravel() + 1))
        if strip:
            kept.append(_spanning_forest(*(np.concatenate(c) for c in zip(*strip)),
                                         sweep.ascending))
    if not kept:
        empty = np.empty(0, np.int64)
        return empty, empty.copy(), empty.copy(), np.empty(0, np.float64)
    return tuple(np.concatenate(c) for c in zip(*kept))


def _spanning_forest(edge_a, edge_b, edge_voxel, edge_value, place_a, place_b, ascending):
    """The edges of a spanning forest taken in sweep order (:func:`_sweep_order`); the
    ends are told apart by their places on the face (``place_a``, ``place_b``)."""
    first = min(int(place_a.min()), int(place_b.min()))
    last = max(int(place_a.max()), int(place_b.max()))
    order = _sweep_order(edge_value, edge_voxel, ascending)
    joins = kernel.joining_edges(place_a - first, place_b - first, order, last - first + 1)
    return edge_a[joins], edge_b[joins], edge_voxel[joins], edge_value[joins]


def _merge(source: _Grid, a: _Block, b: _Block, axis: int, sweep: _Sweep):
    shape3 = _pad3(source.shape, 1)
    n_total = int(np.prod(shape3))
    lo = tuple(min(p, q) for p, q in zip(a.lo, b.lo))
    hi = tuple(max(p, q) for p, q in zip(a.hi, b.hi))
    # each column of the edges across the face is let go once joined: they are most of
    # what a merge near the top of the tree holds
    cross = _cross_edges(source, a, b, axis, sweep)
    in_order = _sweep_order(cross[3], cross[2], sweep.ascending)
    cross = [column[in_order] for column in cross]
    del in_order
    runs = np.cumsum([0, a.edge_a.size, b.edge_a.size, cross[0].size])
    columns = []
    for name in ("edge_a", "edge_b", "edge_voxel", "edge_value"):
        columns.append(np.concatenate([getattr(a, name), getattr(b, name), cross.pop(0)]))
    edge_a, edge_b, edge_voxel, edge_value = columns
    del columns
    vert_id, vert_value = _joined_vertices(a, b)
    pos_a = np.searchsorted(vert_id, edge_a)
    pos_b = np.where(edge_b < 0, edge_b, np.searchsorted(vert_id, edge_b))
    inside = vert_id < n_total
    flags = np.where(inside, _flags(lo, hi, shape3, np.unravel_index(
        np.where(inside, vert_id, 0), shape3)), 1).astype(np.uint8)
    outside = int(np.searchsorted(vert_id, n_total)) if vert_id[-1] == n_total else -1
    # both blocks hand on their edges in sweep order: three runs to merge, not to sort
    order = kernel.merged_runs(edge_value, edge_voxel, runs, sweep.ascending)
    if order.size != edge_value.size:
        order = _sweep_order(edge_value, edge_voxel, sweep.ascending)
    m = len(vert_id)
    parent, touches = np.empty(m, np.int64), np.empty(m, np.uint8)
    face_gains = pos_b < 0
    gained_bits = int(np.unpackbits((-1 - pos_b[face_gains]).astype(np.uint8)).sum())
    capacity = max(m, 1) + gained_bits
    kind = np.empty(capacity, np.uint8)
    young, old, edge = (np.empty(capacity, np.int64) for _ in range(3))
    faces, told = (np.zeros(m if sweep.faces else 1, np.uint8) for _ in range(2))
    crossing = np.full(3, -1, np.int64)
    written = kernel.reduce_graph(vert_value, vert_id, flags, outside, pos_a, pos_b,
                                  edge_value, order, sweep.ascending, parent, touches, kind,
                                  young, old, edge, sweep.faces, faces, told, crossing)
    del faces, told
    kind, young, old, edge = kind[:written], young[:written], old[:written], edge[:written]
    final = kind == kernel.FINAL_PAIR
    pairs = _Pairs(vert_id[young[final]], vert_value[young[final]], edge_voxel[edge[final]],
                   edge_value[edge[final]])
    if sweep.faces:
        seen = crossing >= 0
        pairs.crossing_id = np.where(seen, edge_voxel[np.maximum(crossing, 0)], -1)
        pairs.crossing_value = np.where(seen, edge_value[np.maximum(crossing, 0)], np.nan)
    roots = np.flatnonzero(parent == np.arange(m))
    # the edges handed on, in the order they were written: the sweep order
    carried = (kind == kernel.KEPT_EDGE) | (kind == kernel.FACE_GAIN)
    gain = kind[carried] == kernel.FACE_GAIN
    young, old, pick = young[carried], old[carried], edge[carried]
    keep = _marked(m, young, old[~gain], roots)
    block = _Block(lo, hi, vert_id[keep], vert_value[keep], vert_id[young],
                   np.where(gain, _face_edge_end(old), vert_id[np.where(gain, 0, old)]),
                   edge_voxel[pick], edge_value[pick])
    return pairs, block


def _leaf_boxes(shape3, chunks3) -> dict:
    """(lo, hi) of every chunk, by its index in the chunk grid (C order)."""
    starts = [list(range(0, n, c)) for n, c in zip(shape3, chunks3)]
    boxes = {}
    for index in np.ndindex(*[len(s) for s in starts]):
        lo = tuple(starts[a][i] for a, i in enumerate(index))
        boxes[index] = lo, tuple(min(lo[a] + chunks3[a], shape3[a]) for a in range(3))
    return boxes


def _merge_axes(shape3, chunks3):
    """The axis of each level of the merge tree: the one, among those still holding more
    than one block, along which the blocks are thinnest. The blocks so grow about as wide
    as long, and a merge holds faces no larger than the scan's cross-section (merging
    along one axis after the other would end with slabs whose two faces are that large)."""
    counts = [-(-n // c) for n, c in zip(shape3, chunks3)]
    width = list(chunks3)
    while max(counts) > 1:
        axis = min((a for a in range(3) if counts[a] > 1), key=lambda a: width[a])
        yield axis
        counts[axis] = (counts[axis] + 1) // 2
        width[axis] *= 2


def _merge_levels(indices, shape3, chunks3):
    """The merge tree over the chunk grid: for each level, the axis and the list of
    (merged index, first child, second child or None), pairing neighbours along that
    axis until one block is left."""
    indices = list(indices)
    for axis in _merge_axes(shape3, chunks3):
        level, merged = [], []
        present = set(indices)
        for index in indices:
            i = index[axis]
            if i % 2 == 1:
                continue
            new_index = index[:axis] + (i // 2,) + index[axis + 1:]
            partner = index[:axis] + (i + 1,) + index[axis + 1:]
            level.append((new_index, index, partner if partner in present else None))
            merged.append(new_index)
        yield axis, level
        indices = merged


def _fold_merge_tree(leaves: dict, shape3, chunks3, combine):
    """The top block's value, folding ``leaves`` (chunk index -> value) up the merge tree
    of :func:`_merge_levels`: ``combine(first, second, axis)`` gives a merged block's value,
    and a block without a partner is carried up as it is. The run and its memory plan
    walk the tree through this one function."""
    values = leaves
    for axis, level in _merge_levels(leaves, shape3, chunks3):
        values = {new_index: (values[first] if second is None
                              else combine(values[first], values[second], axis))
                  for new_index, first, second in level}
    (top,) = values.values()
    return top


def _plan(source: _Grid, sweep: _Sweep):
    """Dask delayed objects: every task's finished pairs, and the top block."""
    import dask

    leaf = dask.delayed(_reduce_leaf, nout=2, pure=True)
    merge = dask.delayed(_merge, nout=2, pure=True)
    blocks = {}
    finished = []
    shape3, chunks3 = _pad3(source.shape, 1), _pad3(source.chunks, 1)
    for index, (lo, hi) in _leaf_boxes(shape3, chunks3).items():
        pairs, blocks[index] = leaf(source, lo, hi, sweep)
        finished.append(pairs)

    def combine(first, second, axis):
        pairs, block = merge(source, first, second, axis, sweep)
        finished.append(pairs)
        return block

    return finished, _fold_merge_tree(blocks, shape3, chunks3, combine)


def _flagged_voxels(lo, hi, shape3) -> int:
    """How many voxels of the box [lo, hi) have a neighbour outside it but inside the
    image: the vertices a block's reduced graph can keep (see
    :mod:`voxtopo.engine._chunk_merge`)."""
    size = [b - a for a, b in zip(lo, hi)]
    inner = [max(s - (a > 0) - (b < n), 0) for s, a, b, n in zip(size, lo, hi, shape3)]
    return math.prod(size) - math.prod(inner)


@dataclass(frozen=True)
class PlannedMerge:
    """One merge task of the tree: the boxes (lo, hi) of its two blocks in (z, y, x), the
    axis of their shared face, and the most it can hold."""

    first: tuple
    second: tuple
    axis: int
    vertices: int    # most vertices of the two reduced graphs together
    edges: int       # most edges of the two graphs
    crossing: int    # edges across the shared face that are kept
    strip: int       # edges across the face of one strip of rows, taken at a time
    face: int        # voxels of the shared face

    @property
    def nbytes(self) -> int:
        return (self.vertices * BYTES_PER_MERGE_VERTEX + self.edges * BYTES_PER_MERGE_EDGE
                + self.crossing * BYTES_PER_CROSSING_EDGE + self.strip * BYTES_PER_STRIP_EDGE
                + self.face * BYTES_PER_FACE_VOXEL)


def _planned_merge(first, second, axis, shape3, ndim) -> PlannedMerge:
    flagged = _flagged_voxels(*first, shape3) + _flagged_voxels(*second, shape3)
    vertices = flagged + math.ceil(flagged * INNER_ROOTS_PER_FLAGGED_VOXEL) + 4
    extents = [b - a for k, (a, b) in enumerate(zip(*first)) if k != axis]
    face = math.prod(extents)
    across = 3 ** (ndim - 1)             # neighbours one step along ``axis``, corners too
    # a spanning forest of each strip of rows (see _cross_edges): at most one edge per
    # vertex of the strip, its rows on side A and one row more on either side on B
    rows = max(extents)
    row = face // rows
    step = max(1, CROSS_STRIP_EDGES // (across * row))
    strips = -(-rows // step)
    crossing = min(across * face, 2 * face + 2 * row * strips)
    return PlannedMerge(first, second, axis, vertices, vertices, crossing,
                        min(across * face, across * row * step), face)


def planned_merges(shape, chunks) -> list[PlannedMerge]:
    """Every merge task of a chunked sweep of an array of ``shape`` in ``chunks``, with
    the most it can hold.

    A block's reduced graph is a tree: about one vertex per flagged voxel of its box
    (:data:`INNER_ROOTS_PER_FLAGGED_VOXEL` more for the basins inside), and one edge fewer.
    A merge adds one edge per pair of neighbours across the shared face, counted with
    corner neighbours (the 26 / 8 sweep, which every pore run makes). So the plan grows
    with the faces merged; near the top of the tree they are the scan's cross-sections,
    whatever the chunks.
    """
    shape3, chunks3 = _pad3(shape, 1), _pad3(chunks, 1)
    plans = []

    def combine(first, second, axis):
        plans.append(_planned_merge(first, second, axis, shape3, len(shape)))
        return first[0], second[1]

    _fold_merge_tree(_leaf_boxes(shape3, chunks3), shape3, chunks3, combine)
    return plans


def planned_merge_bytes(shape, chunks) -> int:
    """Memory of the largest merge task of a chunked sweep (0 for a single chunk): the
    largest of :func:`planned_merges`, found level by level from the blocks' extents
    along each axis (a merge's plan depends on its boxes' sizes and on which of their
    faces lie inside the image, so few merges of a level differ)."""
    shape3, chunks3 = _pad3(shape, 1), _pad3(chunks, 1)
    extents = [[(a, min(a + c, n)) for a in range(0, n, c)] for n, c in zip(shape3, chunks3)]

    def kinds(spans, n):
        """One span of each kind: its size and whether its ends lie inside the image."""
        return list({(b - a, a > 0, b < n): (a, b) for a, b in spans}.values())

    largest = 0
    for axis in _merge_axes(shape3, chunks3):
        spans = extents[axis]
        pairs = {(a[1] - a[0], b[1] - b[0], a[0] > 0, b[1] < shape3[axis]): (a, b)
                 for a, b in zip(spans[0::2], spans[1::2])}
        across = [kinds(extents[k], shape3[k]) if k != axis else [(0, 0)] for k in range(3)]
        for a, b in pairs.values():
            for others in product(*across):
                first, second = list(others), list(others)
                first[axis], second[axis] = a, b
                merge = _planned_merge(tuple(zip(*first)), tuple(zip(*second)), axis,
                                       shape3, len(shape))
                largest = max(largest, merge.nbytes)
        merged = [(a[0], b[1]) for a, b in zip(spans[0::2], spans[1::2])]
        extents[axis] = merged + spans[len(merged) * 2:]
    return largest


def _run_sweeps(jobs, scheduler) -> list:
    """Run the sweeps ``jobs`` [(source, sweep), ...] in one dask computation, so that the
    last merges of one (a task or two at a time at the top of its tree) overlap the
    chunks of the others; returns (merges, top block) of each."""
    import dask

    plans = [_plan(source, sweep) for source, sweep in jobs]
    options = {} if scheduler is None else {"scheduler": scheduler}
    results = iter(dask.compute(*[task for finished, top in plans
                                  for task in (*finished, top)], **options))
    swept = []
    for (finished, _), (_, sweep) in zip(plans, jobs):
        parts = [next(results) for _ in finished]
        top = next(results)
        join = (lambda name, dtype, parts=parts:
                np.concatenate([getattr(p, name) for p in parts]).astype(dtype)
                if parts else np.zeros(0, dtype))
        pairs = _Pairs(join("young_id", np.int64), join("young_value", np.float64),
                       join("voxel_id", np.int64), join("voxel_value", np.float64))
        if sweep.faces:
            pairs.crossing_id, pairs.crossing_value = _first_crossings(
                np.array([p.crossing_id for p in parts]),
                np.array([p.crossing_value for p in parts]), sweep.ascending)
        swept.append((pairs, top))
    return swept


def chunked_merges(array, *, superlevel: bool = False, neighbourhood=None, chunks=None,
                   edge=None, scheduler=None) -> _Pairs:
    """Every merge of the dimension-0 sweep of ``array``, with ``edge`` as its eldest node.

    The sweep of :func:`chunked_persistence` (elder rule, ties by C-order index), where
    with ``edge`` (a bool array on the same grid, sliceable like ``array``) one more node,
    older than every voxel, is joined to each ``edge`` voxel as that voxel enters. A
    component dies when it meets an elder one or a component holding an ``edge`` voxel.

    Returns
    -------
    merges
        ``young_id`` (the dying component's first voxel, C-order flat index of the array),
        ``young_value``, ``voxel_id`` and ``voxel_value`` (the voxel whose entry joined it,
        and its value) of every merge with a positive lifetime; a component whose first
        voxel is an ``edge`` voxel dies as it is born and is not listed.
    """
    return chunked_merges_of_each([array], superlevel=superlevel,
                                  neighbourhood=neighbourhood, chunks=chunks, edge=edge,
                                  scheduler=scheduler)[0]


def chunked_merges_of_each(arrays, *, superlevel: bool = False, neighbourhood=None,
                           chunks=None, edge=None, scheduler=None) -> list[_Pairs]:
    """:func:`chunked_merges` of each of ``arrays``, the sweeps run in one dask
    computation (the workers go on with one sweep's chunks while another's last merges
    run)."""
    from . import construction_of

    jobs = []
    for array in arrays:
        name = getattr(array, "source", "") or "The array"
        source = _Grid(array, chunks if chunks is not None else chunks_of(array), name,
                       edge=edge)
        _check_source(source)
        neighbourhood, construction = construction_of(source.ndim, neighbourhood)
        jobs.append((source, _Sweep(not superlevel, construction == "voxel",
                                    edge is not None)))
    return [merges for merges, _ in _run_sweeps(jobs, scheduler)]


def _check_source(source: _Grid):
    if source.ndim not in (2, 3):
        raise InputError(f"Out-of-core persistence takes a 2D image or 3D volume, got shape "
                         f"{source.shape}.")
    if any(n == 0 for n in source.shape):
        raise InputError(f"{source.source} is empty (shape {source.shape}).")
    if len(source.chunks) != source.ndim or any(c < 1 for c in source.chunks):
        raise InputError(f"Chunks should be one positive size per axis ({source.ndim}), got "
                         f"{source.chunks}.")
    kind = source.dtype.kind
    if kind not in "uifb":
        raise InputError(f"Cannot compute persistence of {source.dtype} values from "
                         f"{source.source}; give gray values as integers or floats.")
    task, what, by_merge = _largest_task(source.shape, source.chunks)
    ensure_fits(task, f"{what} of the out-of-core run", _SMALLER_CHUNKS[by_merge])


#: What to do when the largest task does not fit: one chunk, or a merge (whose border
#: data are whole cross-sections of the scan, whatever the chunks)
_SMALLER_CHUNKS = {False: "choose smaller chunks (--chunks)",
                   True: "run it with more memory (smaller chunks would not help: that merge "
                         "holds whole cross-sections of the scan)"}


def _largest_task(shape, chunks) -> tuple[int, str, bool]:
    """(bytes, what it is, whether it is a merge) of the largest task of a chunked sweep:
    one chunk, or the largest merge of border data."""
    chunk = int(np.prod(chunks)) * BYTES_PER_CHUNK_VOXEL
    merge = planned_merge_bytes(shape, chunks)
    if chunk >= merge:
        return chunk, f"One {'x'.join(map(str, chunks))} chunk", False
    return merge, "The largest merge of border data", True


def _check_workers(source: _Grid, scheduler) -> None:
    """Refuse a run whose largest task would not fit the smallest worker of a distributed
    scheduler (:func:`ensure_workers_fit`)."""
    task, what, by_merge = _largest_task(source.shape, source.chunks)
    ensure_workers_fit(
        scheduler, task, what.lower(),
        f"The out-of-core run of the {'x'.join(map(str, source.shape))} scan in "
        f"{'x'.join(map(str, source.chunks))} chunks",
        lambda smallest: "" if by_merge else ", or choose smaller chunks (--chunks)")


def ensure_workers_fit(scheduler, task: int, what: str, run: str, more_remedy) -> None:
    """Refuse, in one sentence, a run whose largest task (``task`` bytes, doing ``what``)
    and the worker's own baseline would not fit the smallest worker of a distributed
    scheduler, within the share of its memory limit a run on this machine plans for.

    ``run`` names the run; ``more_remedy(smallest_limit)`` gives what may follow "give each
    worker a memory limit of at least ..." (such as smaller chunks that would fit).
    """
    limits = worker_memory_limits(scheduler)
    needed = WORKER_BASELINE_BYTES + task
    if not limits or needed <= BUDGET_FRACTION * min(limits):
        return
    smallest = min(limits)
    raise TooBigError(
        f"{run} needs about {human(needed)} per worker ({human(task)} for {what} and "
        f"{human(WORKER_BASELINE_BYTES)} for the worker itself) but the smallest worker's "
        f"memory limit is {human(smallest)}, of which {BUDGET_FRACTION:.0%} is planned for; "
        f"give each worker a memory limit of at least {human(needed / BUDGET_FRACTION)}"
        f"{more_remedy(smallest)}.")


def chunked_persistence(array, *, superlevel: bool = False, neighbourhood=None,
                        chunks=None, min_persistence: float = 0.0, dual: bool = True,
                        spacing=None, unit=None, scheduler=None) -> Diagram:
    """Exact dimension-0 and dimension-(d-1) diagram of an array read chunk by chunk.

    Parameters
    ----------
    array : array-like
        Anything with ``shape``, ``dtype`` and ``__getitem__`` taking a tuple of slices:
        a zarr array, a :class:`voxtopo.io.ChunkedArray` (:func:`voxtopo.io.open_chunked`
        opens a store as one), a dask or numpy array. Its ``chunks``, ``spacing``, ``unit``,
        ``source`` and ``notes`` are used when it has them. Tasks read it on the workers,
        so it must be picklable for a distributed scheduler.
    superlevel, neighbourhood, min_persistence :
        As in :func:`voxtopo.persistence` (8/26 by default: the voxel construction).
    chunks : tuple of int, optional
        Block shape of the tasks; default the array's own chunks (128 per axis for a
        numpy array). Each task holds one block in memory.
    dual : bool
        Also compute dimension d-1 (loops in 2D, cavities in 3D) by duality.
    spacing, unit : optional
        Voxel size and unit (default the array's own, else 1 px).
    scheduler : optional
        Passed to ``dask.compute``; by default dask's current scheduler (the
        dask.distributed client when one is active).

    Returns
    -------
    Diagram
        Dimension 0 (with its one essential class) and, with ``dual``, dimension d-1;
        a 3D volume's dimension 1 is absent and a note says so.

    Examples
    --------
    >>> import numpy as np
    >>> image = np.array([[0., 5., 1.], [5., 5., 5.], [2., 5., 0.]])
    >>> d = chunked_persistence(image, chunks=(2, 2), scheduler="sync")
    >>> sorted(d.intervals(0)[:, 0].tolist())
    [0.0, 0.0, 1.0, 2.0]
    """
    return _persistence(array, superlevel=superlevel, neighbourhood=neighbourhood,
                        chunks=chunks, min_persistence=min_persistence, dual=dual,
                        spacing=spacing, unit=unit, scheduler=scheduler)[0]


def chunked_persistence_and_crossings(array, *, crossing_axes, superlevel: bool = False,
                                      neighbourhood=None, chunks=None,
                                      min_persistence: float = 0.0, spacing=None, unit=None,
                                      scheduler=None):
    """The diagram and dual merges of :func:`chunked_persistence_and_border_merges`, and
    where the first and last slices along each of ``crossing_axes`` first fall into one
    component of the sweep, from the same run.

    Each component follows the faces of the array it touches (two bits per axis, as the
    in-memory percolation sweep does), through the chunks and every merge; an axis is
    crossed at the first voxel, in sweep order, whose entry leaves one component holding
    voxels of both of its end slices.

    Returns
    -------
    diagram, merges, crossings
        ``crossings``: axis -> (the voxel's index, its value), for each of
        ``crossing_axes`` (every array is crossed by the end of its sweep).

    Examples
    --------
    >>> import numpy as np
    >>> image = np.array([[0., 9., 1.], [2., 9., 3.], [4., 5., 6.]])
    >>> _, _, crossings = chunked_persistence_and_crossings(
    ...     image, crossing_axes=(0, 1), neighbourhood=4, chunks=(2, 2), scheduler="sync")
    >>> crossings[0], crossings[1]
    (((2, 0), 4.0), ((2, 2), 6.0))
    """
    return _persistence(array, superlevel=superlevel, neighbourhood=neighbourhood,
                        chunks=chunks, min_persistence=min_persistence, dual=True,
                        spacing=spacing, unit=unit, scheduler=scheduler,
                        crossing_axes=tuple(crossing_axes))


def chunked_persistence_and_border_merges(array, *, superlevel: bool = False,
                                          neighbourhood=None, chunks=None,
                                          min_persistence: float = 0.0, spacing=None,
                                          unit=None, scheduler=None):
    """The diagram of :func:`chunked_persistence` and every merge of its dual sweep,
    from one run of each sweep.

    The dual sweep runs the other way, with the complementary neighbourhood and the
    image's outer layer joined to an eldest node, so its merges are those
    :func:`chunked_merges` gives with ``superlevel`` flipped, the complementary
    ``neighbourhood`` and ``edge`` true on the outer layer: a caller that needs both runs
    that sweep once. The options are those of :func:`chunked_persistence`.

    Returns
    -------
    diagram, merges
        The diagram with its dimension d-1, and the merges as :func:`chunked_merges`
        returns them.
    """
    return _persistence(array, superlevel=superlevel, neighbourhood=neighbourhood,
                        chunks=chunks, min_persistence=min_persistence, dual=True,
                        spacing=spacing, unit=unit, scheduler=scheduler)[:2]


def _persistence(array, *, superlevel, neighbourhood, chunks, min_persistence, dual,
                 spacing, unit, scheduler, crossing_axes=()):
    """:func:`chunked_persistence`, the merges of its dual sweep (None without) and the
    crossings of :func:`chunked_persistence_and_crossings` (empty without axes)."""
    from . import construction_of

    min_persistence = check_min_persistence(min_persistence)
    if not all(hasattr(array, name) for name in ("shape", "dtype", "__getitem__")):
        raise InputError(f"Out-of-core persistence takes an array (shape, dtype, slicing), "
                         f"got {type(array).__name__}; open a store with "
                         f"voxtopo.io.open_chunked first.")
    name = getattr(array, "source", "") or "The array"
    spacing = tuple(spacing or getattr(array, "spacing", ()) or (1.0,) * len(array.shape))
    unit = unit or getattr(array, "unit", "px")
    notes_of_array = tuple(getattr(array, "notes", ()))
    source = _Grid(array, chunks if chunks is not None else chunks_of(array), name)
    _check_source(source)
    _check_workers(source, scheduler)
    neighbourhood, construction = construction_of(source.ndim, neighbourhood)
    ascending = not superlevel
    forever = -np.inf if superlevel else np.inf

    if any(not 0 <= a < source.ndim for a in crossing_axes):
        raise InputError(f"Crossing axes should be among 0..{source.ndim - 1}, got "
                         f"{crossing_axes}.")
    wanted = sum(3 << (2 * (a + 3 - source.ndim)) for a in set(crossing_axes))
    sweeps = [(source, _Sweep(ascending, construction == "voxel", False, wanted))]
    if dual:
        sweeps.append((source, _Sweep(not ascending, construction == "vertex", True)))
    swept = _run_sweeps(sweeps, scheduler)
    low, top = swept[0]
    crossings = {}
    for a in crossing_axes:
        voxel = int(low.crossing_id[a + 3 - source.ndim])
        index = np.unravel_index(voxel, _pad3(source.shape, 1))[3 - source.ndim:]
        crossings[a] = (tuple(int(i) for i in index),
                        float(low.crossing_value[a + 3 - source.ndim]))
    if len(top.vert_id) == 0:
        raise InputError(f"{source.source} yielded no components.")
    eldest = top.vert_id[np.argmin(top.vert_value) if ascending else np.argmax(top.vert_value)]
    eldest_value = top.vert_value[top.vert_id == eldest][0]
    dims = [np.zeros(len(low.young_id) + 1, np.int8)]
    births = [low.young_value, [eldest_value]]
    deaths = [low.voxel_value, [forever]]
    birth_index = [low.young_id, [eldest]]
    death_index = [low.voxel_id, [-1]]
    notes = [f"computed out of core in {'x'.join(map(str, source.chunks))} chunks",
             *notes_of_array]
    high = None
    if dual:
        high = swept[1][0]
        dims.append(np.full(len(high.young_id), source.ndim - 1, np.int8))
        births.append(high.voxel_value)
        deaths.append(high.young_value)
        birth_index.append(high.voxel_id)
        death_index.append(high.young_id)
    if source.ndim == 3 or not dual:
        missing = [d for d in range(1, source.ndim) if not (dual and d == source.ndim - 1)]
        notes.append(f"dimension {', '.join(map(str, missing))} not computed out of core")
    raw = RawPairs(np.concatenate(dims), np.concatenate(births), np.concatenate(deaths),
                   np.concatenate(birth_index), np.concatenate(death_index),
                   engine="voxtopo-chunked", notes=tuple(notes))
    placeholder = np.broadcast_to(np.zeros((), source.dtype), source.shape)
    scan = Scan(placeholder, spacing=spacing, unit=unit,
                source="" if name == "The array" else name)
    diagram = Diagram.from_raw(raw, scan, superlevel=superlevel, neighbourhood=neighbourhood,
                               field=2, periodic=(False,) * source.ndim,
                               min_persistence=min_persistence, notes=tuple(notes))
    return diagram, high, crossings
