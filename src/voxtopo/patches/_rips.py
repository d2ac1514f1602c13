"""Rips (or witness) persistence of the landmarks of a patch cloud, with gudhi."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import gudhi
import numpy as np
import pandas as pd
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import dijkstra
from scipy.spatial.distance import pdist, squareform

from ..errors import InputError
from ..memory import ensure_fits
from ._landmarks import maxmin
from ._sample import Patches

METHODS = ("rips", "witness")

#: Bytes per simplex held by gudhi's simplex tree and persistence matrix (generous: the
#: estimate decides whether a run is refused before it can exhaust memory).
BYTES_PER_SIMPLEX = 400

#: Edge-collapse rounds at most; each round only removes edges, so the loop ends early
#: as soon as one round removes none.
COLLAPSE_ROUNDS = 10

#: A default max_edge is lowered (by SCALE_STEP at a time) until the collapsed Rips
#: complex has at most this many simplices: a few seconds of gudhi on this kind of machine.
SIMPLEX_BUDGET = 2_000_000
SCALE_STEP = 0.95

PAIR_COLUMNS = ["dim", "birth", "death", "persistence", "field"]

#: Said in every summary of patch persistence.
RESEARCH_CAUTION = ("Results support research on image texture; they are not a medical "
                    "diagnosis nor a certification of a part, material or structure; "
                    "defer to local codes and licensed practice for such decisions.")


@dataclass(frozen=True)
class PatchPersistence:
    """Persistence of a landmark complex of a point cloud.

    Attributes
    ----------
    pairs : DataFrame
        ``dim, birth, death, persistence, field``: one row per bar, scales in the cloud's
        Euclidean distance (Rips: edge length; witness: the relaxation, square root of
        gudhi's filtration value). A bar still alive at ``max_edge`` has ``death = inf``
        and infinite persistence: it may die at a larger scale.
    landmarks : ndarray of int
        Indices of the landmarks in the cloud.
    landmark_points : ndarray
        Their coordinates.
    covering_radius : float
        Every cloud point lies within this distance of a landmark.
    max_edge : float
        Largest scale of the complex.
    max_edge_rule : str
        How ``max_edge`` was chosen.
    middle_scale : float
        ``max_edge / 2``: the scale at which ``betti`` is read.
    betti : dict
        Field -> [b0, b1, ..] at ``middle_scale``.
    loop : ndarray of int
        Positions in ``landmarks`` along a cycle of the longest dimension-1 bar (first
        field), closed (first == last); empty when there is no such bar.
    """

    pairs: pd.DataFrame
    landmarks: np.ndarray
    landmark_points: np.ndarray
    covering_radius: float
    max_edge: float
    max_edge_rule: str
    method: str
    fields: tuple[int, ...]
    max_dimension: int
    middle_scale: float
    betti: dict
    loop: np.ndarray
    simplices: int
    seconds: float
    cautions: tuple[str, ...] = field(default_factory=tuple)

    def bars(self, dim: int, field: int | None = None) -> pd.DataFrame:
        """Bars of one dimension (and field; the first when not given), longest first,
        with their persistence counted up to ``max_edge`` in ``persistence_to_max_edge``.

        Parameters
        ----------
        dim : int
            Homology dimension.
        field : int, optional
            Coefficient field Z/field, one of ``fields``.

        Returns
        -------
        DataFrame
            The pairs' rows with ``persistence_to_max_edge`` added.
        """
        field = self.fields[0] if field is None else field
        rows = self.pairs[(self.pairs["dim"] == dim) & (self.pairs["field"] == field)].copy()
        rows["persistence_to_max_edge"] = (np.minimum(rows["death"], self.max_edge)
                                           - rows["birth"])
        return rows.sort_values("persistence_to_max_edge", ascending=False,
                                kind="stable").reset_index(drop=True)

    def margin(self, field: int | None = None) -> dict:
        """How far the longest dimension-1 bar beats the second (persistence up to
        ``max_edge``): their difference and ratio.

        Parameters
        ----------
        field : int, optional
            Coefficient field Z/field; the first of ``fields`` when not given.

        Returns
        -------
        dict
            ``longest``, ``second``, ``difference`` and ``ratio`` (inf without a second
            bar).
        """
        lengths = self.bars(1, field)["persistence_to_max_edge"].to_numpy()
        first = float(lengths[0]) if len(lengths) else 0.0
        second = float(lengths[1]) if len(lengths) > 1 else 0.0
        return {"longest": first, "second": second, "difference": first - second,
                "ratio": first / second if second > 0 else float("inf")}

    def summary(self, n_longest: int = 5) -> dict:
        """Parameters, counts, Betti numbers at the middle scale, longest bars, margins
        and cautions, as JSON values."""
        per_field = {}
        for f in self.fields:
            rows = self.pairs[self.pairs["field"] == f]
            longest = {}
            for d in range(self.max_dimension + 1):
                top = self.bars(d, f).head(n_longest)
                longest[str(d)] = [
                    {"birth": float(b), "death": _json_float(e), "persistence_to_max_edge": float(p)}
                    for b, e, p in zip(top["birth"], top["death"], top["persistence_to_max_edge"])]
            per_field[str(f)] = {
                "counts": {str(d): int((rows["dim"] == d).sum())
                           for d in range(self.max_dimension + 1)},
                "betti_at_middle_scale": self.betti[f],
                "longest_bars": longest,
                "dim1_margin": {k: _json_float(v) for k, v in self.margin(f).items()},
            }
        return {"method": self.method, "landmarks": len(self.landmarks),
                "covering_radius": self.covering_radius, "max_edge": self.max_edge,
                "max_edge_rule": self.max_edge_rule, "middle_scale": self.middle_scale,
                "max_dimension": self.max_dimension, "fields": list(self.fields),
                "simplices": self.simplices, "seconds": round(self.seconds, 3),
                "by_field": per_field, "cautions": list(self.cautions)}


def _json_float(value):
    value = float(value)
    return value if np.isfinite(value) else ("inf" if value > 0 else "-inf")


def persistence(cloud, landmarks: int | None = 150, max_dimension: int = 2, field=2,
                max_edge: float | None = None, method: str = "rips",
                seed: int = 0) -> PatchPersistence:
    """Persistent homology of a landmark complex of a point cloud.

    Parameters
    ----------
    cloud : Patches or ndarray, shape (n, d)
        The cloud (usually the dense core from :func:`core`).
    landmarks : int or None
        Number of max-min landmarks; None (or at least n) uses every point.
    max_dimension : int
        Highest homology dimension, 0 to 2 (the complex gets simplices one dimension
        higher so that the top classes can die).
    field : int or tuple of int
        Prime p of the coefficients Z/p; a tuple such as (2, 3) computes each.
    max_edge : float, optional
        Largest scale. By default the median distance between two landmarks: half of all
        landmark pairs are joined by the end, by which point a cloud on a sphere has mostly
        been filled in, and the complex stays small enough for a few hundred landmarks.
    method : {"rips", "witness"}
        Vietoris-Rips complex of the landmarks, or the strong witness complex with every
        cloud point as a witness (for clouds too large for Rips on all points).
    seed : int
        Seed of the first max-min landmark.

    Returns
    -------
    PatchPersistence

    Notes
    -----
    Rips: the landmarks' neighbourhood graph at ``max_edge`` is reduced by edge collapses
    (which keep the persistence) before it is expanded to a flag complex, and the size of
    the expansion is bounded from the reduced graph's degrees and refused when it would
    not fit in memory. The Betti numbers are read at ``max_edge / 2``. The loop cycle is
    the shortest path between the two ends of the longest loop's birth edge through
    strictly shorter landmark edges, closed by that edge: a cycle born with that loop
    (for a circle it runs once around), not necessarily its shortest representative.

    References
    ----------
    de Silva & Carlsson (2004), "Topological estimation using witness complexes",
    Eurographics Symposium on Point-Based Graphics (max-min landmarks, witness complexes).
    Carlsson, Ishkhanov, de Silva & Zomorodian (2008), International Journal of Computer
    Vision 76.

    Examples
    --------
    >>> import numpy as np
    >>> angle = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    >>> circle = np.column_stack([np.cos(angle), np.sin(angle)])
    >>> result = persistence(circle, landmarks=60, max_dimension=1)
    >>> result.betti[2]
    [1, 1]
    """
    points = cloud.coordinates if isinstance(cloud, Patches) else np.asarray(cloud)
    if points.ndim != 2 or len(points) < 2 or not np.issubdtype(points.dtype, np.number):
        raise InputError(f"persistence needs an (n, d) cloud of at least 2 points, got an "
                         f"array of shape {points.shape}.")
    if not np.isfinite(points).all():
        raise InputError("The cloud has NaN or infinite coordinates; drop those points first.")
    points = points.astype(np.float64, copy=False)
    fields = _check_fields(field)
    if max_dimension not in (0, 1, 2) or isinstance(max_dimension, bool):
        raise InputError(f"max_dimension must be 0, 1 or 2, got {max_dimension!r}.")
    if method not in METHODS:
        raise InputError(f"method must be 'rips' or 'witness', got {method!r}.")
    n_landmarks = _check_landmarks(landmarks, len(points))
    if max_edge is not None and not (isinstance(max_edge, (int, float, np.floating))
                                     and np.isfinite(max_edge) and max_edge > 0):
        raise InputError(f"max_edge must be a positive number, got {max_edge!r}.")
    started = time.perf_counter()
    ensure_fits(n_landmarks * n_landmarks * 8 * 3, f"Distances between {n_landmarks} landmarks",
                "choose fewer landmarks")
    if n_landmarks < len(points):
        chosen, covering = maxmin(points, n_landmarks, seed)
    else:
        chosen, covering = np.arange(len(points)), 0.0
    landmark_points = points[chosen]
    distances = squareform(pdist(landmark_points))
    if max_edge is None and method == "rips":
        max_edge = float(np.median(pdist(landmark_points)))
        rule = "median distance between two landmarks"
    elif max_edge is None:
        max_edge = 2.0 * covering if covering > 0 else float(np.median(pdist(landmark_points)))
        rule = "twice the covering radius of the landmarks"
    else:
        max_edge = float(max_edge)
        rule = "given"
    if method == "rips":
        tree, max_edge, lowered = _rips_tree(landmark_points, max_edge, max_dimension,
                                             lower_to_budget=(rule != "given"))
        if lowered:
            rule = (f"median distance between two landmarks, lowered in steps of "
                    f"{1 - SCALE_STEP:.0%} until the collapsed Rips complex has at most "
                    f"{SIMPLEX_BUDGET:.0e} simplices")
    else:
        tree, max_edge, lowered = _witness_tree(points, landmark_points, max_edge,
                                                max_dimension, lower_to_budget=(rule != "given"))
        if lowered:
            rule += (f", lowered in steps of {1 - SCALE_STEP:.0%} until the witnesses insert "
                     f"at most {SIMPLEX_BUDGET:.0e} simplices")
    tables, birth_edges = [], None
    for f in fields:
        table, edges = _pairs(tree, f, max_dimension, squared=(method == "witness"))
        tables.append(table)
        if birth_edges is None:
            birth_edges = edges
    pairs = pd.concat(tables, ignore_index=True)
    middle = max_edge / 2.0
    betti = {f: _betti(pairs[pairs["field"] == f], middle, max_dimension) for f in fields}
    loop = _loop_cycle(pairs, birth_edges, distances, fields[0], max_edge)
    result = PatchPersistence(
        pairs=pairs, landmarks=chosen, landmark_points=landmark_points,
        covering_radius=covering, max_edge=max_edge, max_edge_rule=rule, method=method,
        fields=fields, max_dimension=max_dimension, middle_scale=middle, betti=betti,
        loop=loop, simplices=int(tree.num_simplices()),
        seconds=time.perf_counter() - started)
    return _with_cautions(result)


def _check_fields(field) -> tuple[int, ...]:
    values = field if isinstance(field, (list, tuple)) else (field,)
    out = []
    for p in values:
        if isinstance(p, bool) or not isinstance(p, (int, np.integer)) or p < 2 \
                or any(p % q == 0 for q in range(2, int(p ** 0.5) + 1)) or p > 46337:
            raise InputError(f"field must be a prime such as 2 or 3 (or a tuple of primes), "
                             f"got {p!r}.")
        out.append(int(p))
    if not out or len(set(out)) != len(out):
        raise InputError(f"field must name each prime once, got {field!r}.")
    return tuple(out)


def _check_landmarks(landmarks, n: int) -> int:
    if landmarks is None:
        return n
    if isinstance(landmarks, bool) or not isinstance(landmarks, (int, np.integer)) \
            or landmarks < 2:
        raise InputError(f"landmarks must be a whole number of at least 2 (or None for every "
                         f"point), got {landmarks!r}.")
    return min(int(landmarks), n)


def _collapsed_graph(landmark_points, max_edge, max_dimension):
    """The landmarks' Rips graph reduced by edge collapses, and a bound on the number of
    simplices of its flag complex up to dimension ``max_dimension + 1``."""
    tree = gudhi.RipsComplex(points=landmark_points,
                             max_edge_length=max_edge).create_simplex_tree(max_dimension=1)
    edges = tree.num_simplices()
    for _ in range(COLLAPSE_ROUNDS):
        tree.collapse_edges()
        if tree.num_simplices() == edges:
            break
        edges = tree.num_simplices()
    degrees = np.zeros(len(landmark_points), dtype=np.float64)
    for simplex, _ in tree.get_skeleton(1):
        if len(simplex) == 2:
            degrees[simplex] += 1
    # every (j+1)-clique is counted at each of its vertices among that vertex's neighbours
    bound = len(degrees) + degrees.sum() / 2
    for j in range(2, max_dimension + 2):
        bound += float(_choose(degrees, j).sum() / (j + 1))
    return tree, bound


def _rips_tree(landmark_points, max_edge, max_dimension, lower_to_budget):
    """Collapsed and expanded Rips complex; with ``lower_to_budget`` the scale steps down
    from ``max_edge`` until the complex is bounded by ``SIMPLEX_BUDGET`` simplices."""
    tree, bound = _collapsed_graph(landmark_points, max_edge, max_dimension)
    start = max_edge
    while lower_to_budget and bound > SIMPLEX_BUDGET:
        max_edge *= SCALE_STEP
        tree, bound = _collapsed_graph(landmark_points, max_edge, max_dimension)
    ensure_fits(int(bound * BYTES_PER_SIMPLEX),
                f"The Rips complex of {len(landmark_points)} landmarks up to edge length "
                f"{max_edge:.3g} (at most {bound:.3g} simplices)",
                "choose fewer landmarks, a smaller max_edge or max_dimension, or the "
                "witness method")
    tree.expansion(max_dimension + 1)
    return tree, max_edge, max_edge < start


def _choose(n: np.ndarray, j: int) -> np.ndarray:
    out = np.ones_like(n)
    for i in range(j):
        out = out * np.maximum(n - i, 0) / (i + 1)
    return out


def _witness_insertions(points, landmark_points, alpha, max_dimension) -> float:
    """How many simplices the strong witness complex would insert: each witness brings
    every set of up to ``max_dimension + 2`` landmarks within its relaxed radius
    (squared distance at most the nearest one's plus ``alpha ** 2``)."""
    squared = np.empty((len(points), len(landmark_points)))
    for start in range(0, len(points), 4096):
        block = points[start:start + 4096]
        squared[start:start + len(block)] = ((block[:, None, :] - landmark_points[None])
                                             ** 2).sum(axis=2)
    reach = (squared <= squared.min(axis=1, keepdims=True) + alpha ** 2).sum(axis=1)
    reach = reach.astype(np.float64)
    return float(sum(_choose(reach, j).sum() for j in range(1, max_dimension + 3)))


def _witness_tree(points, landmark_points, max_edge, max_dimension, lower_to_budget):
    """Strong witness complex with every cloud point as a witness; with
    ``lower_to_budget`` the relaxation steps down until the witnesses would insert at most
    ``SIMPLEX_BUDGET`` simplices."""
    ensure_fits(len(points) * len(landmark_points) * 24,
                f"Nearest-landmark tables of {len(points)} witnesses and "
                f"{len(landmark_points)} landmarks", "use a smaller core or fewer landmarks")
    start = max_edge
    insertions = _witness_insertions(points, landmark_points, max_edge, max_dimension)
    while lower_to_budget and insertions > SIMPLEX_BUDGET:
        max_edge *= SCALE_STEP
        insertions = _witness_insertions(points, landmark_points, max_edge, max_dimension)
    ensure_fits(int(insertions * BYTES_PER_SIMPLEX),
                f"The witness complex of {len(landmark_points)} landmarks up to relaxation "
                f"{max_edge:.3g} (up to {insertions:.3g} simplices)",
                "choose fewer landmarks, a smaller max_edge or max_dimension")
    complex_ = gudhi.EuclideanStrongWitnessComplex(witnesses=points, landmarks=landmark_points)
    tree = complex_.create_simplex_tree(max_alpha_square=max_edge ** 2,
                                        limit_dimension=max_dimension + 1)
    return tree, max_edge, max_edge < start


def _pairs(tree, field, max_dimension, squared):
    """The bars of one field as a table, and the birth edge of each dimension-1 row."""
    # the collapsed complex may top out below max_dimension + 1, so ask for every dimension
    tree.compute_persistence(homology_coeff_field=field, persistence_dim_max=True)
    rows, edges = [], []
    for birth_simplex, death_simplex in tree.persistence_pairs():
        dim = len(birth_simplex) - 1
        if dim > max_dimension:
            continue
        birth = tree.filtration(birth_simplex)
        death = tree.filtration(death_simplex) if len(death_simplex) else np.inf
        if squared:
            birth, death = np.sqrt(max(birth, 0.0)), np.sqrt(max(death, 0.0))
        if death <= birth:
            continue
        rows.append((dim, birth, death))
        edges.append(tuple(birth_simplex) if dim == 1 else ())
    table = pd.DataFrame(rows, columns=["dim", "birth", "death"])
    table["dim"] = table["dim"].astype(np.int64)
    table["birth"] = table["birth"].astype(np.float64)
    table["death"] = table["death"].astype(np.float64)
    table["persistence"] = table["death"] - table["birth"]
    table["field"] = np.int64(field)
    order = np.lexsort((table["birth"].to_numpy(), -table["persistence"].to_numpy(),
                        table["dim"].to_numpy()))
    return table.iloc[order].reset_index(drop=True)[PAIR_COLUMNS], \
        [edges[i] for i in order]


def _betti(rows: pd.DataFrame, scale: float, max_dimension: int) -> list[int]:
    alive = (rows["birth"] <= scale) & (rows["death"] > scale)
    return [int((alive & (rows["dim"] == d)).sum()) for d in range(max_dimension + 1)]


def _loop_cycle(pairs, birth_edges, distances, field, max_edge) -> np.ndarray:
    rows = pairs[pairs["field"] == field].reset_index(drop=True)
    dim1 = np.flatnonzero(rows["dim"].to_numpy() == 1)
    if len(dim1) == 0:
        return np.zeros(0, dtype=np.int64)
    lengths = np.minimum(rows["death"].to_numpy()[dim1], max_edge) - rows["birth"].to_numpy()[dim1]
    best = dim1[int(np.argmax(lengths))]
    edge = birth_edges[best]
    if len(edge) != 2:
        return np.zeros(0, dtype=np.int64)
    u, v = int(edge[0]), int(edge[1])
    birth = distances[u, v]
    shorter = (distances < birth) & (distances > 0)
    i, j = np.nonzero(shorter)
    graph = coo_matrix((distances[i, j], (i, j)), shape=distances.shape).tocsr()
    _, previous = dijkstra(graph, directed=False, indices=u, return_predecessors=True)
    if previous[v] < 0:
        return np.zeros(0, dtype=np.int64)
    path = [v]
    while path[-1] != u:
        path.append(int(previous[path[-1]]))
    return np.array(path[::-1] + [u], dtype=np.int64)


def _with_cautions(result: PatchPersistence) -> PatchPersistence:
    cautions = [RESEARCH_CAUTION,
                "Bars with death = inf are still alive at max_edge; they may die at a larger "
                "scale, so their length is counted only up to max_edge.",
                "Max-min landmarks favour outlying points; compare with more landmarks or "
                "another density core before reading a short bar as structure."]
    margin = result.margin()
    if margin["ratio"] < 2:
        cautions.append(f"The longest dimension-1 bar is only {margin['ratio']:.2f} times the "
                        f"second: no single dominant loop at these settings.")
    if result.covering_radius > result.middle_scale:
        cautions.append(f"The landmarks cover the cloud only to {result.covering_radius:.3g}, "
                        f"more than the middle scale {result.middle_scale:.3g}; use more "
                        f"landmarks.")
    return PatchPersistence(**{**result.__dict__, "cautions": tuple(cautions)})
