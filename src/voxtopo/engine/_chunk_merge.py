"""Kernels of the out-of-core union-find: reduce one chunk, then reduce merged graphs.

The dimension-0 diagram of a grid is what Kruskal's algorithm with the elder rule sees on
the grid graph. A chunk cannot finish every pair on its own, because two of its components
may already be joined through another chunk. It can finish the pairs whose dying component
touches no voxel next to another chunk ("flagged" voxels): such a component is, at that
level, a whole component of the full volume, so it dies exactly as it dies locally. Every
other merge is kept as an edge ``(young root, old root, voxel that joined them)`` of a
*reduced graph* whose vertices are the flagged voxels and the roots those edges name. The
reduced graph joins its vertices at the same levels as the chunk itself did, so a block of
chunks can be treated as the union of its children's reduced graphs plus the grid edges
that cross between them, and reduced again with the flags of the larger block. At the top
(one block, nothing flagged) every merge is final and the last root is the essential class.

The same sweep run the other way with the outside of the image as the eldest node gives
dimension d-1 (see :mod:`voxtopo.engine._union_find` for the duality and the tie rule,
which is the one used here: ties of value go by C-order index, and the chunk-local C-order
ranks voxels of one chunk exactly as the global C-order does).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._union_find import _find
from ._union_find import _visited_before as _before  # one tie rule for every sweep

#: Record kinds written by the kernels.
FINAL_PAIR = 0
KEPT_EDGE = 1
#: A component that reaches past its block gains faces of the image (``old``: their bits),
#: handed on as an edge to no vertex (see :func:`reduce_chunk`).
FACE_GAIN = 2


@njit(cache=True, inline="always")
def _gain_faces(root, at, faces, told, touches, wanted, crossing, out_kind, out_young,
                out_old, out_at, written):
    """After a step at ``at``: a FACE_GAIN record of the faces ``root``'s component
    gained, if it reaches past its block (each face once), and ``at`` for each axis whose
    two faces it holds first now. Returns the records written so far."""
    gained = faces[root] & ~told[root]
    if touches[root] and gained:
        out_kind[written] = FACE_GAIN
        out_young[written] = root
        out_old[written] = gained
        out_at[written] = at
        written += 1
        told[root] |= gained
    for a in range(3):
        both = 3 << (2 * a)
        if crossing[a] < 0 and (wanted & both) == both and (faces[root] & both) == both:
            crossing[a] = at
    return written


@njit(cache=True, inline="always")
def _join_and_record(root_a, root_b, a_is_elder, born, level, at, parent, touches, wanted,
                     faces, told, out_kind, out_young, out_old, out_at, written):
    """Join the components of ``root_a`` and ``root_b`` at ``at`` (of value ``level``): the
    younger hangs under the elder, faces and all. The union is recorded as a KEPT_EDGE
    when the younger reaches past its block (the joined component then does too), else
    as a FINAL_PAIR unless it dies at the value it was born at (``born``, by root).
    Returns the records written so far and the root of the joined component."""
    if a_is_elder:
        young, old = root_b, root_a
    else:
        young, old = root_a, root_b
    parent[young] = old
    if wanted:
        faces[old] |= faces[young]
        told[old] |= told[young]
    if touches[young]:
        out_kind[written] = KEPT_EDGE
        touches[old] = 1
    elif born[young] != level:
        out_kind[written] = FINAL_PAIR
    else:
        return written, old
    out_young[written] = young
    out_old[written] = old
    out_at[written] = at
    return written + 1, old


@njit(cache=True, nogil=True)
def reduce_chunk(values, order, shape, offsets, flagged, on_border, with_outside, ascending,
                 parent, touches, out_kind, out_young, out_old, out_voxel, face_of, wanted,
                 faces, told, crossing):
    """Sweep one chunk; write final pairs and kept edges; return how many were written.

    Only the voxels in ``order`` are visited: the others were linked beforehand by
    :func:`voxtopo.engine._union_find.link_regular_voxels` (``parent`` holds their links),
    which leaves a voxel unlinked when its entry may merge two components. A linked
    voxel joins a component that already exists and writes nothing here, so the records
    are those of visiting every voxel, as long as every flagged voxel and, with the
    outside, every ``on_border`` voxel is in ``order``.

    Parameters
    ----------
    values : 1D array, the chunk in C order.
    order : 1D int array, the chunk-local flat indices to visit, sorted by (value, index).
    shape : int64 array (3,), chunk sizes (z, y, x); a 2D chunk is one z-slice.
    offsets : int64 array (k, 3), neighbour offsets.
    flagged : uint8 array, 1 where a voxel has a neighbour in another chunk.
    on_border : uint8 array, 1 where a voxel lies on the border of the whole image (it
        touches the outside node ``n`` when ``with_outside``).
    parent, touches : work arrays of n + 1 entries; ``touches`` all 0 on entry.
    out_kind, out_young, out_old, out_voxel : output buffers of n + 1 entries, and one
        more for each face bit of each voxel when faces are followed (a face is gained at
        most once per voxel lying on it).
    face_of, wanted, faces, told, crossing : with ``wanted`` (bits of the image's faces
        whose joining is asked for: 2a and 2a + 1 for the first and last face along axis
        a), the faces each voxel lies on (``face_of``, uint8 bits) are followed as the
        components grow (``faces``, per root), and ``crossing[a]`` gets the first voxel
        whose entry joins both faces of axis a in one component (left at -1 when that
        does not happen in the chunk). A component that reaches another chunk writes the
        faces it gains as a ``FACE_GAIN`` record (young: its root, old: the new bits,
        voxel: where), once each (``told``); ``faces`` and ``told``: n + 1 zeros.
        With ``wanted`` 0 they are not read (one-entry arrays do).
    """
    n = values.size
    outside = n
    size_y, size_x = shape[1], shape[2]
    plane = size_y * size_x
    k_offsets = offsets.shape[0]
    written = 0
    parent[outside] = outside
    touches[outside] = 1
    last = order.size - 1
    for step in range(order.size):
        v = order[step] if ascending else order[last - step]
        parent[v] = v
        touches[v] = flagged[v]
        if wanted:
            faces[v] = face_of[v]
        root_v = v
        z = v // plane
        rest = v - z * plane
        y = rest // size_x
        x = rest - y * size_x
        for k in range(k_offsets + 1):
            if k < k_offsets:
                zz = z + offsets[k, 0]
                yy = y + offsets[k, 1]
                xx = x + offsets[k, 2]
                if (zz < 0 or zz >= shape[0] or yy < 0 or yy >= size_y
                        or xx < 0 or xx >= size_x):
                    continue
                u = zz * plane + yy * size_x + xx
                if not _before(values, u, v, ascending):
                    continue
                root_u = _find(parent, u)
            else:
                if not with_outside or not on_border[v]:
                    continue
                root_u = outside
            if root_u == root_v:
                continue
            u_is_elder = root_u == outside or (root_v != outside
                                               and _before(values, root_u, root_v, ascending))
            written, root_v = _join_and_record(root_u, root_v, u_is_elder, values, values[v], v,
                                               parent, touches, wanted, faces, told, out_kind,
                                               out_young, out_old, out_voxel, written)
        if wanted:
            written = _gain_faces(root_v, v, faces, told, touches, wanted, crossing, out_kind,
                                  out_young, out_old, out_voxel, written)
    return written


@njit(cache=True, nogil=True)
def _vertex_before(vert_value, vert_id, a, b, ascending, outside):
    if a == outside:
        return True
    if b == outside:
        return False
    va = vert_value[a]
    vb = vert_value[b]
    if ascending:
        return va < vb or (va == vb and vert_id[a] < vert_id[b])
    return va > vb or (va == vb and vert_id[a] > vert_id[b])


@njit(cache=True, nogil=True)
def joining_edges(edge_a, edge_b, edge_order, vertices):
    """Which edges join two components when the edges are taken in ``edge_order`` (a
    spanning forest, Kruskal): the others close a cycle of edges visited no later, so
    no sweep of a larger graph holding them all can need them.

    Vertices are positions 0..vertices-1. Returns a bool array, one entry per edge.
    """
    parent = np.arange(vertices)
    joins = np.zeros(edge_a.size, np.bool_)
    for i in range(edge_order.size):
        e = edge_order[i]
        root_a = _find(parent, edge_a[e])
        root_b = _find(parent, edge_b[e])
        if root_a != root_b:
            parent[root_a] = root_b
            joins[e] = True
    return joins


@njit(cache=True, nogil=True, inline="always")
def _edge_before(values, ids, e, f, ascending):
    """True when edge ``e`` is visited strictly before edge ``f``."""
    if ascending:
        return values[e] < values[f] or (values[e] == values[f] and ids[e] < ids[f])
    return values[e] > values[f] or (values[e] == values[f] and ids[e] > ids[f])


@njit(cache=True, nogil=True)
def merged_runs(values, ids, bounds, ascending):
    """The sweep order of edges listed as runs ``bounds[k]:bounds[k + 1]`` that are each
    in sweep order (by value, ties by voxel id): the runs merged one after the other,
    edges of equal keys in the order they are listed, as a stable sort of all would give.

    Returns an empty array when a run is not in sweep order (then sort them all).
    """
    n = values.size
    for k in range(bounds.size - 1):
        for e in range(bounds[k] + 1, bounds[k + 1]):
            if _edge_before(values, ids, e, e - 1, ascending):
                return np.empty(0, np.int64)
    order = np.arange(n)
    spare = np.empty(n, np.int64)
    for k in range(1, bounds.size - 1):
        # merge order[0:bounds[k]] (already merged) with the run bounds[k]:bounds[k + 1]
        i, j, out = 0, bounds[k], 0
        while i < bounds[k] and j < bounds[k + 1]:
            if _edge_before(values, ids, j, order[i], ascending):
                spare[out] = j
                j += 1
            else:
                spare[out] = order[i]
                i += 1
            out += 1
        while i < bounds[k]:
            spare[out] = order[i]
            i += 1
            out += 1
        while j < bounds[k + 1]:
            spare[out] = j
            j += 1
            out += 1
        order[:out] = spare[:out]
    return order


@njit(cache=True, nogil=True)
def reduce_graph(vert_value, vert_id, vert_flag, outside, edge_a, edge_b, edge_value,
                 edge_order, ascending, parent, touches, out_kind, out_young, out_old,
                 out_edge, wanted, faces, told, crossing):
    """Kruskal with the elder rule over a reduced graph; same records as :func:`reduce_chunk`.

    Vertices are positions 0..m-1 (``outside`` is the position of the outside node, or -1);
    edge ``e`` joins ``edge_a[e]`` and ``edge_b[e]`` at the level ``edge_value[e]``;
    ``edge_order`` lists the edges in sweep order. ``out_edge`` names the edge of a record
    (its voxel is the death location). An edge with ``edge_b[e] = -1 - bits`` is a
    ``FACE_GAIN`` of ``edge_a[e]``'s component; with ``wanted`` the faces are followed as in
    :func:`reduce_chunk` (``faces``: the bits each vertex holds at the start, zeros when
    every face comes by a face-gain edge; ``told``: m zeros; ``crossing[a]``: an edge, or
    -1). Buffers of m entries and one more per face bit of the face-gain edges and of
    ``faces`` suffice.
    """
    m = vert_value.size
    for p in range(m):
        parent[p] = p
        touches[p] = vert_flag[p]
    written = 0
    for i in range(edge_order.size):
        e = edge_order[i]
        root_a = _find(parent, edge_a[e])
        if edge_b[e] < 0:
            if wanted:
                faces[root_a] |= -1 - edge_b[e]
                root = root_a
            else:
                continue
        else:
            root_b = _find(parent, edge_b[e])
            if root_a == root_b:
                continue
            a_is_elder = _vertex_before(vert_value, vert_id, root_a, root_b, ascending, outside)
            written, root = _join_and_record(root_a, root_b, a_is_elder, vert_value,
                                             edge_value[e], e, parent, touches, wanted, faces,
                                             told, out_kind, out_young, out_old, out_edge,
                                             written)
        if wanted:
            written = _gain_faces(root, e, faces, told, touches, wanted, crossing, out_kind,
                                  out_young, out_old, out_edge, written)
    return written


def reduce_graph_reference(vert_value, vert_id, vert_flag, outside, edges, ascending,
                           wanted=0, vert_faces=None):
    """Plain-Python twin of :func:`reduce_graph` for tiny graphs.

    ``edges`` is a list of (a, b, value, voxel id); an edge with a negative ``b`` is a face
    gain: ``a``'s component gains the faces whose bits are ``-1 - b``. With ``wanted``
    (bits of the faces whose joining is asked for, as in :func:`reduce_chunk`) the faces
    are followed from ``vert_faces`` (the bits each vertex starts with; none by default).

    Returns the records (kind, young, old, edge number) in the order the kernel writes them
    (a FACE_GAIN record: (kind, root, bits gained, edge number)), and per axis of the 3D
    grid whose two faces are both wanted, the first edge after which the component it
    joined or grew holds both faces (-1 for the others and when that never happens).
    """
    def key(p):
        if p == outside:
            return None
        return (vert_value[p], vert_id[p])

    def elder(a, b):
        if a == outside:
            return True
        if b == outside:
            return False
        return key(a) < key(b) if ascending else key(a) > key(b)

    def faces_of(bits):
        return {(axis, end) for axis in range(3) for end in range(2)
                if bits >> (2 * axis + end) & 1}

    def bits_of(faces):
        return sum(1 << (2 * axis + end) for axis, end in faces)

    # a descending sweep is the ascending one read backwards, ties of (value, voxel) too
    order = sorted(range(len(edges)), key=lambda e: (edges[e][2], edges[e][3]))
    if not ascending:
        order.reverse()
    parent = list(range(len(vert_value)))
    touches = [bool(f) for f in vert_flag]
    # faces each component holds, and those already handed on in a FACE_GAIN record
    start_bits = [0] * len(vert_value) if vert_faces is None else [int(f) for f in vert_faces]
    held = [faces_of(bits) for bits in start_bits]
    handed = [set() for _ in vert_value]
    asked_axes = [axis for axis in range(3) if faces_of(wanted) >= {(axis, 0), (axis, 1)}]
    crossing = [-1, -1, -1]

    def find(p):
        while parent[p] != p:
            p = parent[p]
        return p

    records = []
    for e in order:
        a, b, value, _ = edges[e]
        if b < 0:
            if not wanted:
                continue
            grown = find(a)
            held[grown] |= faces_of(-1 - b)
        else:
            root_a, root_b = find(a), find(b)
            if root_a == root_b:
                continue
            young, old = (root_b, root_a) if elder(root_a, root_b) else (root_a, root_b)
            parent[young] = old
            held[old] |= held[young]
            handed[old] |= handed[young]
            if touches[young]:
                records.append((KEPT_EDGE, young, old, e))
                touches[old] = True
            elif vert_value[young] != value:
                records.append((FINAL_PAIR, young, old, e))
            grown = old
        if not wanted:
            continue
        not_handed = held[grown] - handed[grown]
        if touches[grown] and not_handed:
            records.append((FACE_GAIN, grown, bits_of(not_handed), e))
            handed[grown] |= not_handed
        for axis in asked_axes:
            if crossing[axis] < 0 and {(axis, 0), (axis, 1)} <= held[grown]:
                crossing[axis] = e
    return records, crossing
