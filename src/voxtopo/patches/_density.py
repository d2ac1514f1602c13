"""Local density of a point cloud: distance to the k-th nearest neighbour (scipy cKDTree).

The queries run in chunks so that memory stays at ``chunk * (k + 1)`` distances however
large the cloud is. ``_kth_neighbour_distance_twin`` is the brute-force version for tests.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

#: Points per KD-tree query; bounds the (chunk, k + 1) distance table held at once.
QUERY_CHUNK = 8192


def kth_neighbour_distance(points: np.ndarray, k_neighbour: int) -> np.ndarray:
    """Distance from each point to its ``k_neighbour``-th nearest other point."""
    tree = cKDTree(points)
    out = np.empty(len(points))
    for start in range(0, len(points), QUERY_CHUNK):
        block = points[start:start + QUERY_CHUNK]
        # the nearest hit of each query is the point itself, so ask for one more
        distances, _ = tree.query(block, k=k_neighbour + 1, workers=-1)
        out[start:start + len(block)] = distances[:, k_neighbour]
    return out


def _kth_neighbour_distance_twin(points, k_neighbour: int) -> list[float]:
    """Brute force over all pairs, one point at a time."""
    out = []
    for i, p in enumerate(points):
        distances = sorted(float(np.linalg.norm(np.subtract(p, q)))
                           for j, q in enumerate(points) if j != i)
        out.append(distances[k_neighbour - 1])
    return out
