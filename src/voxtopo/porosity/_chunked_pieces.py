"""Connected pieces of one phase, labelled chunk by chunk.

Each chunk is labelled on its own (:func:`scipy.ndimage.label` with the phase's
neighbourhood) and reports, per local label, its voxel count, whether it reaches the edge
(the scan's outer layer or the sample's rim) and each face of the scan, the local labels
on its outer planes, and the labels at a few query voxels. Pieces that continue across a
chunk face are then joined, one slab of chunks (along the first axis) after another: for
every face between chunks the two voxel planes on either side are laid out over the slab
(or, between slabs, over the scan's cross-section), and every pair of neighbouring phase
voxels across it (straight across, and diagonally with the 26 / 8 neighbourhood) joins
their labels. The
joined labels are the connected components of a graph with one node per local label,
so the result equals labelling the whole scan at once (scipy.ndimage.label with the
phase's neighbourhood)::

    chunk A | chunk B        plane of A's last voxels  a a . b
            |                plane of B's first voxels a . b b
                             straight and diagonal pairs join a-a, b-b (and a-b when
                             diagonals count and they touch)
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from itertools import product

import numpy as np
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components


@dataclass
class ChunkPieces:
    """What one chunk reports of its local labels (label 0 is the other phase)."""

    lo: tuple
    hi: tuple
    count: int
    sizes: np.ndarray          # voxels per local label 1..count
    at_edge: np.ndarray        # bool per local label
    faces: np.ndarray          # (count, ndim, 2) bool: reaches the first / last slice
    planes: dict | None        # (axis, "first" | "last") -> local labels on that plane
    #                            (the join drops them once their faces are joined)
    queried: np.ndarray        # local label at each query voxel


def label_chunk(phase, edge, codes, full: bool, lo, hi, queries) -> ChunkPieces:
    """Label the voxels of ``phase`` (a phase-code array) holding one of ``codes`` in the
    box [lo, hi); ``queries`` are flat indices within the box."""
    box = tuple(slice(a, b) for a, b in zip(lo, hi))
    inside = np.isin(np.asarray(phase[box]), codes)
    ndim = inside.ndim
    structure = ndimage.generate_binary_structure(ndim, ndim if full else 1)
    labels, count = ndimage.label(inside, structure=structure)
    sizes = np.bincount(labels.ravel(), minlength=count + 1)[1:]
    at_edge = np.zeros(count + 1, bool)
    at_edge[np.unique(labels[np.asarray(edge[box])])] = True
    faces = np.zeros((count + 1, ndim, 2), bool)
    planes = {}
    shape = phase.shape
    for a in range(ndim):
        first, last = np.take(labels, 0, axis=a), np.take(labels, -1, axis=a)
        planes[(a, "first")], planes[(a, "last")] = first, last
        if lo[a] == 0:
            faces[np.unique(first), a, 0] = True
        if hi[a] == shape[a]:
            faces[np.unique(last), a, 1] = True
    queried = labels.ravel()[np.asarray(queries, np.int64)] if len(queries) else \
        np.zeros(0, np.int64)
    return ChunkPieces(tuple(lo), tuple(hi), count, sizes, at_edge[1:], faces[1:], planes,
                       queried)


@dataclass
class Pieces:
    """The joined pieces: per global piece (numbered 0..n-1) its size, edge and face
    flags; ``piece_of_query`` gives the piece of each query voxel (-1: not in the phase)."""

    sizes: np.ndarray
    at_edge: np.ndarray
    faces: np.ndarray
    piece_of_query: list


def join(slabs: Iterable[list[ChunkPieces]], shape, full: bool) -> Pieces:
    """Join the chunks' local labels into the pieces of the whole scan.

    ``slabs`` gives the chunks one slab at a time: the chunks that share their start along
    the first axis, slab after slab in order (a generator may compute each as it is asked
    for). Only the planes of the current slab and the last planes of the slab before are
    held, so the memory is that of two slabs of planes, not of the scan's (at 2048^3 in
    128^3 chunks and int32 labels: 0.12 GB of planes instead of 1.6 GB). A pair of voxels across a face inside a slab
    that also crosses into the next slab is joined at the face between the slabs, which
    takes every shift across the whole plane."""
    ndim = len(shape)
    shifts = [s for s in product((-1, 0, 1), repeat=ndim - 1) if full or not any(s)]
    parts, rows, cols = [], [], []
    total = 0
    previous = []
    for slab in slabs:
        labelled = []
        for p in slab:
            labelled.append((p, total))
            total += p.count
        first, last = slab[0].lo[0], slab[0].hi[0]
        for a in range(1, ndim):
            for position in sorted({p.lo[a] for p in slab if p.lo[a] > 0}):
                origin = [first] + [0] * (ndim - 2)
                extent = [last - first] + [shape[k] for k in range(1, ndim) if k != a]
                _pairs_across(labelled, labelled, a, position, origin, extent, shifts, total,
                              rows, cols)
        if previous:
            _pairs_across(previous, labelled, 0, first, [0] * (ndim - 1), list(shape[1:]),
                          shifts, total, rows, cols)
        # what later faces need: only the last planes along the first axis
        for p, _ in previous:
            p.planes = None
        for p, _ in labelled:
            p.planes = {(0, "last"): p.planes[(0, "last")]}
        previous = labelled
        parts.extend(slab)
    for p, _ in previous:
        p.planes = None
    rows = np.concatenate(rows) if rows else np.zeros(0, np.int64)
    cols = np.concatenate(cols) if cols else np.zeros(0, np.int64)
    graph = coo_matrix((np.ones(len(rows), np.int8), (rows, cols)), shape=(total, total))
    n_pieces, piece = connected_components(graph, directed=False)
    offsets = np.cumsum([0] + [p.count for p in parts])
    sizes = np.zeros(n_pieces, np.int64)
    at_edge = np.zeros(n_pieces, bool)
    faces = np.zeros((n_pieces, ndim, 2), bool)
    piece_of_query = []
    for p, offset in zip(parts, offsets[:-1]):
        mine = piece[offset:offset + p.count]
        np.add.at(sizes, mine, p.sizes)
        np.logical_or.at(at_edge, mine, p.at_edge)
        np.logical_or.at(faces, mine, p.faces)
        at = np.maximum(offset + p.queried - 1, 0)
        piece_of_query.append(np.where(p.queried > 0, piece[at] if total else -1, -1))
    return Pieces(sizes, at_edge, faces, piece_of_query)


def _pairs_across(low_side, high_side, a, position, origin, extent, shifts, total, rows,
                  cols):
    """Append to ``rows`` and ``cols`` the pairs of global labels (0-based) that touch
    across the face at ``position`` along axis ``a``: the last planes of the chunks of
    ``low_side`` that end there and the first planes of those of ``high_side`` that start
    there, laid out over the box ``origin`` + ``extent`` of the other axes. Each face's
    pairs are made unique at once: a face holds up to nine pairs per voxel, but only as
    many distinct ones as pieces cross it, so the graph stays small whatever the scan's
    size."""
    others = [k for k in range(len(origin) + 1) if k != a]
    low = np.zeros(extent, np.int64)
    high = np.zeros_like(low)
    for side, plane_of, end in ((low_side, "last", "hi"), (high_side, "first", "lo")):
        target = low if plane_of == "last" else high
        for p, offset in side:
            if getattr(p, end)[a] != position:
                continue
            plane = p.planes[(a, plane_of)]
            place = tuple(slice(p.lo[k] - o, p.hi[k] - o) for k, o in zip(others, origin))
            target[place] = np.where(plane > 0, plane.astype(np.int64) + offset, 0)
    keys = []
    for shift in shifts:
        take_low, take_high = [], []
        for s, n in zip(shift, low.shape):
            take_low.append(slice(max(0, -s), n - max(0, s)))
            take_high.append(slice(max(0, s), n - max(0, -s)))
        u = low[tuple(take_low)].ravel()
        v = high[tuple(take_high)].ravel()
        both = (u > 0) & (v > 0)
        keys.append(np.unique((u[both] - 1) * total + (v[both] - 1)))
    pair_rows, pair_cols = np.divmod(np.unique(np.concatenate(keys)), max(total, 1))
    rows.append(pair_rows)
    cols.append(pair_cols)
