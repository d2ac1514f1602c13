"""H1 bars of the Vietoris-Rips complex of a small point cloud, over Z/p, in numba.

Sliding-window clouds of one signal have tens of points, and a per-pixel map has tens of
thousands of them: a general library spends most of its time building a simplex tree for
each. Here the complex is implicit (edges and triangles are numbered, never stored):

1. Edges sorted by length; a union-find pass marks the edges that join two components
   (they end H0 classes and cannot start an H1 class: "clearing").
2. The other edges, longest first, are reduced against the coboundary matrix (rows:
   triangles in filtration order, a triangle's value being its longest edge): the pivot of
   a column is its earliest triangle. An edge whose column ends with pivot triangle t
   starts an H1 class at its length that dies at t's value (persistent cohomology gives
   the same pairs as homology; de Silva, Morozov & Vejdemo-Johansson 2011).

Ties are broken by index, so zero-length pairs may differ from another program's; the bars
of positive length do not depend on it (they are the persistence diagram).

``h1_bars.py_func`` is the same algorithm in plain Python, used by the tests on tiny clouds.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

#: Largest cloud the kernel is used for: below it the kernel beats gudhi (twice as fast at
#: 30 points, even at 60); above it gudhi's clearing and collapses win (a 150-point circle:
#: 0.9 s here against 0.35 s).
MAX_POINTS = 64


@njit(cache=True)
def _find(parent, i):
    root = i
    while parent[root] != root:
        root = parent[root]
    while parent[i] != root:
        following = parent[i]
        parent[i] = root
        i = following
    return root


@njit(cache=True)
def _triangle_index(i, j, k):
    """Position of {i < j < k} in the combinatorial numbering C(k,3) + C(j,2) + i."""
    return k * (k - 1) * (k - 2) // 6 + j * (j - 1) // 2 + i


@njit(cache=True)
def _earlier(value, s, t):
    """Triangle s comes before triangle t in the filtration."""
    return value[s] < value[t] or (value[s] == value[t] and s < t)


@njit(cache=True)
def _inverse(value, p):
    for candidate in range(1, p):
        if (value * candidate) % p == 1:
            return candidate
    return 1


@njit(cache=True)
def h1_bars(points, p):
    """(birth, death) of every H1 bar of positive length of the Rips complex of ``points``
    (n, d) over Z/p, as an (k, 2) array, scales in Euclidean distance."""
    n = points.shape[0]
    distance = np.zeros((n, n))
    for i in range(n):
        for j in range(i + 1, n):
            total = 0.0
            for c in range(points.shape[1]):
                step = points[i, c] - points[j, c]
                total += step * step
            distance[i, j] = np.sqrt(total)
            distance[j, i] = distance[i, j]
    edges = n * (n - 1) // 2
    edge_u = np.empty(edges, dtype=np.int64)
    edge_v = np.empty(edges, dtype=np.int64)
    length = np.empty(edges)
    e = 0
    for j in range(n):
        for i in range(j):
            edge_u[e], edge_v[e], length[e] = i, j, distance[i, j]
            e += 1
    order = np.argsort(length, kind="mergesort")
    # H0: edges that join two components are cleared
    parent = np.arange(n)
    joins = np.zeros(edges, dtype=np.bool_)
    for e in order:
        a, b = _find(parent, edge_u[e]), _find(parent, edge_v[e])
        if a != b:
            parent[max(a, b)] = min(a, b)
            joins[e] = True
    # triangles in filtration order: by value (the longest edge), ties by number
    triangles = n * (n - 1) * (n - 2) // 6
    value = np.empty(triangles)
    for k in range(n):
        for j in range(k):
            for i in range(j):
                value[_triangle_index(i, j, k)] = max(distance[i, j], distance[i, k],
                                                      distance[j, k])
    # reduced columns, stored flat: owner[pivot triangle] = column number
    owner = np.full(triangles, -1, dtype=np.int64)
    start = np.zeros(edges + 1, dtype=np.int64)
    store_tri = np.empty(max(16, edges * max(n - 2, 1)), dtype=np.int64)
    store_coef = np.empty(store_tri.shape[0], dtype=np.int64)
    stored = 0
    columns = 0
    bars = np.empty((edges, 2))
    found = 0
    for position in range(edges - 1, -1, -1):
        e = order[position]
        if joins[e]:
            continue
        a, b = edge_u[e], edge_v[e]
        # coboundary of [a, b]: the triangles {a, b, c}, sign from c's place
        work_tri = np.empty(n - 2, dtype=np.int64)
        work_coef = np.empty(n - 2, dtype=np.int64)
        size = 0
        for c in range(n):
            if c == a or c == b:
                continue
            if c < a:
                t, sign = _triangle_index(c, a, b), 1      # [c,a,b]: [a,b] is face 0
            elif c < b:
                t, sign = _triangle_index(a, c, b), p - 1  # [a,c,b]: [a,b] is face 1
            else:
                t, sign = _triangle_index(a, b, c), 1      # [a,b,c]: [a,b] is face 2
            work_tri[size] = t
            work_coef[size] = sign % p
            size += 1
        # into filtration order (insertion sort: the column is short)
        for q in range(1, size):
            t, coefficient, x = work_tri[q], work_coef[q], q
            while x > 0 and _earlier(value, t, work_tri[x - 1]):
                work_tri[x] = work_tri[x - 1]
                work_coef[x] = work_coef[x - 1]
                x -= 1
            work_tri[x] = t
            work_coef[x] = coefficient
        while size > 0 and owner[work_tri[0]] >= 0:
            column = owner[work_tri[0]]
            lo, hi = start[column], start[column + 1]
            factor = (work_coef[0] * _inverse(store_coef[lo], p)) % p
            merged_tri = np.empty(size + hi - lo, dtype=np.int64)
            merged_coef = np.empty(size + hi - lo, dtype=np.int64)
            x, y, m = 0, lo, 0
            while x < size or y < hi:
                if y >= hi or (x < size and _earlier(value, work_tri[x], store_tri[y])):
                    merged_tri[m], merged_coef[m] = work_tri[x], work_coef[x]
                    x += 1
                    m += 1
                elif x >= size or _earlier(value, store_tri[y], work_tri[x]):
                    merged_tri[m] = store_tri[y]
                    merged_coef[m] = (p - (factor * store_coef[y]) % p) % p
                    y += 1
                    m += 1
                else:
                    coefficient = (work_coef[x] - factor * store_coef[y]) % p
                    if coefficient != 0:
                        merged_tri[m], merged_coef[m] = work_tri[x], coefficient
                        m += 1
                    x += 1
                    y += 1
            work_tri, work_coef, size = merged_tri, merged_coef, m
        if size == 0:
            continue
        if stored + size > store_tri.shape[0]:
            grown = max(2 * store_tri.shape[0], stored + size)
            more_tri = np.empty(grown, dtype=np.int64)
            more_coef = np.empty(grown, dtype=np.int64)
            more_tri[:stored] = store_tri[:stored]
            more_coef[:stored] = store_coef[:stored]
            store_tri, store_coef = more_tri, more_coef
        store_tri[stored:stored + size] = work_tri[:size]
        store_coef[stored:stored + size] = work_coef[:size]
        owner[work_tri[0]] = columns
        stored += size
        columns += 1
        start[columns] = stored
        death = value[work_tri[0]]
        if death > length[e]:
            bars[found, 0] = length[e]
            bars[found, 1] = death
            found += 1
    return bars[:found]


@njit(cache=True, parallel=True)
def longest_h1_many(clouds, p):
    """Persistence of the longest H1 bar over Z/p of each cloud (rows, n, d), in parallel."""
    out = np.zeros(clouds.shape[0])
    for r in prange(clouds.shape[0]):
        bars = h1_bars(clouds[r], p)
        best = 0.0
        for k in range(bars.shape[0]):
            best = max(best, bars[k, 1] - bars[k, 0])
        out[r] = best
    return out
