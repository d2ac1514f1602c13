"""Outside references and analytic shapes that many test files use, kept once.

- :func:`gudhi_intervals`: the persistence diagram of a cubical complex computed by gudhi
  (Maria, Boissonnat, Glisse & Yvinec 2014, "The Gudhi Library: Simplicial Complexes and
  Persistent Homology", ICMS), the library the engines are checked against.
- The shapes (annulus, ball, spherical shell, solid torus, thickened torus surface) are
  drawn on a voxel grid centred on the array; their Betti numbers (Hatcher 2002,
  "Algebraic Topology") are named in the tests that use them.

The test files import it by name (``from reference import ...``): pytest puts this folder
on the path (``pythonpath`` in pyproject.toml).
"""

import gudhi
import numpy as np


def gudhi_intervals(values, dim: int, *, construction: str = "voxel",
                    superlevel: bool = False) -> np.ndarray:
    """(birth, death) rows of dimension ``dim`` computed by gudhi, persistence above zero.

    Parameters
    ----------
    values : array_like
        A 2D or 3D image.
    dim : int
        Homology dimension.
    construction : {"voxel", "vertex"}
        "voxel": the values sit on the top-dimensional cells (``top_dimensional_cells``,
        the 8 / 26 neighbourhood); "vertex": on the vertices (``vertices``, 4 / 6).
    superlevel : bool
        Sweep from the top: gudhi's sublevel diagram of the negated values, negated back,
        so that a pair is born at the higher value and dies at the lower.

    Returns
    -------
    ndarray, shape (n, 2)
        Essential classes have death ``inf`` (``-inf`` for a superlevel sweep). Over Z/2;
        the homology of an image in 2D or 3D has no torsion, so any field gives the same.
    """
    data = np.asarray(values, dtype=np.float64)
    key = "top_dimensional_cells" if construction == "voxel" else "vertices"
    complex_ = gudhi.CubicalComplex(**{key: -data if superlevel else data})
    complex_.compute_persistence(homology_coeff_field=2, min_persistence=0)
    intervals = np.asarray(complex_.persistence_intervals_in_dimension(dim),
                           dtype=np.float64).reshape(-1, 2)
    intervals = intervals[intervals[:, 1] > intervals[:, 0]]
    return -intervals if superlevel else intervals


def centred_grid(shape) -> list[np.ndarray]:
    """Coordinates of every voxel centre, one array per axis, 0 at the array's centre."""
    return np.meshgrid(*(np.arange(n) - (n - 1) / 2 for n in shape), indexing="ij")


def radius(n: int, ndim: int) -> np.ndarray:
    """Distance of each voxel of an ``n``-sided square or cube to its centre."""
    return np.sqrt(sum(axis * axis for axis in centred_grid((n,) * ndim)))


def annulus(n=41, r_in=8, r_out=15) -> np.ndarray:
    """A ring between radii ``r_in`` and ``r_out`` in an n x n image (True inside)."""
    y, x = centred_grid((n, n))
    r = np.hypot(y, x)
    return (r >= r_in) & (r <= r_out)


def ball(n=31, r=11) -> np.ndarray:
    """A ball of radius ``r`` in an n^3 volume."""
    return radius(n, 3) <= r


def shell(n=33, r_in=8, r_out=13) -> np.ndarray:
    """A spherical shell between radii ``r_in`` and ``r_out`` in an n^3 volume."""
    r = radius(n, 3)
    return (r >= r_in) & (r <= r_out)


def solid_torus(n=41, big=12, small=5) -> np.ndarray:
    """A solid torus around the z axis: core circle of radius ``big`` in the middle
    z-plane, tube radius ``small``, in an n^3 volume."""
    z, y, x = centred_grid((n, n, n))
    return (np.hypot(y, x) - big) ** 2 + z * z <= small * small


def torus_distance(shape=(24, 44, 44), core_radius=12.0) -> np.ndarray:
    """Distance of each voxel centre to a circle of radius ``core_radius`` in the middle
    z-plane (y, x centred)."""
    z, y, x = centred_grid(shape)
    return np.sqrt((np.hypot(y, x) - core_radius) ** 2 + z * z)


def torus_surface(n=45, big=13, small=6, thickness=2.2) -> np.ndarray:
    """A torus surface (core circle ``big``, tube ``small``) thickened to ``thickness``
    on each side, in an n^3 volume."""
    return np.abs(torus_distance((n, n, n), big) - small) <= thickness
