"""The DCT basis of k x k patches: eigenvectors of the D-norm's graph Laplacian.

The contrast of a patch ``x`` (flattened row by row) is its D-norm

    ||x||_D^2 = sum over 4-neighbour pixel pairs (i, j) of (x_i - x_j)^2 = x^T L x,

where ``L`` is the graph Laplacian of the k x k grid (4-neighbour pairs). The grid is the
product of two paths, so ``L = L_path (x) I + I (x) L_path``, and its eigenvectors are the
products of the eigenvectors of the path's Laplacian, which are the 1-D DCT-II vectors::

    v_m(i) = cos(pi * m * (i + 1/2) / k),   eigenvalue  4 sin^2(pi * m / (2k)),

for m = 0 .. k-1. The product of ``v_m`` along x and ``v_n`` along y has eigenvalue
``lambda_m + lambda_n``. Dropping the constant vector (m = n = 0) leaves k^2 - 1 vectors
that span the zero-mean patches. With ``U`` these vectors at unit Euclidean length, the
coordinates ``c_j = sqrt(lambda_j) * <U_j, x>`` satisfy ``sum c_j^2 = ||x||_D^2``: a patch
with zero mean and unit D-norm lands on the unit sphere S^(k^2-2), the 7-sphere for k = 3.
The basis patches ``e_j = U_j / sqrt(lambda_j)`` have unit D-norm and ``x = sum c_j e_j``.

Order of the basis: by polynomial degree m + n, then larger |m - n| first (pure
directions before mixed ones); among pure terms the one along x first, among mixed terms
the one of lower order along x first. For k = 3 this is the order of Lee, Pedersen &
Mumford (2003): horizontal and vertical gradients, the two pure second differences, the
saddle, the two mixed cubic terms (linear along x first), the fourth-order term; signs
follow cos, so ``e_1`` decreases from left to right.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from ..errors import InputError

#: Patch sizes the patch-space workflow accepts.
PATCH_SIZES = (3, 5, 7)


def check_patch_size(k) -> int:
    """Return ``k`` as an int, or raise InputError when it is not an odd size 3..7."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or int(k) not in PATCH_SIZES:
        raise InputError(f"Patch size k must be an odd whole number 3, 5 or 7 (a patch needs "
                         f"a centre pixel), got {k!r}.")
    return int(k)


@lru_cache(maxsize=None)
def _basis(k: int) -> tuple[np.ndarray, np.ndarray, tuple[tuple[int, int], ...]]:
    i = np.arange(k)
    path_vectors = np.array([np.cos(np.pi * m * (i + 0.5) / k) for m in range(k)])
    path_vectors /= np.linalg.norm(path_vectors, axis=1, keepdims=True)
    path_values = 4.0 * np.sin(np.pi * np.arange(k) / (2 * k)) ** 2
    orders = [(mx, ny) for mx in range(k) for ny in range(k) if mx + ny > 0]
    # pure terms: the one along x first; mixed terms: the one of lower order along x first
    orders.sort(key=lambda o: (o[0] + o[1], -abs(o[0] - o[1]),
                               -o[0] if o[0] * o[1] == 0 else o[0]))
    # rows index y and columns index x, as numpy arrays are laid out
    vectors = np.array([np.outer(path_vectors[ny], path_vectors[mx]).ravel()
                        for mx, ny in orders])
    values = np.array([path_values[mx] + path_values[ny] for mx, ny in orders])
    vectors.setflags(write=False)
    values.setflags(write=False)
    return vectors, values, tuple(orders)


def dct_basis(k: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal DCT basis of zero-mean k x k patches and its D-norm eigenvalues.

    Parameters
    ----------
    k : int
        Patch size, odd, 3 to 7.

    Returns
    -------
    vectors : ndarray, shape (k*k - 1, k*k)
        Rows are orthonormal (Euclidean) DCT patches, flattened row by row, the constant
        patch left out; see the module notes for the order.
    eigenvalues : ndarray, shape (k*k - 1,)
        ``vectors[j] @ L @ vectors[j]`` for the grid Laplacian ``L`` of the D-norm.

    Notes
    -----
    Coordinates of a zero-mean patch ``x`` are ``sqrt(eigenvalues) * (vectors @ x)``; their
    Euclidean norm is the D-norm of ``x``. The basis patches of unit D-norm are
    ``vectors / sqrt(eigenvalues)[:, None]``.

    References
    ----------
    Lee, Pedersen & Mumford (2003), "The nonlinear statistics of high-contrast patches in
    natural images", International Journal of Computer Vision 54.

    Examples
    --------
    >>> vectors, eigenvalues = dct_basis(3)
    >>> vectors.shape, eigenvalues.tolist()
    ((8, 9), [1.0, 1.0, 3.0, 3.0, 2.0, 4.0, 4.0, 6.0])
    >>> bool(np.allclose(vectors @ vectors.T, np.eye(8)))
    True
    """
    k = check_patch_size(k)
    vectors, values, _ = _basis(k)
    return vectors, np.round(values, 12)


def basis_orders(k: int = 3) -> tuple[tuple[int, int], ...]:
    """The (order along x, order along y) of each DCT basis vector, in basis order."""
    return _basis(check_patch_size(k))[2]


def grid_laplacian(k: int) -> np.ndarray:
    """Graph Laplacian of the k x k grid with 4-neighbour pairs (the D-norm's matrix)."""
    n = k * k
    laplacian = np.zeros((n, n))
    for y in range(k):
        for x in range(k):
            here = y * k + x
            for dy, dx in ((0, 1), (1, 0)):
                if y + dy < k and x + dx < k:
                    there = (y + dy) * k + (x + dx)
                    laplacian[here, here] += 1
                    laplacian[there, there] += 1
                    laplacian[here, there] -= 1
                    laplacian[there, here] -= 1
    return laplacian
