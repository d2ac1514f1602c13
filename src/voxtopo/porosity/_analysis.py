"""Pore bodies, throats, grains, percolation and integral geometry of a two-phase scan."""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import ndimage

from .. import filtration
from ..diagram import AXES_3D
from ..engine import construction_of, estimate, persistence
from ..errors import InputError
from ..memory import ensure_fits, reported_as_too_big
from ..scan import Scan, as_scan
from . import _euler, _minkowski, _sweep

#: the solid phase takes the neighbourhood complementary to the pore phase's, so that the
#: two phases' Euler characteristics and diagrams are dual to each other
COMPLEMENT = {26: 6, 6: 26, 8: 4, 4: 8}

#: Gaussian width (voxels along each axis) applied to the mask before marching cubes. A
#: binary mask's staircase makes the iso-surface about 8 % too large on a digitised sphere;
#: this light smoothing brings area and mean curvature within about 1 % (spheres of radius
#: 6 to 15 voxels) while moving the surface far less than a voxel.
SURFACE_SMOOTHING_VOXELS = 0.7

#: bytes per voxel, besides persistence: the distance transform (two EDTs with their
#: feature transforms, the signed field), the sweeps (order, parents, sizes, claims) and
#: labels. Peak resident memory of a 256^3 bead packing was 2.3 GB (123 bytes per voxel,
#: interpreter and libraries included; benchmarks/bench_pores.py), hence the margin.
_BYTES_PER_VOXEL = 128


def cautions(spacing, unit) -> list[str]:
    """The cautions written into every summary, with the resolution limit in ``unit``."""
    finest = min(spacing)
    return [
        "The numbers depend on the segmentation (threshold, label, smoothing) and on the "
        "resolution of the scan.",
        f"A throat narrower than about two voxels ({2 * finest:.4g} {unit}) is not resolved: "
        f"it may appear closed, or wider than it is.",
        "These results support research; they are not a medical diagnosis nor a "
        "certification of a material, part or structure. Defer to local codes and licensed "
        "practice.",
    ]


@dataclass
class PoreAnalysis:
    """Everything :func:`analyse` found; see that function for the meaning of each table.

    Attributes
    ----------
    pores, grains, loops, voids : pandas.DataFrame
        One row per feature, lengths in ``unit``, coordinates physical.
    summary : dict
        The JSON-ready numbers (porosity, percolation, Euler characteristic, ...).
    diagram : voxtopo.Diagram
        Sublevel diagram of the signed distance (pores negative), pore-phase neighbourhood.
    solid_diagram : voxtopo.Diagram
        Superlevel diagram of the same field with the solid phase's neighbourhood.
    mask : ndarray of bool
        The pore phase that was analysed.
    distance : voxtopo.Scan
        The signed distance transform.
    critical_throats : dict
        Axis name -> physical coordinates of the voxel that first connects the two faces
        (None when the axis does not percolate).
    """

    pores: pd.DataFrame
    grains: pd.DataFrame
    loops: pd.DataFrame
    voids: pd.DataFrame
    summary: dict
    diagram: object
    solid_diagram: object
    mask: np.ndarray
    distance: Scan
    critical_throats: dict = field(default_factory=dict)


# ------------------------------------------------------------------------------- input
def pore_mask(scan: Scan, *, threshold=None, pores_bright=False, label=None):
    """(mask, segmentation) from a binary mask, a label image or a gray scan.

    ``segmentation`` says how the pores were chosen, for the summary.
    """
    data = scan.data
    where = _name(scan)
    if threshold is not None and label is not None:
        raise InputError(f"Give either a threshold or a pore label for {where}, not both "
                         f"(got threshold={threshold!r}, label={label!r}).")
    if label is not None:
        if not np.issubdtype(data.dtype, np.integer) and data.dtype != bool:
            raise InputError(f"A pore label picks voxels of a label image, but the input "
                             f"{where} holds {data.dtype} values; give an integer label image "
                             f"or a threshold.")
        mask = data == label
        if not mask.any():
            present = np.unique(data)[:8].tolist()
            raise InputError(f"No voxel of the input {where} has the pore label {label}; "
                             f"labels present include {present}.")
        return mask, {"method": "label", "label": int(label), "threshold": None}
    if threshold is not None:
        if isinstance(threshold, str) and threshold != "otsu":
            raise InputError(f"The threshold should be a number or 'otsu', got {threshold!r}.")
        mask, used = filtration.threshold(scan, threshold, below=not pores_bright)
        return mask, {"method": "otsu" if threshold == "otsu" else "given", "threshold": used,
                      "pores": "above the threshold" if pores_bright
                      else "at or below the threshold"}
    if data.dtype == bool:
        return data, {"method": "mask", "threshold": None}
    filtration.check_finite(scan)
    # 8-bit masks from image editors mark the foreground 255
    foreground = 255 if data.dtype == np.uint8 and not (data == 1).any() else 1
    binary = np.logical_or(data == 0, data == foreground)
    if not binary.all():
        examples = np.unique(data[~binary])[:3].tolist()
        raise InputError(
            f"The input {where} is not a binary mask (it holds values such as {examples}); "
            f"give a "
            f"threshold (a value or 'otsu', CLI --threshold) or the pore label of a label "
            f"image (CLI --label).")
    return data == foreground, {"method": "mask", "threshold": None}


def _name(scan: Scan) -> str:
    """The scan's file for messages, or 'array' for data handed over in memory."""
    return scan.source or "array"


def _check_extent(shape, where: str) -> None:
    """Surfaces and boundary lengths need a face between voxels along every axis."""
    if min(shape) < 2:
        hint = (" (a volume of one slice can be given as a 2D image)"
                if len(shape) == 3 and sorted(shape)[1] >= 2 else "")
        raise InputError(f"The input {where} has shape {tuple(shape)}, but the pore analysis "
                         f"needs at least 2 voxels along every axis{hint}.")


def _check_phases(mask: np.ndarray, where: str) -> None:
    if not mask.any():
        raise InputError(f"The input {where} has no pore voxels, so there is no pore space "
                         f"to measure; check the threshold or label, or whether pores are "
                         f"bright.")
    if mask.all():
        raise InputError(f"The input {where} is pore in every voxel, so there is no solid to "
                         f"bound the pores; check the threshold or label, or whether pores "
                         f"are bright.")


def _axes(axis, ndim: int) -> list[int]:
    names = AXES_3D[3 - ndim:]
    if axis is None:
        return list(range(ndim))
    chosen = [axis] if isinstance(axis, (str, int, np.integer)) else list(axis)
    out = []
    for a in chosen:
        if isinstance(a, str) and a in names:
            out.append(names.index(a))
        elif isinstance(a, (int, np.integer)) and not isinstance(a, bool) and 0 <= a < ndim:
            out.append(int(a))
        else:
            raise InputError(f"The percolation axis should be one of {list(names)} (or 0..{ndim - 1}) "
                             f"for a {ndim}D scan, got {a!r}.")
    return sorted(set(out))


# ------------------------------------------------------------------------- feature tables
def _coordinates(flat_index: np.ndarray, shape, spacing) -> np.ndarray:
    """(n, ndim) physical coordinates of voxel centres; NaN rows for index -1."""
    flat_index = np.asarray(flat_index, dtype=np.int64)
    coords = np.array(np.unravel_index(np.maximum(flat_index, 0), shape), dtype=np.float64).T
    coords = coords.reshape(len(flat_index), len(shape)) * np.asarray(spacing)
    coords[flat_index < 0] = np.nan
    return coords


def _flat(pairs: pd.DataFrame, which: str, shape) -> np.ndarray:
    axes = AXES_3D[3 - len(shape):]
    cols = pairs[[f"{which}_{a}" for a in axes]]
    missing = cols.isna().any(axis=1).to_numpy()
    idx = cols.fillna(0).to_numpy(dtype=np.int64)
    flat = np.ravel_multi_index(tuple(idx.T), shape) if len(idx) else np.zeros(0, np.int64)
    return np.where(missing, -1, flat)


def _basin_features(depth: np.ndarray, phase: np.ndarray, neighbourhood: int, births,
                    deaths, birth_voxel, spacing, order):
    """Body radius, constriction radius, border flag and own volume of dimension-0 features.

    ``depth`` is the signed distance oriented so that the phase is negative; ``births`` and
    ``deaths`` are levels of that field. The basin of a feature is the component of
    ``{depth < min(death, 0)}`` holding its birth voxel: the region it drains before it
    joins an older feature, or its whole connected piece of the phase when it never does.
    """
    shape = phase.shape
    level = np.minimum(deaths, 0.0)
    order_q = np.argsort(level, kind="stable")
    size, own, touches = _sweep.basins(order, depth, shape, neighbourhood,
                                       birth_voxel[order_q], level[order_q])
    back = np.empty_like(order_q)
    back[order_q] = np.arange(len(order_q))
    voxel_volume = float(np.prod(spacing))
    body_radius = -births
    centre = _coordinates(birth_voxel, shape, spacing)
    extent = (np.asarray(shape) - 1) * np.asarray(spacing)
    half = 0.5 * np.asarray(spacing)
    # the inscribed ball must fit in the scan's box (outer voxel faces) to be trusted
    room = np.minimum(centre + half, extent + half - centre).min(axis=1) if len(centre) \
        else np.zeros(0)
    ball_out = room < body_radius
    return {
        "body_radius": body_radius,
        "centre": centre,
        "border": touches[back] | ball_out,
        "body_volume": own[back] * voxel_volume,
        "basin_voxels": size[back],
    }


def _phase_table(pairs: pd.DataFrame, depth: np.ndarray, phase: np.ndarray, neighbourhood,
                 spacing, flip: bool, min_lifetime: float, names: tuple[str, str],
                 order=None):
    """Table of the dimension-0 features of one phase (pores, or grains with ``flip``).

    ``order``: the phase's voxels by increasing ``depth`` (computed when not given)."""
    ndim = phase.ndim
    axes = AXES_3D[3 - ndim:]
    body, neck = names
    births = pairs["birth"].to_numpy(dtype=np.float64)
    deaths = pairs["death"].to_numpy(dtype=np.float64)
    if flip:  # superlevel values of the solid: turn them into sublevel depths
        births, deaths = -births, -deaths
    inside = births < 0
    depth_below = np.minimum(deaths, 0.0) - births
    keep = inside & (depth_below > min_lifetime)
    pairs, births, deaths = pairs[keep], births[keep], deaths[keep]
    birth_voxel = _flat(pairs, "birth", phase.shape)
    death_voxel = _flat(pairs, "death", phase.shape)
    if order is None:
        order = _sweep.sweep_order(depth, phase)
    feats = _basin_features(depth, phase, neighbourhood, births, deaths, birth_voxel, spacing,
                            order)
    joined = deaths < 0
    neck_radius = np.where(joined, -deaths, np.nan)
    neck_at = _coordinates(np.where(joined, death_voxel, -1), phase.shape, spacing)
    table = {"id": np.arange(1, len(births) + 1), f"{body}_radius": feats["body_radius"]}
    for k, a in enumerate(axes):
        table[f"{body}_{a}"] = feats["centre"][:, k]
    table[f"{neck}_radius"] = neck_radius
    for k, a in enumerate(axes):
        table[f"{neck}_{a}"] = neck_at[:, k]
    table["border"] = feats["border"].astype(bool)
    table["lifetime"] = deaths - births
    table[f"{body}_volume"] = feats["body_volume"]
    table["isolated"] = ~joined
    frame = pd.DataFrame(table)
    frame = frame.sort_values(f"{body}_radius", ascending=False, kind="stable")
    frame["id"] = np.arange(1, len(frame) + 1)
    return frame.reset_index(drop=True)


def _kind(birth: np.ndarray, death: np.ndarray, superlevel: bool) -> np.ndarray:
    """'pore' when the feature lives in the pore phase only, 'solid' in the solid only,
    'crossing' when it exists at level 0, i.e. in the segmented mask itself."""
    low, high = (death, birth) if superlevel else (birth, death)
    return np.where(high <= 0, "pore", np.where(low >= 0, "solid", "crossing"))


def _loop_table(diagram, spacing, min_lifetime) -> pd.DataFrame:
    """Dimension-1 pairs of the pore-phase diagram: loops of the eroded pore space.

    A loop is born at -channel_radius when balls of that radius can first travel round it,
    and dies when it is filled: at +strut_radius when it wraps a solid strut of that
    radius, or at a negative level when it closes within the pore space.
    """
    pairs = diagram.dimension(1).pairs
    pairs = pairs[pairs["persistence"] > min_lifetime]
    ndim = diagram.ndim
    axes = AXES_3D[3 - ndim:]
    birth = pairs["birth"].to_numpy(dtype=np.float64)
    death = pairs["death"].to_numpy(dtype=np.float64)
    born_at = _coordinates(_flat(pairs, "birth", diagram.shape), diagram.shape, spacing)
    dies_at = _coordinates(_flat(pairs, "death", diagram.shape), diagram.shape, spacing)
    table = {"id": np.arange(1, len(pairs) + 1),
             "channel_radius": np.where(birth < 0, -birth, np.nan)}
    for k, a in enumerate(axes):
        table[f"channel_{a}"] = born_at[:, k]
    table["strut_radius"] = np.where((death > 0) & np.isfinite(death), death, np.nan)
    for k, a in enumerate(axes):
        table[f"strut_{a}"] = dies_at[:, k]
    table["kind"] = _kind(birth, death, superlevel=False)
    table["lifetime"] = death - birth
    return pd.DataFrame(table)


def _void_table(solid_diagram, spacing, min_lifetime) -> pd.DataFrame:
    """Dimension-2 pairs of the solid-phase (superlevel) diagram: cavities of the solid.

    A cavity closes at +wall_radius, the half-thickness of the thinnest part of the solid
    around it, and fills at -void_radius, the radius of the largest ball inside it. Those
    of kind 'crossing' are enclosed pores of the segmented mask.
    """
    ndim = solid_diagram.ndim
    axes = AXES_3D[3 - ndim:]
    columns = (["id", "void_radius"] + [f"void_{a}" for a in axes] + ["wall_radius"]
               + [f"wall_{a}" for a in axes] + ["kind", "lifetime"])
    if ndim < 3:
        return pd.DataFrame({c: [] for c in columns})
    pairs = solid_diagram.dimension(2).pairs
    pairs = pairs[pairs["persistence"] > min_lifetime]
    birth = pairs["birth"].to_numpy(dtype=np.float64)
    death = pairs["death"].to_numpy(dtype=np.float64)
    shape = solid_diagram.shape
    centre = _coordinates(_flat(pairs, "death", shape), shape, spacing)
    wall = _coordinates(_flat(pairs, "birth", shape), shape, spacing)
    table = {"id": np.arange(1, len(pairs) + 1),
             "void_radius": np.where((death < 0) & np.isfinite(death), -death, np.nan)}
    for k, a in enumerate(axes):
        table[f"void_{a}"] = centre[:, k]
    table["wall_radius"] = np.where(birth > 0, birth, np.nan)
    for k, a in enumerate(axes):
        table[f"wall_{a}"] = wall[:, k]
    table["kind"] = _kind(birth, death, superlevel=True)
    table["lifetime"] = birth - death
    return pd.DataFrame(table, columns=columns)


# -------------------------------------------------------------------- whole-scan numbers
def percolation(distance: np.ndarray, mask: np.ndarray, axis: int, neighbourhood: int,
                spacing, order=None):
    """(radius, critical voxel) for one axis: the largest r such that the pore voxels at
    distance >= r from the solid connect the inlet face to the outlet face; (0, None) when
    the faces never join through the pore phase."""
    if order is None:
        order = _sweep.sweep_order(distance, mask)
    step = _sweep.percolation_step(order, mask.shape, axis, neighbourhood)
    if step < 0:
        return 0.0, None
    voxel = int(order[step])
    return float(-distance.ravel()[voxel]), _coordinates(np.array([voxel]), mask.shape,
                                                          spacing)[0]


def pore_components(mask: np.ndarray, neighbourhood: int) -> np.ndarray:
    """Labels of the connected pieces of the pore phase (scipy.ndimage.label)."""
    full = neighbourhood in (26, 8)
    structure = ndimage.generate_binary_structure(mask.ndim, mask.ndim if full else 1)
    return ndimage.label(mask, structure=structure)[0]


def connected_fraction(labels: np.ndarray, axis: int) -> float:
    """Fraction of the scan's volume in pore components touching both faces of ``axis``."""
    inlet = np.unique(np.take(labels, 0, axis=axis))
    outlet = np.unique(np.take(labels, -1, axis=axis))
    through = np.intersect1d(inlet[inlet > 0], outlet[outlet > 0])
    if len(through) == 0:
        return 0.0
    return float(np.isin(labels, through).sum() / labels.size)


def minkowski(mask: np.ndarray, spacing, chi_pore: int) -> dict:
    """Minkowski functionals of the pore phase per unit volume of the scan."""
    volume = mask.size * float(np.prod(spacing))
    sigma = [SURFACE_SMOOTHING_VOXELS] * mask.ndim
    soft = ndimage.gaussian_filter(mask.astype(np.float32), sigma=sigma, mode="nearest")
    if mask.ndim == 3:
        vertices, faces = _minkowski.interface_mesh(soft, spacing)
        area = _minkowski.surface_area(vertices, faces)
        curvature = _minkowski.integral_mean_curvature(vertices, faces)
        mean_curvature_density = curvature / volume
    else:
        area = _minkowski.boundary_length_2d(soft, spacing)
        mean_curvature_density = None
    return {
        "phase": "pore",
        "volume_fraction": float(mask.mean()),
        "surface_area_density": area / volume,
        "mean_curvature_density": mean_curvature_density,
        "euler_density": chi_pore / volume,
    }


def _estimate_bytes(shape, neighbourhood, engine) -> int:
    voxels = int(np.prod(shape, dtype=np.int64))
    per_run = estimate(shape, np.float64, engine=engine, neighbourhood=neighbourhood)
    return voxels * _BYTES_PER_VOXEL + per_run


# ------------------------------------------------------------------------------ analyse
def analyse(mask_or_scan, *, threshold=None, pores_bright: bool = False, label=None,
            spacing=None, unit=None, axis=None, neighbourhood: int | None = None,
            min_lifetime: float | None = None, engine: str = "auto",
            progress=None) -> PoreAnalysis:
    """Pore bodies, throats, grains, percolation and integral geometry of a two-phase scan.

    Parameters
    ----------
    mask_or_scan : ndarray or Scan
        A binary mask (True, or 1, marks pore), a label image (with ``label``) or a
        grayscale scan (with ``threshold``); 2D (y, x) or 3D (z, y, x).
    threshold : float or "otsu", optional
        Segment a grayscale scan: pores are the voxels at or below it (above it with
        ``pores_bright``). "otsu" picks the value by Otsu's method; the value used is in
        the summary.
    pores_bright : bool
        With ``threshold``: the pores are the bright phase.
    label : int, optional
        The pore label of a label image.
    spacing, unit : optional
        Voxel size in (z, y, x) order and its unit; they win over the Scan's own.
    axis : "z", "y", "x", int or a list of them, optional
        Axes along which to measure percolation and connected porosity (default all).
    neighbourhood : 26 or 6 (3D), 8 or 4 (2D), optional
        Connectivity of the pore phase; default 26 / 8 (voxels touching at a corner are
        connected). The solid takes the complementary 6 / 4, so that the two phases'
        Euler characteristics and diagrams agree with each other.
    min_lifetime : float, optional
        A pore (grain) whose body radius exceeds its throat (neck) radius by no more than
        this is a ripple of the distance map and stays part of the feature it drains into;
        default half the finest spacing. Loops and voids use it as a persistence cut.
    engine : {"auto", "voxtopo", "gudhi"}
        Persistence engine, as in :func:`voxtopo.persistence`; the diagram is the same.
    progress : callable(phase, fraction), optional
        Called as work advances; raise voxtopo.Cancelled inside it to stop.

    Returns
    -------
    PoreAnalysis
        ``pores``: one row per pore, the largest first: ``id, body_radius, body_z, body_y,
        body_x, throat_radius, throat_z, throat_y, throat_x, border, lifetime`` then
        ``body_volume`` (the voxels the pore drains before it joins a larger one) and
        ``isolated`` (it never joins another pore through the pore space; no throat).
        ``grains``: the same for the solid with ``neck`` for ``throat``. ``loops`` and
        ``voids``: see Notes. ``summary``: porosity, percolation and integral geometry.

    Notes
    -----
    Pores are the dimension-0 features of the sublevel filtration of the signed distance
    ``f`` (negative in the pores, :func:`voxtopo.filtration.signed_distance`). A pore is born
    at its deepest voxel, ``f = -body_radius``, and dies where its basin first meets an older
    (deeper) pore's, at ``f = -throat_radius``; that voxel is the throat::

        -f  body                 body
         ^   /\\     throat       /\\
         |  /  \\      __       /  \\
         | /    \\____/  \\_____/    \\
         +---------------------------> position

    Radii are distances between voxel centres (a pore voxel and the nearest solid voxel
    centre), with no half-voxel correction, and why: the nearest solid centre lies 0 to 1
    voxel beyond the true interface (half a voxel from digitising it, half from measuring to
    a centre rather than a face), while the deepest voxel centre lies up to half a voxel
    diagonal (0.87 voxel in 3D) off the true centre of the body. The two errors have
    opposite signs, so a half-voxel correction would only move the error band; uncorrected,
    radii are good to about one voxel.

    ``counts`` in the summary: ``loops`` and ``voids`` count the crossing pairs, i.e. the
    tunnels of the pore phase and the enclosed pores of the segmented mask itself; the
    tables hold every pair of the filtration above ``min_lifetime`` with its ``kind``.

    ``border`` is True when the pore's basin holds a voxel of the scan's outer layer, or
    its inscribed ball is not inside the scan's box (the outer voxel faces): the pore is cut
    by the field of view, and its size is not to be trusted.

    Percolation along an axis: the largest radius r such that the pore voxels with
    ``-f >= r`` connect the first slice to the last, found by one union-find sweep in order
    of decreasing distance with the two faces as virtual nodes. Connected porosity: the
    volume fraction of pore components (at level 0) touching both faces.

    Euler characteristics are counted on the cubical complex of each phase with its
    neighbourhood; connectivity density ``(1 - chi_solid) / V`` is that of the solid
    (for bone: the trabecular structure), taken as one component.

    References
    ----------
    Odgaard, A. & Gundersen, H. J. G. (1993). Quantification of connectivity in cancellous
    bone, with special emphasis on 3-D reconstructions. Bone 14, 173-182.
    Lorensen, W. E. & Cline, H. E. (1987). Marching cubes: a high resolution 3D surface
    construction algorithm. SIGGRAPH 21, 163-169.

    Examples
    --------
    >>> import numpy as np
    >>> from voxtopo.porosity import analyse
    >>> mask = np.zeros((20, 20, 20), bool)
    >>> mask[:, 7:13, 7:13] = True                      # a square channel along z
    >>> result = analyse(mask, axis="z")
    >>> result.summary["percolates"]
    {'z': True}
    >>> round(result.summary["porosity"], 2)
    0.09
    """
    timings = {}
    clock = time.perf_counter()
    scan = as_scan(mask_or_scan, spacing=spacing, unit=unit)
    where = _name(scan)
    _check_extent(scan.shape, where)
    n_pore, _ = construction_of(scan.ndim, neighbourhood)
    n_solid = COMPLEMENT[n_pore]
    axes = _axes(axis, scan.ndim)
    mask, segmentation = pore_mask(scan, threshold=threshold, pores_bright=pores_bright,
                                   label=label)
    _check_phases(mask, where)
    spacing = scan.spacing
    if min_lifetime is None:
        min_lifetime = 0.5 * min(spacing)
    elif not (np.isfinite(min_lifetime) and min_lifetime >= 0):
        raise InputError(f"min_lifetime must be a length >= 0 in {scan.unit}, got {min_lifetime}.")
    planned = _estimate_bytes(mask.shape, n_pore, engine)
    what = f"Pore analysis of the {'x'.join(map(str, mask.shape))} scan"
    remedy = "crop it (--crop) or downsample it (--downsample) first"
    ensure_fits(planned, what, remedy)
    timings["segmentation"] = time.perf_counter() - clock
    with reported_as_too_big(what, planned, remedy):
        return _measure(scan, mask, segmentation, axes, n_pore, n_solid, min_lifetime, engine,
                        progress, timings)


def _measure(scan, mask, segmentation, axes, n_pore, n_solid, min_lifetime, engine,
             progress, timings) -> PoreAnalysis:
    """The work of :func:`analyse` once its input is checked and its memory planned."""
    spacing = scan.spacing

    def step(name, fraction):
        if progress is not None:
            progress(name, fraction)

    step("distance transform", 0.0)
    clock = time.perf_counter()
    distance = filtration.signed_distance(scan.with_data(mask))
    field = distance.data
    timings["distance_transform"] = time.perf_counter() - clock

    clock = time.perf_counter()
    diagram = persistence(distance, neighbourhood=n_pore, engine=engine, progress=progress)
    solid_diagram = persistence(distance, superlevel=True, neighbourhood=n_solid,
                                engine=engine, progress=progress)
    timings["persistence"] = time.perf_counter() - clock

    step("pores and grains", 0.0)
    clock = time.perf_counter()
    pore_order = _sweep.sweep_order(field, mask)
    pores = _phase_table(diagram.dimension(0).pairs, field, mask, n_pore, spacing, False,
                         min_lifetime, ("body", "throat"), pore_order)
    grains = _phase_table(solid_diagram.dimension(0).pairs, -field, ~mask, n_solid, spacing,
                          True, min_lifetime, ("body", "neck"))
    loops = _loop_table(diagram, spacing, min_lifetime)
    voids = _void_table(solid_diagram, spacing, min_lifetime)
    timings["features"] = time.perf_counter() - clock

    step("percolation", 0.0)
    clock = time.perf_counter()
    names = AXES_3D[3 - scan.ndim:]
    radius, critical, connected = {}, {}, {}
    labels = pore_components(mask, n_pore)
    for k, a in enumerate(axes):
        radius[names[a]], critical[names[a]] = percolation(field, mask, a, n_pore, spacing,
                                                           pore_order)
        connected[names[a]] = connected_fraction(labels, a)
        step("percolation", (k + 1) / len(axes))
    del labels, pore_order
    timings["percolation"] = time.perf_counter() - clock

    step("integral geometry", 0.0)
    clock = time.perf_counter()
    chi_pore = _euler.euler_characteristic(mask, n_pore)
    chi_solid = _euler.euler_characteristic(~mask, n_solid)
    volume = mask.size * float(np.prod(spacing))
    functionals = minkowski(mask, spacing, chi_pore)
    timings["integral_geometry"] = time.perf_counter() - clock
    step("integral geometry", 1.0)

    unit = scan.unit
    summary = {
        "porosity": float(mask.mean()),
        "connected_porosity": connected,
        "percolates": {a: r > 0 for a, r in radius.items()},
        "percolation_radius": radius,
        "critical_throat": {a: (None if c is None else [float(v) for v in c])
                            for a, c in critical.items()},
        "euler_characteristic": {"pore": chi_pore, "solid": chi_solid,
                                 "neighbourhood": {"pore": n_pore, "solid": n_solid}},
        "connectivity_density": {"value": (1 - chi_solid) / volume, "phase": "solid",
                                 "neighbourhood": n_solid, "unit": f"1/{unit}^{scan.ndim}",
                                 "formula": "(1 - euler_characteristic of the solid) / "
                                            "scan volume (Odgaard & Gundersen 1993)"},
        "minkowski": functionals,
        "counts": {
            "pores": int(len(pores)), "pores_at_border": int(pores["border"].sum()),
            "isolated_pores": int(pores["isolated"].sum()),
            "grains": int(len(grains)), "grains_at_border": int(grains["border"].sum()),
            "loops": int((loops["kind"] == "crossing").sum()),
            "voids": int((voids["kind"] == "crossing").sum()),
            "loops_in_filtration": int(len(loops)), "voids_in_filtration": int(len(voids)),
        },
        "segmentation": segmentation,
        "threshold": segmentation.get("threshold"),
        "threshold_method": segmentation["method"],
        "unit": unit,
        "spacing": list(spacing),
        "shape": list(mask.shape),
        "scan_volume": volume,
        "min_lifetime": float(min_lifetime),
        "radius_convention": "distances between voxel centres (pore voxel to nearest solid "
                             "voxel centre); no half-voxel correction; good to about one "
                             "voxel",
        "timings_seconds": {k: round(v, 4) for k, v in timings.items()},
        "cautions": cautions(spacing, unit),
    }
    if scan.metadata.get("notes"):
        summary["notes"] = list(scan.metadata["notes"])
    return PoreAnalysis(pores=pores, grains=grains, loops=loops, voids=voids, summary=summary,
                        diagram=diagram, solid_diagram=solid_diagram, mask=mask,
                        distance=distance, critical_throats=critical)
