"""Contrast (D-norm) of patches and their normalised DCT coordinates (vectorised numpy).

``d_norm`` sums squared differences over the 4-neighbour pixel pairs of each patch;
``_d_norm_twin`` is the same sum written as plain loops, for tests on tiny inputs.
"""

from __future__ import annotations

import numpy as np

from ._basis import dct_basis


def d_norm(patches: np.ndarray) -> np.ndarray:
    """D-norm of each patch in an (n, k, k) stack: sqrt of the sum over 4-neighbour pairs
    of squared differences (horizontal and vertical pairs, each pair once)."""
    patches = np.asarray(patches, dtype=np.float64)
    across = np.diff(patches, axis=2)
    down = np.diff(patches, axis=1)
    return np.sqrt((across ** 2).sum(axis=(1, 2)) + (down ** 2).sum(axis=(1, 2)))


def _d_norm_twin(patch) -> float:
    """Plain-loop D-norm of one k x k patch (list of lists or array)."""
    k = len(patch)
    total = 0.0
    for y in range(k):
        for x in range(k):
            if x + 1 < k:
                total += (float(patch[y][x]) - float(patch[y][x + 1])) ** 2
            if y + 1 < k:
                total += (float(patch[y][x]) - float(patch[y + 1][x])) ** 2
    return total ** 0.5


def normalise(patches: np.ndarray, contrast: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Centre each patch, divide by its D-norm, and change to the DCT basis.

    Returns the normalised (n, k, k) patches and their (n, k*k - 1) coordinates, which lie
    on the unit sphere. Every ``contrast`` must be positive.
    """
    n, k, _ = patches.shape
    centred = patches - patches.mean(axis=(1, 2), keepdims=True)
    unit = centred / contrast[:, None, None]
    vectors, eigenvalues = dct_basis(k)
    coordinates = (unit.reshape(n, k * k) @ vectors.T) * np.sqrt(eigenvalues)
    return unit, coordinates
