"""Comparing persistence diagrams: distances, vectorisations, embedding and a group test.

The distances are the bottleneck distance and the q-Wasserstein distance between diagrams
of chosen homological dimensions, both computed by gudhi on the finite pairs. Essential
classes (pairs that never die) are compared separately, never dropped silently and never
clipped at an invented level:

* the essential births of each dimension are matched in sorted order, which is the optimal
  matching of points on a line for both distances; the point-to-point cost is the
  difference of the births (the L-infinity distance of two points at infinity);
* when two diagrams have a different number of essential classes in a dimension, no
  matching exists and the distance is infinite (``essential="ignore"`` leaves them out);
* the finite and essential parts combine as max(finite, essential) for the bottleneck
  distance and as (W_finite^q + W_essential^q)^(1/q) for Wasserstein;
* several dimensions combine the same way (a matching never mixes dimensions): the
  bottleneck distance over dimensions is the largest one, the Wasserstein distance the
  q-norm of the per-dimension distances.

Superlevel diagrams (birth above death) are compared as they are: a distance only needs
both diagrams to run the same way, which :func:`check_comparable` enforces before anything
is computed (the same number of image dimensions, the same sweep, the same kind of values).

Which pairs are compared: by default the significant features (gray-value sweeps) or the
robust ones (distance sweeps) that voxtopo.significance flagged in each scan, with every
class that never dies kept; ``all_pairs=True`` compares every pair. A diagram without
those flags (an older result) is compared with all its pairs, and a note says so.

Memory: the bottleneck distance needs memory in proportion to the number of pairs; one
Wasserstein call builds a dense (n + 1) x (m + 1) cost matrix and a transport plan of the
same size, so it is estimated (:func:`wasserstein_bytes`) and refused through
voxtopo.memory.ensure_fits before it runs. Only the chosen distance is computed.

Vectorisations are persistence images (Adams et al. 2017) and Betti curves, both on a grid
shared by every diagram in the comparison, so that vectors of different scans line up.
"""

from __future__ import annotations

import inspect
import math
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import erf

from .diagram import Diagram
from .errors import InputError
from .io.results import read_summary, write_summary
from .memory import ensure_fits

__all__ = ["bottleneck", "wasserstein", "wasserstein_bytes", "distance_matrix",
           "check_comparable", "select_features", "PersistenceImageGrid", "image_grid",
           "persistence_image", "betti_curves", "embed_mds", "distinct_groupings",
           "permutation_test", "PermutationResult", "Comparison", "compare_diagrams",
           "load_results"]

METRICS = ("bottleneck", "wasserstein")
ESSENTIAL_CHOICES = ("separate", "ignore")

#: Per-pair flags written by voxtopo.significance, in the order they are looked for:
#: ``significant`` (gray-value sweeps) and ``robust`` (distance sweeps).
FLAG_COLUMNS = ("significant", "robust")

#: summary.json section that states how each flag was computed.
VERDICT_SECTIONS = {"significant": "significance", "robust": "robustness"}

#: Peak memory of one gudhi Wasserstein call per cell of its (n + 1) x (m + 1) cost
#: matrix. Measured as the rise of the peak resident memory of a fresh process (gudhi
#: 3.13, POT 0.9.7, 250 thousand to 16 million cells, square and 60:1 diagrams): 39 to
#: 42.5 bytes (the cost matrix, the differences it is built from, POT's transport plan);
#: rounded up for what was not measured.
WASSERSTEIN_BYTES_PER_CELL = 48

WASSERSTEIN_REMEDY = ("keep fewer pairs with a larger --min-persistence, or use the "
                      "bottleneck distance (--metric bottleneck), whose memory grows only "
                      "with the number of pairs")


# --- the two parts of one dimension of a diagram ------------------------------------------
def _check_dim(diagram: Diagram, dim: int) -> None:
    if not 0 <= dim < diagram.ndim:
        raise InputError(f"Dimension {dim} does not exist in a {diagram.ndim}D diagram "
                         f"of {diagram.source or 'a scan'}; choose from 0 to {diagram.ndim - 1}.")


def _parts(diagram: Diagram, dim: int) -> tuple[np.ndarray, np.ndarray]:
    """(finite (n, 2) birth/death array, sorted essential births) of dimension ``dim``,
    mirrored for a superlevel diagram (for gudhi's distances only)."""
    _check_dim(diagram, dim)
    intervals = diagram.intervals(dim)
    if diagram.superlevel:
        # gudhi measures the distance to the diagonal as (death - birth) / 2, so a
        # superlevel diagram goes in mirrored; mirroring both diagrams keeps every distance.
        intervals = -intervals
    finite = np.isfinite(intervals[:, 1])
    return intervals[finite], np.sort(intervals[~finite, 0])


def _check_essential(essential: str) -> None:
    if essential not in ESSENTIAL_CHOICES:
        raise InputError(f"essential should be one of {list(ESSENTIAL_CHOICES)}, "
                         f"got {essential!r}.")


def _check_dims(dims) -> tuple[int, ...]:
    dims = (dims,) if isinstance(dims, (int, np.integer)) else tuple(dims)
    if not dims:
        raise InputError("Choose at least one homological dimension to compare, got none.")
    return tuple(int(d) for d in dims)


def check_comparable(diagrams) -> None:
    """Refuse diagrams that a distance cannot meaningfully relate.

    All of them must come from scans of the same number of dimensions (2D or 3D), sweep
    the same way (sublevel or superlevel) and hold the same kind of values in the same
    unit (gray values, or distances in one physical unit). It reads only the diagrams'
    descriptions, so callers run it before computing anything.

    Parameters
    ----------
    diagrams : iterable of Diagram
        At least one diagram.

    Raises
    ------
    InputError
        Naming the first diagram that differs from the first one, and how.
    """
    diagrams = list(diagrams)
    first = diagrams[0]
    for other in diagrams[1:]:
        if other.ndim != first.ndim:
            raise InputError(
                f"{other.source or 'A diagram'} comes from a {other.ndim}D scan but "
                f"{first.source or 'the first'} from a {first.ndim}D one, and their features "
                f"(cavities exist only in 3D) cannot be matched; compare 2D scans with 2D "
                f"scans and 3D with 3D.")
        if other.superlevel != first.superlevel:
            raise InputError(
                f"{other.source or 'A diagram'} is a "
                f"{'superlevel' if other.superlevel else 'sublevel'} diagram but "
                f"{first.source or 'the first'} is not; compute all of them the same way.")
        if other.values != first.values or (first.values == "distance"
                                            and other.unit != first.unit):
            raise InputError(
                f"{other.source or 'A diagram'} holds {other.values} values in {other.unit} "
                f"but {first.source or 'the first'} holds {first.values} values in "
                f"{first.unit}; compare diagrams of the same kind of filtration.")


# --- which pairs are compared --------------------------------------------------------------
def _flag_of(diagram: Diagram) -> str | None:
    """The flag column the diagram carries (``significant`` or ``robust``), if any."""
    return next((flag for flag in FLAG_COLUMNS if flag in diagram.pairs.columns), None)


def _check_min_persistence(min_persistence) -> float:
    try:
        value = float(min_persistence)
    except (TypeError, ValueError):
        value = math.nan
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"--min-persistence (the shortest lifetime kept) must be a number "
                         f"of at least 0, got {min_persistence!r}.")
    return value


def select_features(diagram: Diagram, *, all_pairs: bool = False,
                    min_persistence: float = 0.0) -> Diagram:
    """The pairs of ``diagram`` that a comparison uses.

    By default the finite pairs flagged ``significant`` (or ``robust``) and every class
    that never dies, whatever its flag; a diagram without either column keeps all its
    pairs. ``all_pairs=True`` keeps every pair. In both cases only finite pairs whose
    persistence is above ``min_persistence`` stay.

    Parameters
    ----------
    diagram : Diagram
        A diagram, with or without a ``significant`` / ``robust`` column.
    all_pairs : bool
        Keep every pair instead of the flagged ones.
    min_persistence : float
        The shortest lifetime kept, in the diagram's units (0 or more).

    Returns
    -------
    Diagram
        A copy holding the selected pairs.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> d = voxtopo.persistence(np.array([[0., 9., 4., 9., 1.]]))
    >>> len(d), len(select_features(d, min_persistence=6))
    (3, 2)
    """
    min_persistence = _check_min_persistence(min_persistence)
    pairs = diagram.pairs
    never_dies = ~np.isfinite(pairs["death"].to_numpy(dtype=np.float64))
    keep = never_dies | (pairs["persistence"].to_numpy(dtype=np.float64) > min_persistence)
    flag = _flag_of(diagram)
    if flag is not None and not all_pairs:
        keep &= never_dies | pairs[flag].to_numpy(dtype=bool)
    return replace(diagram, pairs=pairs[keep].reset_index(drop=True))


def _level_of(diagram: Diagram, flag: str) -> str | None:
    """How the flag was computed, from the verdict section load_results keeps in
    ``diagram.extra`` ("family-wise alpha 0.05", "boundary tolerance 1 um")."""
    section = diagram.extra.get(VERDICT_SECTIONS[flag]) or {}
    if flag == "significant" and section.get("alpha") is not None:
        return f"family-wise alpha {float(section['alpha']):g}"
    if flag == "robust" and section.get("boundary_tolerance") is not None:
        return (f"boundary tolerance {float(section['boundary_tolerance']):g} "
                f"{section.get('unit', diagram.unit)}, stability theorem")
    return None


def _features_compared(diagrams, names, all_pairs: bool,
                       min_persistence: float) -> tuple[str, list[str]]:
    """The phrase that says which pairs were compared, and notes on older results."""
    above = (f" with persistence above {min_persistence:g} {diagrams[0].value_unit}"
             if min_persistence > 0 else "")
    flags = [_flag_of(d) for d in diagrams]
    if all_pairs:
        return "all pairs" + above, [_only_flagged_note(d, name, flag) for d, name, flag
                                     in zip(diagrams, names, flags)
                                     if flag is not None and _holds_only_flagged(d, flag)]
    unflagged = [name for name, flag in zip(names, flags) if flag is None]
    notes = []
    if unflagged:
        one = len(unflagged) == 1
        notes.append(f"{', '.join(unflagged)} {'has' if one else 'have'} no significance or "
                     f"robustness flags (written by an older version, or computed without "
                     f"them): compared with all {'its' if one else 'their'} pairs")
    flagged = [(d, flag) for d, flag in zip(diagrams, flags) if flag is not None]
    if not flagged:
        return "all pairs" + above + " (no result carries significance or robustness flags)", \
            notes
    flag = flagged[0][1]
    levels = {_level_of(d, flag) for d, _ in flagged}
    how = (f"{'; '.join(sorted(levels))}, as computed per scan" if None not in levels
           else "as flagged in each scan")
    phrase = f"{flag} features ({how}){above}"
    if unflagged:
        phrase += f", and all pairs of {len(unflagged)} diagram(s) without flags"
    return phrase, notes


def _holds_only_flagged(diagram: Diagram, flag: str) -> bool:
    finite = np.isfinite(diagram.pairs["death"].to_numpy(dtype=np.float64))
    return bool(finite.any() and diagram.pairs[flag].to_numpy(dtype=bool)[finite].all())


def _only_flagged_note(diagram: Diagram, name: str, flag: str) -> str:
    return (f"every finite pair of {name} is flagged {flag} (a result folder keeps only those "
            f"when its analysis kept only {flag} features), so all its pairs are its {flag} "
            f"features")


def _finite_bottleneck(a: np.ndarray, b: np.ndarray) -> float:
    import gudhi

    if len(a) == 0 and len(b) == 0:
        return 0.0
    return float(gudhi.bottleneck_distance(a.reshape(-1, 2), b.reshape(-1, 2)))


def wasserstein_bytes(n_first: int, n_second: int) -> int:
    """Estimated peak memory, in bytes, of one Wasserstein call between ``n_first`` and
    ``n_second`` finite pairs (see WASSERSTEIN_BYTES_PER_CELL).

    Parameters
    ----------
    n_first, n_second : int
        Finite pairs of the two diagrams in one dimension.

    Returns
    -------
    int
        WASSERSTEIN_BYTES_PER_CELL bytes per cell of the (n_first + 1) x (n_second + 1)
        cost matrix; 0 when both diagrams are empty.

    Examples
    --------
    >>> wasserstein_bytes(999, 1999)
    96000000
    """
    if n_first == 0 and n_second == 0:
        return 0
    return WASSERSTEIN_BYTES_PER_CELL * (int(n_first) + 1) * (int(n_second) + 1)


def _ensure_wasserstein_fits(n_first: int, n_second: int, dim: int,
                             fewer_features: str = "") -> None:
    """Refuse one Wasserstein call that would not fit; ``fewer_features`` is the first
    remedy when the comparison could keep fewer features ("compare ..., ")."""
    ensure_fits(wasserstein_bytes(n_first, n_second),
                f"The Wasserstein distance between {n_first:,} and {n_second:,} finite pairs "
                f"of dimension {dim}", fewer_features + WASSERSTEIN_REMEDY)


def _finite_wasserstein(a: np.ndarray, b: np.ndarray, order: float, dim: int) -> float:
    from gudhi.wasserstein import wasserstein_distance

    if len(a) == 0 and len(b) == 0:
        return 0.0
    _ensure_wasserstein_fits(len(a), len(b), dim)
    return float(wasserstein_distance(a.reshape(-1, 2), b.reshape(-1, 2), order=order,
                                      internal_p=np.inf, keep_essential_parts=False))


def bottleneck(first: Diagram, second: Diagram, dims=(0,), *,
               essential: str = "separate") -> float:
    """Bottleneck distance between two diagrams over the dimensions ``dims``.

    Parameters
    ----------
    first, second : Diagram
        Diagrams of the same kind (see :func:`check_comparable`).
    dims : int or sequence of int
        Homological dimensions; the distance over several is the largest per-dimension one.
    essential : {"separate", "ignore"}
        "separate" (default) matches essential classes among themselves by sorted birth
        and returns inf when their numbers differ; "ignore" leaves them out.

    Returns
    -------
    float

    Notes
    -----
    The finite pairs go to ``gudhi.bottleneck_distance`` (L-infinity ground distance,
    a point may be matched to the diagonal at half its persistence).

    References
    ----------
    Cohen-Steiner, Edelsbrunner & Harer (2007), "Stability of persistence diagrams",
    Discrete Comput. Geom. 37.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> a = voxtopo.persistence(np.array([[0., 4.], [3., 1.]]))
    >>> round(bottleneck(a, a, dims=(0, 1)), 6)
    0.0
    """
    _check_essential(essential)
    check_comparable([first, second])
    worst = 0.0
    for dim in _check_dims(dims):
        fin_a, ess_a = _parts(first, dim)
        fin_b, ess_b = _parts(second, dim)
        worst = max(worst, _finite_bottleneck(fin_a, fin_b))
        if essential == "separate":
            if len(ess_a) != len(ess_b):
                return math.inf
            if len(ess_a):
                worst = max(worst, float(np.max(np.abs(ess_a - ess_b))))
    return worst


def wasserstein(first: Diagram, second: Diagram, dims=(0,), *, order: float = 1.0,
                essential: str = "separate") -> float:
    """q-Wasserstein distance between two diagrams over the dimensions ``dims``.

    Parameters
    ----------
    first, second : Diagram
    dims : int or sequence of int
        The distance over several dimensions is the q-norm of the per-dimension distances.
    order : float
        The exponent q >= 1.
    essential : {"separate", "ignore"}
        As in :func:`bottleneck`.

    Returns
    -------
    float

    Notes
    -----
    The finite pairs go to ``gudhi.wasserstein.wasserstein_distance`` (optimal transport
    through POT, L-infinity ground distance). Each call is estimated first
    (:func:`wasserstein_bytes`) and refused with a TooBigError when it would not fit.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> a = voxtopo.persistence(np.array([[0., 4.], [3., 1.]]))
    >>> wasserstein(a, a)
    0.0
    """
    _check_essential(essential)
    if not (np.isfinite(order) and order >= 1):
        raise InputError(f"The Wasserstein order must be a number >= 1, got {order}.")
    check_comparable([first, second])
    total = 0.0
    for dim in _check_dims(dims):
        fin_a, ess_a = _parts(first, dim)
        fin_b, ess_b = _parts(second, dim)
        total += _finite_wasserstein(fin_a, fin_b, order, dim) ** order
        if essential == "separate":
            if len(ess_a) != len(ess_b):
                return math.inf
            total += float(np.sum(np.abs(ess_a - ess_b) ** order))
    return total ** (1.0 / order)


def distance_matrix(diagrams, dims=(0,), *, metric: str = "bottleneck", order: float = 1.0,
                    essential: str = "separate") -> np.ndarray:
    """Symmetric (n, n) matrix of distances between every pair of ``diagrams``.

    Parameters
    ----------
    diagrams : iterable of Diagram
        Comparable diagrams (:func:`check_comparable`).
    dims : int or sequence of int
        Homology dimensions; their distances are combined as :func:`bottleneck` and
        :func:`wasserstein` combine them.
    metric : {"bottleneck", "wasserstein"}
        The distance.
    order : float
        The Wasserstein order q (ignored by the bottleneck distance).
    essential : {"separate", "ignore"}
        How classes that never die are compared (see :func:`bottleneck`).

    Returns
    -------
    ndarray, shape (n, n)
        Zero diagonal; ``inf`` where two diagrams have different numbers of essential
        classes and ``essential="separate"``.

    Raises
    ------
    InputError
        For an unknown metric, incomparable diagrams, or Wasserstein distances that would
        not fit in memory.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> ds = [voxtopo.persistence(np.array([[0., v], [3., 1.]])) for v in (2., 4.)]
    >>> distance_matrix(ds, dims=(0,)).shape
    (2, 2)
    """
    if metric not in METRICS:
        raise InputError(f"metric should be one of {list(METRICS)}, got {metric!r}.")
    diagrams = list(diagrams)
    check_comparable(diagrams)
    if metric == "wasserstein":
        _check_wasserstein_memory(diagrams, _check_dims(dims))
    n = len(diagrams)
    matrix = np.zeros((n, n))
    for i in range(n):
        for j in range(i + 1, n):
            if metric == "bottleneck":
                value = bottleneck(diagrams[i], diagrams[j], dims, essential=essential)
            else:
                value = wasserstein(diagrams[i], diagrams[j], dims, order=order,
                                    essential=essential)
            matrix[i, j] = matrix[j, i] = value
    return matrix


# --- persistence images --------------------------------------------------------------------
@dataclass(frozen=True)
class PersistenceImageGrid:
    """Where a persistence image lives: a birth axis, a persistence axis, a Gaussian.

    ``birth_edges`` and ``persistence_edges`` are pixel edges (resolution + 1 values);
    ``sigma`` is the standard deviation of the Gaussian placed on every pair, in the
    diagram's units; ``weight_ramp`` is the persistence at which the weight reaches 1.
    """

    birth_edges: np.ndarray
    persistence_edges: np.ndarray
    sigma: float
    weight_ramp: float

    def description(self) -> dict:
        return {"birth_range": [float(self.birth_edges[0]), float(self.birth_edges[-1])],
                "persistence_range": [float(self.persistence_edges[0]),
                                      float(self.persistence_edges[-1])],
                "pixels_persistence_by_birth": [len(self.persistence_edges) - 1,
                                                len(self.birth_edges) - 1],
                "spread_of_each_pair": f"Gaussian, standard deviation {self.sigma:.6g}",
                "weight": f"min(persistence / {self.weight_ramp:.6g}, 1)"}


def _birth_persistence(diagram: Diagram, dim: int) -> np.ndarray:
    """(n, 2) real birth values and persistences of the finite pairs of ``dim`` (a
    superlevel diagram keeps its own births here, unlike the mirrored :func:`_parts`)."""
    _check_dim(diagram, dim)
    intervals = diagram.intervals(dim)
    finite = intervals[np.isfinite(intervals[:, 1])]
    return np.column_stack([finite[:, 0], np.abs(finite[:, 1] - finite[:, 0])])


def image_grid(diagrams, dim: int, *, resolution: int = 20, sigma: float | None = None,
               ) -> PersistenceImageGrid:
    """A persistence image grid that covers the finite pairs of every diagram.

    The birth axis spans the smallest to the largest birth, the persistence axis 0 to the
    largest persistence, each widened by three sigma so that no Gaussian is cut short
    where the data are. The default ``sigma`` is one pixel of the undilated persistence
    axis (largest persistence / resolution); the weight ramp is the largest persistence.

    Parameters
    ----------
    diagrams : iterable of Diagram
        The diagrams whose images will share the grid.
    dim : int
        Homology dimension.
    resolution : int
        Pixels along each axis, 2 or more.
    sigma : float, optional
        Standard deviation of each pair's Gaussian, in the diagrams' units.

    Returns
    -------
    PersistenceImageGrid
        Pixel edges along birth and persistence, ``sigma`` and the weight ramp.
    """
    if not (isinstance(resolution, (int, np.integer)) and resolution >= 2):
        raise InputError(f"The persistence image resolution must be an integer >= 2, "
                         f"got {resolution}.")
    points = [_birth_persistence(d, dim) for d in diagrams]
    points = np.concatenate(points) if points else np.zeros((0, 2))
    if len(points) == 0:
        births, top = np.array([0.0, 1.0]), 1.0
    else:
        births, top = points[:, 0], float(points[:, 1].max())
    top = top if top > 0 else 1.0
    if sigma is None:
        sigma = top / resolution
    if not (np.isfinite(sigma) and sigma > 0):
        raise InputError(f"The persistence image sigma must be a positive number, got {sigma}.")
    lo, hi = float(births.min()) - 3 * sigma, float(births.max()) + 3 * sigma
    return PersistenceImageGrid(np.linspace(lo, hi, resolution + 1),
                                np.linspace(0.0, top + 3 * sigma, resolution + 1),
                                float(sigma), top)


def _image_kernel(points: np.ndarray, weights: np.ndarray, birth_edges: np.ndarray,
                  persistence_edges: np.ndarray, sigma: float) -> np.ndarray:
    """Sum over points of weight x (Gaussian integrated over each pixel), vectorised.

    The Gaussian factorises along the two axes, so each pixel integral is a product of
    two differences of the normal CDF at the pixel edges.
    """
    scale = sigma * math.sqrt(2.0)
    cdf_b = 0.5 * (1 + erf((birth_edges[None, :] - points[:, :1]) / scale))
    cdf_p = 0.5 * (1 + erf((persistence_edges[None, :] - points[:, 1:]) / scale))
    along_b = np.diff(cdf_b, axis=1)
    along_p = np.diff(cdf_p, axis=1)
    return (weights[:, None] * along_p).T @ along_b


def _image_kernel_reference(points, weights, birth_edges, persistence_edges, sigma):
    """Plain-loop twin of :func:`_image_kernel`, for tests on tiny inputs."""
    def cdf(x):
        return 0.5 * (1 + math.erf(x / (sigma * math.sqrt(2.0))))

    image = np.zeros((len(persistence_edges) - 1, len(birth_edges) - 1))
    for (b, p), w in zip(points, weights):
        for i in range(len(persistence_edges) - 1):
            mass_p = cdf(persistence_edges[i + 1] - p) - cdf(persistence_edges[i] - p)
            for j in range(len(birth_edges) - 1):
                mass_b = cdf(birth_edges[j + 1] - b) - cdf(birth_edges[j] - b)
                image[i, j] += w * mass_p * mass_b
    return image


def persistence_image(diagram: Diagram, dim: int, grid: PersistenceImageGrid) -> np.ndarray:
    """Persistence image of the finite pairs of dimension ``dim`` on ``grid``.

    Each pair becomes the point (birth, persistence) carrying the weight
    min(persistence / grid.weight_ramp, 1) and a Gaussian of standard deviation
    ``grid.sigma``; a pixel holds the weighted Gaussian mass that falls inside it.
    Essential classes are left out (their persistence is infinite).

    Parameters
    ----------
    diagram : Diagram
        The diagram.
    dim : int
        Homology dimension.
    grid : PersistenceImageGrid
        From :func:`image_grid`, shared by the images that are compared.

    Returns
    -------
    ndarray, shape (persistence pixels, birth pixels)
        Row 0 is the lowest persistence.

    References
    ----------
    Adams, Emerson, Kirby, Neville, Peterson, Shipman, Chepushtanova, Hanson, Motta &
    Ziegelmeier (2017), "Persistence images: a stable vector representation of
    persistent homology", JMLR 18.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> d = voxtopo.persistence(np.array([[0., 4., 1.], [3., 5., 2.]]))
    >>> grid = image_grid([d], 0, resolution=8)
    >>> persistence_image(d, 0, grid).shape
    (8, 8)
    """
    points = _birth_persistence(diagram, dim)
    weights = np.minimum(points[:, 1] / grid.weight_ramp, 1.0)
    return _image_kernel(points, weights, grid.birth_edges, grid.persistence_edges,
                         grid.sigma)


# --- Betti curves ----------------------------------------------------------------------
def common_levels(diagrams, n: int = 128) -> np.ndarray:
    """``n`` levels spanning every finite birth and death of all ``diagrams``."""
    values = np.concatenate([d.pairs[["birth", "death"]].to_numpy(np.float64).ravel()
                             for d in diagrams] or [np.zeros(0)])
    values = values[np.isfinite(values)]
    if len(values) == 0:
        return np.zeros(1)
    lo, hi = float(values.min()), float(values.max())
    levels = np.linspace(lo, hi, n) if hi > lo else np.array([lo])
    return levels[::-1].copy() if diagrams[0].superlevel else levels


def betti_curves(diagrams, names, n: int = 128) -> pd.DataFrame:
    """Betti curves of every diagram on one common grid of ``n`` levels.

    Parameters
    ----------
    diagrams : sequence of Diagram
        Comparable diagrams.
    names : sequence of str
        One name per diagram.
    n : int
        Number of levels, spread evenly from the lowest to the highest finite value of
        all diagrams.

    Returns
    -------
    DataFrame
        A long table: ``name, level, betti_0, betti_1, (betti_2)``; superlevel grids run
        from high to low, in the order the sweep sees them.
    """
    levels = common_levels(list(diagrams), n)
    frames = []
    for name, diagram in zip(names, diagrams):
        curve = diagram.betti_curve(levels)
        curve.insert(0, "name", name)
        frames.append(curve)
    return pd.concat(frames, ignore_index=True)


# --- embedding and test ------------------------------------------------------------------
def _check_matrix(matrix: np.ndarray) -> np.ndarray:
    matrix = np.asarray(matrix, dtype=np.float64)
    if matrix.ndim != 2 or matrix.shape[0] != matrix.shape[1]:
        raise InputError(f"A distance matrix must be square, got shape {matrix.shape}.")
    if not np.isfinite(matrix).all():
        raise InputError("The distance matrix has infinite entries (diagrams with different "
                         "numbers of essential classes); compare with essential='ignore' or "
                         "leave out the dimensions where the counts differ.")
    return matrix


def embed_mds(matrix, *, seed: int = 0) -> np.ndarray:
    """(n, 2) metric MDS embedding of a precomputed distance matrix (scikit-learn).

    Parameters
    ----------
    matrix : array_like, shape (n, n)
        Finite distances, n at least 3.
    seed : int
        Seed of the MDS start, so that the picture is the same every run.

    Returns
    -------
    ndarray, shape (n, 2)
        One point per diagram.

    Examples
    --------
    >>> import numpy as np
    >>> embed_mds(np.array([[0., 1., 2.], [1., 0., 1.], [2., 1., 0.]])).shape
    (3, 2)
    """
    from sklearn.manifold import MDS

    matrix = _check_matrix(matrix)
    if len(matrix) < 3:
        raise InputError(f"A 2D embedding needs at least 3 diagrams, got {len(matrix)}.")
    options = dict(n_components=2, random_state=seed)
    if "metric_mds" in inspect.signature(MDS).parameters:
        options.update(metric="precomputed", metric_mds=True, init="classical_mds")
    else:
        options.update(dissimilarity="precomputed", metric=True)
    return MDS(**options).fit_transform(matrix)


def distinct_groupings(group_sizes) -> int:
    """How many different ways there are to split the diagrams into groups of these sizes.

    The test statistic ignores the names of the groups, so relabellings that only swap
    two groups of equal size give the same grouping: with n diagrams in groups of sizes
    n_g, and m_k groups of size k, there are n! / (prod_g n_g! * prod_k m_k!).

    Parameters
    ----------
    group_sizes : iterable of int
        Members of each group, each 1 or more.

    Returns
    -------
    int
        The number of distinct groupings.

    Examples
    --------
    >>> distinct_groupings([3, 3]), distinct_groupings([2, 2, 2]), distinct_groupings([5, 1])
    (10, 15, 6)
    """
    sizes = [int(size) for size in group_sizes]
    if not sizes or min(sizes) < 1:
        raise InputError(f"Group sizes must be positive whole numbers, got {list(group_sizes)}.")
    count = math.factorial(sum(sizes))
    for size in sizes:
        count //= math.factorial(size)
    for groups_of_that_size in Counter(sizes).values():
        count //= math.factorial(groups_of_that_size)
    return count


@dataclass(frozen=True)
class PermutationResult:
    """Outcome of :func:`permutation_test`."""

    statistic: float
    p_value: float
    n_permutations: int
    seed: int
    distinct_groupings: int
    groups: dict = field(default_factory=dict)

    @property
    def smallest_p_value(self) -> float:
        """About the smallest p-value this test can give: no fewer than one in
        ``distinct_groupings`` relabellings is as extreme as the observed one (it is
        among them), and the Monte Carlo estimate cannot go below 1 / (1 + permutations)."""
        return max(1.0 / self.distinct_groupings, 1.0 / (1 + self.n_permutations))

    def resolution(self) -> str:
        """The limit of the test in words."""
        sizes = " and ".join(str(n) for n in self.groups.values())
        return (f"group sizes {sizes} allow {self.distinct_groupings:,} distinct groupings "
                f"and {self.n_permutations:,} permutations were drawn, so no p-value below "
                f"about {self.smallest_p_value:.3g} can occur")

    def description(self) -> dict:
        return {"statistic": "mean between-group distance minus mean within-group distance",
                "observed": self.statistic, "p_value": self.p_value,
                "permutations": self.n_permutations, "seed": self.seed,
                "p_value_formula": "(1 + #{permuted >= observed}) / (1 + permutations)",
                "group_sizes": self.groups,
                "distinct_groupings": self.distinct_groupings,
                "smallest_p_value_reachable": self.smallest_p_value,
                "resolution": self.resolution()}


def _between_minus_within(matrix: np.ndarray, codes: np.ndarray) -> float:
    upper = np.triu_indices(len(codes), k=1)
    same = (codes[:, None] == codes[None, :])[upper]
    values = matrix[upper]
    return float(values[~same].mean() - values[same].mean())


def permutation_test(matrix, groups, *, n_permutations: int = 999,
                     seed: int = 0) -> PermutationResult:
    """Do the groups differ more than random relabellings would?

    The statistic is the mean distance between members of different groups minus the mean
    distance between members of the same group; the group labels are shuffled
    ``n_permutations`` times with a seeded generator and the p-value is
    (1 + number of shuffles with a statistic >= the observed one) / (1 + n_permutations),
    which never reports an impossible p = 0. With few diagrams the test is coarse: only
    :func:`distinct_groupings` different groupings exist, so p cannot fall much below one
    over their number (the result's ``smallest_p_value``).

    Parameters
    ----------
    matrix : array_like, shape (n, n)
        Finite distances between the diagrams.
    groups : sequence of str
        One group label per diagram; at least two groups, one with two or more members.
    n_permutations : int
        Shuffles of the labels.
    seed : int
        Seed of the shuffles.

    Returns
    -------
    PermutationResult
        The statistic, the p-value, the permutations and seed, the number of distinct
        groupings, the group sizes and (as ``smallest_p_value``) about the smallest
        p-value the test can reach.

    References
    ----------
    Besag & Clifford (1989), "Generalized Monte Carlo significance tests", Biometrika 76.

    Examples
    --------
    >>> import numpy as np
    >>> m = np.array([[0, 1, 9, 9], [1, 0, 9, 9], [9, 9, 0, 1], [9, 9, 1, 0.]])
    >>> permutation_test(m, ["a", "a", "b", "b"], n_permutations=99).statistic
    8.0
    """
    matrix = _check_matrix(matrix)
    groups = list(groups)
    if len(groups) != len(matrix):
        raise InputError(f"There are {len(groups)} group labels for {len(matrix)} diagrams; "
                         f"give one label per diagram.")
    labels, codes = np.unique(np.asarray(groups, dtype=str), return_inverse=True)
    counts = np.bincount(codes)
    if len(labels) < 2 or counts.max() < 2:
        raise InputError(f"A permutation test needs at least two groups and one group with "
                         f"two or more members, got group sizes "
                         f"{dict(zip(labels.tolist(), counts.tolist()))}.")
    if not (isinstance(n_permutations, (int, np.integer)) and n_permutations >= 1):
        raise InputError(f"The number of permutations must be a positive integer, "
                         f"got {n_permutations}.")
    observed = _between_minus_within(matrix, codes)
    rng = np.random.default_rng(seed)
    exceed = sum(_between_minus_within(matrix, rng.permutation(codes)) >= observed - 1e-12
                 for _ in range(n_permutations))
    return PermutationResult(observed, (1 + exceed) / (1 + n_permutations),
                             int(n_permutations), int(seed), distinct_groupings(counts),
                             dict(zip(labels.tolist(), counts.tolist())))


# --- one comparison of many diagrams ---------------------------------------------------
@dataclass
class Comparison:
    """Everything :func:`compare_diagrams` computes, ready to be written or plotted."""

    names: list
    groups: list
    dims: tuple
    metric: str
    order: float
    essential: str
    features: str           # which pairs were compared, in words
    min_persistence: float
    unit: str               # of births, deaths and persistences
    pairs_compared: list    # per diagram: {dim: number of pairs compared}
    matrices: dict          # (metric, dim or "all") -> (n, n) array, chosen metric only
    images: dict            # dim -> (n, rows, cols) array
    grids: dict             # dim -> PersistenceImageGrid
    curves: pd.DataFrame
    embedding: np.ndarray | None
    test: PermutationResult | None
    notes: list = field(default_factory=list)

    @property
    def matrix(self) -> np.ndarray:
        """The distance matrix used for the embedding and the test."""
        return self.matrices[(self.metric, "all")]

    @property
    def distance(self) -> str:
        """The distance in words: "bottleneck" or "Wasserstein, order q"."""
        return "bottleneck" if self.metric == "bottleneck" else \
            f"Wasserstein, order {self.order:g}"

    def distance_table(self) -> pd.DataFrame:
        """One row per pair of diagrams, one column per dimension (and all together)."""
        rows = []
        n = len(self.names)
        for i in range(n):
            for j in range(i + 1, n):
                row = {"first": self.names[i], "second": self.names[j],
                       "first_group": self.groups[i], "second_group": self.groups[j]}
                for (metric, dim), m in self.matrices.items():
                    suffix = "all" if dim == "all" else f"dim{dim}"
                    row[f"{metric}_{suffix}"] = m[i, j]
                rows.append(row)
        return pd.DataFrame(rows)

    def settings(self) -> dict:
        """The settings of the comparison in plain words (keys of summary.json)."""
        return {
            "features_compared": self.features,
            "min_persistence": self.min_persistence,
            "dimensions_compared": list(self.dims),
            "distance": self.distance,
            "other_distance": "not computed: only the chosen distance is (run again with "
                              "the other --metric for it)",
            "classes_that_never_die": ("matched among themselves by sorted birth; a "
                                       "different number of them gives an infinite distance")
            if self.essential == "separate" else "left out of the distances",
            "over_several_dimensions": "the largest distance of any one dimension"
            if self.metric == "bottleneck" else
            f"the {self.order:g}-norm of the distances of each dimension",
            "unit_of_values": self.unit,
        }

    def summary(self) -> dict:
        return {
            "diagrams": [{"name": n, "group": g, "pairs_compared": {str(d): c for d, c in
                                                                     pairs.items()}}
                         for n, g, pairs in zip(self.names, self.groups, self.pairs_compared)],
            **self.settings(),
            "persistence_images": {str(d): g.description() for d, g in self.grids.items()},
            "permutation_test": self.test.description() if self.test else None,
            "notes": list(self.notes),
        }

    def save(self, folder) -> None:
        """Write distances.csv, distance_matrix.csv, betti_curves.csv,
        persistence_images.npz, embedding.csv and summary.json into ``folder``.

        Parameters
        ----------
        folder : str or Path
            An existing folder (the temporary folder of a comparison being written).
        """
        folder = Path(folder)
        self.distance_table().to_csv(folder / "distances.csv", index=False,
                                     float_format="%.10g")
        pd.DataFrame(self.matrix, index=self.names, columns=self.names).to_csv(
            folder / "distance_matrix.csv", float_format="%.10g")
        self.curves.to_csv(folder / "betti_curves.csv", index=False, float_format="%.10g")
        arrays = {f"dim{d}": img for d, img in self.images.items()}
        arrays["names"] = np.asarray(self.names, dtype=str)
        np.savez(folder / "persistence_images.npz", **arrays)
        if self.embedding is not None:
            pd.DataFrame({"name": self.names, "group": self.groups,
                          "mds_1": self.embedding[:, 0], "mds_2": self.embedding[:, 1]}
                         ).to_csv(folder / "embedding.csv", index=False, float_format="%.10g")
        write_summary(folder, self.summary())


def _combined(per_dimension: list, metric: str, order: float) -> np.ndarray:
    """Distances over several dimensions from those of each (a matching never mixes
    dimensions): the largest for bottleneck, the q-norm for Wasserstein."""
    stacked = np.stack(per_dimension)
    if metric == "bottleneck":
        return stacked.max(axis=0)
    return np.sum(stacked ** order, axis=0) ** (1.0 / order)


def _check_wasserstein_memory(diagrams, dims, fewer_features: str = "") -> None:
    """Refuse before the first call when the two largest diagrams of a dimension would
    not fit (every other pair of diagrams needs less)."""
    for dim in dims:
        largest = sorted(len(_parts(d, dim)[0]) for d in diagrams)[-2:]
        _ensure_wasserstein_fits(largest[0], largest[1], dim, fewer_features)


def compare_diagrams(diagrams, names=None, groups=None, *, dims=(0, 1),
                     metric: str = "bottleneck", order: float = 1.0,
                     essential: str = "separate", all_pairs: bool = False,
                     min_persistence: float = 0.0, resolution: int = 20,
                     sigma: float | None = None, levels: int = 128,
                     n_permutations: int = 999, seed: int = 0) -> Comparison:
    """Distances, vectorisations, embedding and group test for a set of diagrams.

    Parameters
    ----------
    diagrams : sequence of Diagram
    names, groups : sequences of str, optional
        One per diagram; without groups there is no permutation test.
    dims : sequence of int
        Homological dimensions to compare.
    metric : {"bottleneck", "wasserstein"}
        The distance computed; it feeds the embedding and the test. The other one is not
        computed (a Wasserstein run would need memory in the product of the numbers of
        pairs even when the bottleneck distance was asked for).
    order, essential : see :func:`wasserstein` and :func:`bottleneck`.
    all_pairs : bool
        False (default): the significant (or robust) features of each diagram and every
        class that never dies (see :func:`select_features`); True: every pair.
    min_persistence : float
        Leave out finite pairs that live no longer than this (values' unit).
    resolution, sigma : persistence image grid (see :func:`image_grid`).
    levels : int
        Number of levels of the common Betti-curve grid.
    n_permutations, seed : see :func:`permutation_test`.

    Raises
    ------
    InputError
        Diagrams that cannot be compared (2D against 3D, other sweeps or values), before
        anything is computed.
    TooBigError
        A Wasserstein distance whose estimated memory exceeds the budget, before any is
        computed.

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> rng = np.random.default_rng(1)
    >>> ds = [voxtopo.persistence(rng.random((12, 12))) for _ in range(4)]
    >>> c = compare_diagrams(ds, groups=["a", "a", "b", "b"], n_permutations=19)
    >>> c.matrix.shape, 0 < c.test.p_value <= 1, c.features
    ((4, 4), True, 'all pairs (no result carries significance or robustness flags)')
    """
    diagrams = list(diagrams)
    if len(diagrams) < 2:
        raise InputError(f"A comparison needs at least two diagrams, got {len(diagrams)}.")
    names = [str(n) for n in (names or [d.source or f"diagram {i}"
                                        for i, d in enumerate(diagrams)])]
    if len(names) != len(diagrams):
        raise InputError(f"There are {len(names)} names for {len(diagrams)} diagrams.")
    if groups is not None and len(groups) != len(diagrams):
        raise InputError(f"There are {len(groups)} group labels for {len(diagrams)} "
                         f"diagrams; give one label per diagram.")
    if metric not in METRICS:
        raise InputError(f"metric should be one of {list(METRICS)}, got {metric!r}.")
    _check_essential(essential)
    dims = _check_dims(dims)
    check_comparable(diagrams)
    for d in diagrams:
        for dim in dims:
            _check_dim(d, dim)
    min_persistence = _check_min_persistence(min_persistence)
    features, notes = _features_compared(diagrams, names, all_pairs, min_persistence)
    if all_pairs:
        fewer_features = "compare the significant (or robust) features only (leave out " \
                         "--all-pairs), "
    elif any(_flag_of(d) is None for d in diagrams):
        fewer_features = "analyse the scans again so that their significant features are " \
                         "flagged and only those are compared, "
    else:
        fewer_features = ""
    diagrams = [select_features(d, all_pairs=all_pairs, min_persistence=min_persistence)
                for d in diagrams]
    if metric == "wasserstein":
        _check_wasserstein_memory(diagrams, dims, fewer_features)
    matrices = {(metric, dim): distance_matrix(diagrams, (dim,), metric=metric, order=order,
                                               essential=essential) for dim in dims}
    matrices[(metric, "all")] = _combined([matrices[(metric, dim)] for dim in dims],
                                          metric, order)
    grids = {dim: image_grid(diagrams, dim, resolution=resolution, sigma=sigma)
             for dim in dims}
    images = {dim: np.stack([persistence_image(d, dim, grids[dim]) for d in diagrams])
              for dim in dims}
    curves = betti_curves(diagrams, names, levels)
    chosen = matrices[(metric, "all")]
    embedding = test = None
    if not np.isfinite(chosen).all():
        notes.append("some distances are infinite (different numbers of classes that never "
                     "die): no embedding and no permutation test; use essential='ignore'")
    else:
        if len(diagrams) >= 3:
            embedding = embed_mds(chosen, seed=seed)
        else:
            notes.append("fewer than three diagrams: no 2D embedding")
        if groups is not None:
            labels, counts = np.unique(np.asarray(groups, dtype=str), return_counts=True)
            if len(labels) >= 2 and counts.max() >= 2:
                test = permutation_test(chosen, groups, n_permutations=n_permutations,
                                        seed=seed)
            else:
                notes.append("the groups are too small for a permutation test (it needs two "
                             "groups and one with two or more members)")
    return Comparison(names, [str(g) for g in groups] if groups is not None
                      else [""] * len(diagrams), dims, metric, float(order), essential,
                      features, min_persistence, diagrams[0].value_unit,
                      [{dim: int((d.pairs["dim"] == dim).sum()) for dim in dims}
                       for d in diagrams], matrices, images, grids, curves, embedding, test,
                      notes)


# --- reading result folders -------------------------------------------------------------
def _load_result(folder: Path) -> Diagram:
    """The diagram of one result folder with its flag column and, in ``extra``, the
    summary.json section that says how the flag was computed."""
    diagram = Diagram.load(folder)
    header = pd.read_csv(folder / "pairs.csv", nrows=0).columns
    flag = next((c for c in FLAG_COLUMNS if c in header), None)
    if flag is None:
        return diagram
    pairs = diagram.pairs
    if flag not in pairs.columns:   # Diagram.load keeps only the columns it knows
        pairs = pairs.assign(**{flag: pd.read_csv(folder / "pairs.csv", usecols=[flag])[flag]
                                .astype(bool).to_numpy()})
    section = read_summary(folder).get(VERDICT_SECTIONS[flag]) or {}
    return replace(diagram, pairs=pairs,
                   extra={**diagram.extra, VERDICT_SECTIONS[flag]: section})


def load_results(paths, group_column: str | None = None):
    """Diagrams, names and groups from result folders and batch folders.

    A result folder (pairs.csv + summary.json) gives one diagram named after the folder and
    grouped by the name of the folder that holds it (``results/treated/s1`` is in group
    "treated"). A batch folder (summary.csv + scans/) gives every complete scan in it,
    named and grouped by its summary.csv (``name`` and ``group_column`` columns, "group"
    when not given; a ``group_column`` without a batch folder is refused, as it would
    change nothing). The ``significant`` or ``robust`` column of pairs.csv, when there,
    comes along, so that :func:`compare_diagrams` can keep the features it flags.

    Parameters
    ----------
    paths : iterable of str or Path
        Result folders and batch folders.
    group_column : str, optional
        The column of the batch folders' summary.csv that groups their scans.

    Returns
    -------
    diagrams : list of Diagram
    names : list of str
    groups : list of str
        In the order of ``paths`` (a batch folder's scans in its summary's order).

    Raises
    ------
    InputError
        For a path that is not a folder, a folder voxtopo did not write, or a
        ``group_column`` without a batch folder or missing from its summary.csv.
    """
    paths = [Path(path) for path in paths]
    for path in paths:
        if not path.is_dir():
            raise InputError(f"{path} is not a folder; give result folders written by "
                             f"voxtopo analyse or a batch folder written by voxtopo batch.")
    batches = [(path / "summary.csv").is_file() and (path / "scans").is_dir()
               for path in paths]
    if group_column is not None and not any(batches):
        raise InputError(f"--group-column {group_column} names a column of a batch folder's "
                         f"summary.csv, but none of the folders given is a batch folder; "
                         f"leave it out (result folders are grouped by the folder holding "
                         f"them).")
    group_column = group_column or "group"
    diagrams, names, groups = [], [], []
    for path, is_batch in zip(paths, batches):
        if is_batch:
            table = pd.read_csv(path / "summary.csv", dtype=str, keep_default_na=False)
            if group_column not in table.columns and group_column != "group":
                raise InputError(f"{path / 'summary.csv'} has no column {group_column!r}; "
                                 f"its columns are {list(table.columns)}.")
            for _, row in table.iterrows():
                folder = path / "scans" / row["name"]
                if (folder / "pairs.csv").is_file():
                    diagrams.append(_load_result(folder))
                    names.append(row["name"])
                    groups.append(row.get(group_column, ""))
        else:
            diagrams.append(_load_result(path))
            names.append(path.name)
            groups.append(path.resolve().parent.name)
    return diagrams, names, groups
