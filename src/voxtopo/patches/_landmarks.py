"""Max-min (farthest point) landmark selection, vectorised numpy.

Each new landmark is the point farthest from the landmarks chosen so far; one pass over
the cloud per landmark keeps the running distance to the nearest landmark.
``_maxmin_twin`` is the same rule in plain Python for tests on tiny clouds.
"""

from __future__ import annotations

import numpy as np


def maxmin(points: np.ndarray, n_landmarks: int, seed: int = 0) -> tuple[np.ndarray, float]:
    """Indices of ``n_landmarks`` max-min landmarks and the covering radius.

    The first landmark is drawn at random (seeded); ties go to the lowest index. The
    covering radius is the largest distance from a point of the cloud to its nearest
    landmark: every point lies within it of some landmark.
    """
    points = np.asarray(points, dtype=np.float64)
    first = int(np.random.default_rng(seed).integers(len(points)))
    chosen = np.empty(n_landmarks, dtype=np.int64)
    chosen[0] = first
    nearest = np.linalg.norm(points - points[first], axis=1)
    for i in range(1, n_landmarks):
        far = int(np.argmax(nearest))
        chosen[i] = far
        np.minimum(nearest, np.linalg.norm(points - points[far], axis=1), out=nearest)
    return chosen, float(nearest.max())


def _maxmin_twin(points, n_landmarks: int, first: int) -> list[int]:
    """Plain-Python max-min from a given first landmark."""
    chosen = [first]
    while len(chosen) < n_landmarks:
        best, best_distance = None, -1.0
        for i, p in enumerate(points):
            d = min(float(np.linalg.norm(np.subtract(p, points[j]))) for j in chosen)
            if d > best_distance:
                best, best_distance = i, d
        chosen.append(best)
    return chosen
