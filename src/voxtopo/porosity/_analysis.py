"""Pore bodies, throats, grains, percolation and integral geometry of a two-phase scan."""

from __future__ import annotations

import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import ndimage

from .. import filtration
from .. import significance as sig
from ..diagram import AXES_3D
from .. import engine as _engine
from ..engine import construction_of, persistence
from ..engine._levels import float_levels
from ..filtration import binary_foreground, region_of_interest
from ..errors import InputError
from ..memory import ensure_fits, is_mapped, release_pages, reported_as_too_big
from ..scan import Scan, as_scan
from ..engine._union_find import index_dtype
from . import _edt, _euler, _minkowski, _sweep

#: the solid phase takes the neighbourhood complementary to the pore phase's, so that the
#: two phases' Euler characteristics and diagrams are dual to each other
COMPLEMENT = {26: 6, 6: 26, 8: 4, 4: 8}

#: Gaussian width (voxels along each axis) applied to the mask before marching cubes. A
#: binary mask's staircase makes the iso-surface about 8 % too large on a digitised sphere;
#: this light smoothing brings area and mean curvature within about 1 % (spheres of radius
#: 6 to 15 voxels) while moving the surface far less than a voxel.
SURFACE_SMOOTHING_VOXELS = 0.7

#: the `voxtopo pores` process with its libraries loaded (peak of a 64^3 run: 382 MB)
_BASE_BYTES = 380_000_000

#: Calibration, from the peaks of benchmarks/bench_pores.py (uint8 overlapping-sphere
#: masks, this machine): the persistence runs take a share of the engine's plan for the
#: distance's uint16 level numbers (the larger of the two phases' runs), as that plan
#: covers gray images with many more pairs than a distance transform has. With the
#: distance held as levels: estimate / peak 1.18 at 256^3 (0.80 of 0.68 GB), 1.09 at
#: 512^3 (3.02 of 2.76 GB) and 1.16 at 1024^3 (17.2 of 14.9 GB); uint16 gray scans mapped
#: from a .npy and thresholded (Otsu): 1.11 at 512^3 (2.89 of 2.61 GB) and 1.08 at 1024^3
#: (16.1 of 14.9 GB). The engine's plan still
#: decides how the need grows with the shape; when the engine's own planning changes,
#: this share is measured again with the benchmark.
_ENGINE_PLAN_SHARE = 0.63

#: what to do when a pore analysis would not fit in memory
REMEDY = ("crop or downsample it first, or run it out of core "
          "(voxtopo pores --out-of-core)")


def cautions(spacing, unit) -> list[str]:
    """The cautions written into every summary, with the resolution limit in ``unit``.

    Parameters
    ----------
    spacing : sequence of float
        The voxel size; the finest one sets the smallest resolved throat.
    unit : str
        The unit of ``spacing``.

    Returns
    -------
    list of str
        Three sentences: segmentation and resolution, the smallest resolved throat in
        ``unit``, and that results support research only.
    """
    finest = min(spacing)
    return [
        "The numbers depend on the segmentation (threshold, label, smoothing) and on the "
        "resolution of the scan.",
        f"A throat one or two voxels wide (radius below {RESOLVED_RADIUS_VOXELS} voxels, "
        f"{RESOLVED_RADIUS_VOXELS * finest:.4g} {unit}) is not resolved: it may appear "
        f"closed, or wider than it is.",
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
    sample : ndarray of bool or None
        The region of interest (None: the whole scan).
    pore_rows : ndarray of int
        For each row of ``pores`` (same order), its row in ``diagram.pairs``.
    betti_curves : pandas.DataFrame or None
        Out of core only: Betti numbers and Euler characteristic of the pore sweep at a
        grid of levels (``level, betti_0, betti_1, (betti_2), euler_characteristic``).
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
    sample: np.ndarray | None = None
    pore_rows: np.ndarray | None = None
    betti_curves: pd.DataFrame | None = None


# ------------------------------------------------------------------------------- input
#: a phase with fewer voxels than this, or a smaller share of the sample than
#: SPARSE_PHASE_FRACTION, is named in the summary's notes: its numbers rest on a handful of
#: voxels (a 3x3x3 block is the smallest ball with an interior voxel)
SPARSE_PHASE_VOXELS = 27
SPARSE_PHASE_FRACTION = 0.001

#: a channel whose radius is below this many voxels (distance between voxel centres) is one
#: or two voxels wide: no voxel lies deeper than one voxel from the solid, so the scan does
#: not resolve its width
RESOLVED_RADIUS_VOXELS = 1.5


def is_binary_mask(data: np.ndarray) -> bool:
    """True for a binary mask as :func:`analyse` reads one: bool, 0/1, or 0/255 in 8 bits.

    Parameters
    ----------
    data : array_like
        The image.

    Returns
    -------
    bool
        Whether every value is 0 or the foreground value (1, or 255 in an 8-bit image
        without any 1).

    Examples
    --------
    >>> import numpy as np
    >>> is_binary_mask(np.array([0, 255], np.uint8)), is_binary_mask(np.array([0, 2]))
    (True, False)
    """
    return binary_foreground(np.asarray(data)) is not None


def pore_mask(scan: Scan, *, threshold=None, pores_bright=False, label=None, sample=None):
    """(mask, segmentation) from a binary mask, a label image or a gray scan.

    ``segmentation`` says how the pores were chosen, for the summary. With ``sample`` (a
    region of interest) Otsu's threshold is chosen from the sample's gray values alone, so
    that air or mounting around it does not move the threshold.
    """
    data = scan.data
    where = _name(scan)
    if threshold is not None and label is not None:
        raise InputError(f"Give either a threshold or a pore label for {where}, not both "
                         f"(got threshold={threshold!r}, label={label!r}).")
    if pores_bright and threshold is None:
        raise InputError(f"pores_bright (CLI --pores-bright) only says which side of a "
                         f"threshold the pores are on, and no threshold was given for "
                         f"{where}; add a threshold or leave it out.")
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
        if binary_foreground(data) is not None:
            raise InputError(f"The input {where} is already a binary mask (two values only), "
                             f"where a threshold could only swap or keep its phases; leave "
                             f"out the threshold: its True (1) voxels are the pores.")
        filtration.check_finite(scan)
        method = "otsu" if threshold == "otsu" else "given"
        if threshold == "otsu" and sample is not None:
            values = data[sample].reshape((1,) * (data.ndim - 1) + (-1,))
            _, threshold = filtration.threshold(scan.with_data(values), "otsu")
            method = "otsu within the region of interest"
        mask, used = filtration.threshold(scan, threshold, below=not pores_bright)
        return mask, {"method": method, "threshold": used,
                      "pores": "above the threshold" if pores_bright
                      else "at or below the threshold"}
    if data.dtype != bool:
        filtration.check_finite(scan)
    foreground = binary_foreground(data)
    if foreground is None:
        examples = np.unique(data[(data != 0) & (data != 1)])[:3].tolist()
        raise InputError(
            f"The input {where} is not a binary mask (it holds values such as {examples}); "
            f"give a threshold (a value or 'otsu', CLI --threshold) or the pore label of a "
            f"label image (CLI --label).")
    if data.dtype == bool:
        mask = data
    elif foreground == 1 and data.dtype.itemsize == 1:
        mask = data.view(bool)  # bytes 0 and 1 are the bools themselves: no copy
    else:
        mask = data == foreground
    return mask, {"method": "mask", "threshold": None}


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


def _selected_by(segmentation: dict) -> str:
    method = segmentation["method"]
    if method == "label":
        return f"the pore label {segmentation['label']}"
    if method != "mask":
        how = "Otsu's threshold" if method.startswith("otsu") else "the threshold"
        return f"{how} {segmentation['threshold']:.6g} (pores {segmentation['pores']})"
    return "the mask"


def _phase_notes(pore_voxels: int, solid_voxels: int, sample_voxels: int, total: int,
                 where: str, segmentation: dict) -> list[str]:
    """Refuse a phase that is empty; return a note for a phase of almost no voxels, from
    the voxel counts of each phase, of the sample and of the whole scan."""
    chosen = _selected_by(segmentation)
    sample = "sample" if sample_voxels < total else "scan"
    if pore_voxels == 0:
        raise InputError(f"{chosen[0].upper() + chosen[1:]} selects no pore voxel in the "
                         f"{sample} {where}, so there is no pore space to measure; check the "
                         f"threshold or label, or whether pores are bright.")
    if solid_voxels == 0:
        raise InputError(f"{chosen[0].upper() + chosen[1:]} makes every voxel of the "
                         f"{sample} {where} pore, so there is no solid to bound the pores; "
                         f"check the threshold or label, or whether pores are bright.")
    notes = []
    for phase, count in (("pore", pore_voxels), ("solid", solid_voxels)):
        if count < SPARSE_PHASE_VOXELS or count < SPARSE_PHASE_FRACTION * sample_voxels:
            notes.append(f"{chosen[0].upper() + chosen[1:]} leaves only {count} {phase} "
                         f"voxels ({100 * count / sample_voxels:.3g} % of the {sample}), so "
                         f"the {phase} numbers rest on a handful of voxels; check the "
                         f"segmentation.")
    return notes


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
    cols = pairs[[f"{which}_voxel_{a}" for a in axes]]
    missing = cols.isna().any(axis=1).to_numpy()
    idx = cols.fillna(0).to_numpy(dtype=np.int64)
    flat = np.ravel_multi_index(tuple(idx.T), shape) if len(idx) else np.zeros(0, np.int64)
    return np.where(missing, -1, flat)


def size_column(ndim: int, body: str = "body") -> str:
    """Name of the own-size column of a pore or grain table: a volume in 3D, an area in 2D.

    Parameters
    ----------
    ndim : int
        2 or 3.
    body : str
        The prefix of the column ("body" for pores and grains).

    Returns
    -------
    str
        ``<body>_volume`` in 3D, ``<body>_area`` in 2D.

    Examples
    --------
    >>> size_column(3), size_column(2)
    ('body_volume', 'body_area')
    """
    return f"{body}_volume" if ndim == 3 else f"{body}_area"


def _basin_features(depth: np.ndarray, phase: np.ndarray, neighbourhood: int, births,
                    deaths, birth_voxel, spacing, order, edge, room_in_sample, flip=False):
    """Body radius, constriction radius, border flag and own size of dimension-0 features.

    ``depth`` is the signed distance, swept as it is or, with ``flip``, negated so that the
    phase is negative; ``births`` and ``deaths`` are levels of the swept field. The basin of a feature is the component of
    ``{depth < min(death, 0)}`` holding its birth voxel: the region it drains before it
    joins an older feature, or its whole connected piece of the phase when it never does.
    ``edge`` (flat bool, or None for the scan's outer layer) marks the voxels at the border
    of the scan or of the sample;
    ``room_in_sample`` (or None) is each voxel's distance to the nearest voxel outside the
    region of interest. ``order`` holds every voxel of the phase, so the sweep also gives
    the phase's connected pieces (``pieces``, :class:`._sweep.Pieces`).
    """
    shape = phase.shape
    level = np.minimum(deaths, 0.0)
    order_q = np.argsort(level, kind="stable")
    (size, own, touches), pieces = _sweep.basins_and_pieces(
        order, depth, shape, neighbourhood, birth_voxel[order_q], level[order_q], edge=edge,
        flip=flip)
    back = np.empty_like(order_q)
    back[order_q] = np.arange(len(order_q))
    voxel_volume = float(np.prod(spacing))
    body_radius = -births
    centre = _coordinates(birth_voxel, shape, spacing)
    room_at = (None if room_in_sample is None or not len(centre)
               else room_in_sample.ravel()[birth_voxel])
    return {
        "body_radius": body_radius,
        "centre": centre,
        "border": touches[back] | ball_outside(centre, body_radius, shape, spacing, room_at),
        "own_size": own[back] * voxel_volume,
        "basin_voxels": size[back],
        "pieces": pieces,
    }


def ball_outside(centre: np.ndarray, body_radius: np.ndarray, shape, spacing,
                 room_in_sample=None) -> np.ndarray:
    """True where the inscribed ball (``centre``, ``body_radius``) is not inside the scan's
    box (its outer voxel faces) or, given ``room_in_sample`` (each centre's distance to the
    nearest voxel outside the region of interest), not inside the sample."""
    extent = (np.asarray(shape) - 1) * np.asarray(spacing)
    half = 0.5 * np.asarray(spacing)
    room = np.minimum(centre + half, extent + half - centre).min(axis=1) if len(centre) \
        else np.zeros(0)
    if room_in_sample is not None and len(centre):
        room = np.minimum(room, room_in_sample)
    return room < body_radius


def _phase_table(pairs: pd.DataFrame, depth: np.ndarray, phase: np.ndarray, neighbourhood,
                 spacing, flip: bool, min_persistence: float, names: tuple[str, str],
                 order=None, edge=None, room_in_sample=None, member: bool = True):
    """(table, pieces) of the dimension-0 features of one phase (pores, or grains with
    ``flip``) and the phase's connected pieces (:class:`._sweep.Pieces`).

    ``depth`` is the signed distance (negative in the pores); with ``flip`` (the solid)
    its negative is swept, without a copy.
    ``phase``: the voxels where it equals ``member`` are the phase (the solid of a whole
    scan is ``mask`` with ``member`` False, without a mask of its own).
    ``order``: the phase's voxels by increasing depth (computed when not given).
    ``edge``: flat bool array of the voxels at the border of the scan or of the sample
    (None: the scan's outer layer)."""
    ndim = phase.ndim
    axes = AXES_3D[3 - ndim:]
    body, neck = names
    births = pairs["birth"].to_numpy(dtype=np.float64)
    deaths = pairs["death"].to_numpy(dtype=np.float64)
    if flip:  # superlevel values of the solid: turn them into sublevel depths
        births, deaths = -births, -deaths
    inside = births < 0
    depth_below = np.minimum(deaths, 0.0) - births
    keep = inside & (depth_below > min_persistence)
    pairs, births, deaths = pairs[keep], births[keep], deaths[keep]
    birth_voxel = _flat(pairs, "birth", phase.shape)
    death_voxel = _flat(pairs, "death", phase.shape)
    if order is None:
        order = _sweep.sweep_order(depth, phase, member=member, descending=flip)
    feats = _basin_features(depth, phase, neighbourhood, births, deaths, birth_voxel, spacing,
                            order, edge, room_in_sample, flip)
    del order
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
    table[size_column(ndim, body)] = feats["own_size"]
    table["isolated"] = _isolated(feats["pieces"], birth_voxel)
    # the birth voxel's indices beside its physical position: the key to the regions
    birth_index = np.unravel_index(np.maximum(birth_voxel, 0), phase.shape)
    for k, a in enumerate(axes):
        table[f"{body}_voxel_{a}"] = birth_index[k].astype(np.int64)
    table["pair_row"] = pairs.index.to_numpy(dtype=np.int64)
    return largest_first(pd.DataFrame(table), body, axes), feats["pieces"]


def largest_first(frame: pd.DataFrame, body: str, axes) -> pd.DataFrame:
    """The feature table with the largest body first, ties by the body voxel's position
    (C order), so that the order is the same whichever engine made the diagram; ids
    numbered in that order."""
    keys = [f"{body}_radius"] + [f"{body}_voxel_{a}" for a in axes]
    frame = frame.sort_values(keys, ascending=[False] + [True] * len(axes), kind="stable")
    frame["id"] = np.arange(1, len(frame) + 1)
    return frame.reset_index(drop=True)


def _isolated(pieces, birth_voxel: np.ndarray) -> np.ndarray:
    """For each feature (its birth voxel): its connected piece of the phase (at level 0)
    holds no other feature and reaches no border of the scan or sample: a closed pore (or
    a loose grain). A feature without a birth voxel (index -1) is not isolated."""
    known = birth_voxel >= 0
    piece = pieces.piece_of(birth_voxel[known])
    _, which, features_in_piece = np.unique(piece, return_inverse=True, return_counts=True)
    isolated = np.zeros(len(birth_voxel), dtype=bool)
    isolated[known] = (features_in_piece[which] == 1) & ~pieces.at_border(piece)
    return isolated


def _with_robust(table: pd.DataFrame, robust_above: float) -> pd.DataFrame:
    """``table`` with a column ``robust`` right after ``lifetime``: the feature lives
    longer than ``robust_above`` (or never dies), so it survives every segmentation whose
    boundary is off by at most the boundary tolerance (:func:`voxtopo.significance.
    robust_flags`)."""
    table = table.copy()
    lifetime = table["lifetime"].to_numpy(dtype=np.float64)
    table.insert(table.columns.get_loc("lifetime") + 1, "robust", lifetime > robust_above)
    return table


def _robust_counts(pores, grains, loops, voids) -> dict:
    """Robust pores and grains, and robust crossing loops and voids (those of the segmented
    mask itself, as ``counts`` counts them)."""
    return {"pores": int(pores["robust"].sum()), "grains": int(grains["robust"].sum()),
            "loops": int((loops["robust"] & (loops["kind"] == "crossing")).sum()),
            "voids": int((voids["robust"] & (voids["kind"] == "crossing")).sum())}


def _rows_of_dimension(diagram, dim: int) -> pd.DataFrame:
    """The pairs of one dimension, keeping their row numbers in ``diagram.pairs``."""
    return diagram.pairs[diagram.pairs["dim"] == dim]


def _kind(birth: np.ndarray, death: np.ndarray, superlevel: bool) -> np.ndarray:
    """'pore' when the feature lives in the pore phase only, 'solid' in the solid only,
    'crossing' when it exists at level 0, i.e. in the segmented mask itself."""
    low, high = (death, birth) if superlevel else (birth, death)
    return np.where(high <= 0, "pore", np.where(low >= 0, "solid", "crossing"))


def finished_tables(pores, grains, diagram, solid_diagram, spacing, min_persistence,
                    robust_above):
    """(pores, grains, loops, voids, pore_rows): the pore and grain tables without their
    working column ``pair_row`` (the pores' rows are returned), the loop and void tables
    of the two diagrams, each with its ``robust`` flag; in memory and out of core alike."""
    pore_rows = pores.pop("pair_row").to_numpy()
    grains.pop("pair_row")
    loops = _loop_table(diagram, spacing, min_persistence)
    voids = _void_table(solid_diagram, spacing, min_persistence)
    pores, grains, loops, voids = (_with_robust(table, robust_above)
                                   for table in (pores, grains, loops, voids))
    return pores, grains, loops, voids, pore_rows


def _loop_table(diagram, spacing, min_persistence) -> pd.DataFrame:
    """Dimension-1 pairs of the pore-phase diagram: loops of the eroded pore space.

    A loop is born at -channel_radius when balls of that radius can first travel round it,
    and dies when it is filled: at +strut_radius when it wraps a solid strut of that
    radius, or at a negative level when it closes within the pore space.
    """
    pairs = diagram.dimension(1).pairs
    pairs = pairs[pairs["persistence"] > min_persistence]
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


def _void_table(solid_diagram, spacing, min_persistence) -> pd.DataFrame:
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
    pairs = pairs[pairs["persistence"] > min_persistence]
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
def percolation_radii(distance: np.ndarray, mask: np.ndarray, axes, neighbourhood: int,
                      spacing, order=None) -> dict:
    """Axis -> (radius, critical voxel) for each of ``axes``, all from one sweep: the
    largest r such that the pore voxels at distance >= r from the solid connect the inlet
    face to the outlet face; (0, None) when the faces never join through the pore phase."""
    if order is None:
        order = _sweep.sweep_order(distance, mask)
    steps = _sweep.percolation_steps(order, mask.shape, list(axes), neighbourhood)
    found = {}
    for axis, step in steps.items():
        if step < 0:
            found[axis] = (0.0, None)
            continue
        voxel = int(order[step])
        found[axis] = (float(-distance.ravel()[voxel]),
                       _coordinates(np.array([voxel]), mask.shape, spacing)[0])
    return found


def percolation(distance: np.ndarray, mask: np.ndarray, axis: int, neighbourhood: int,
                spacing, order=None):
    """(radius, critical voxel) for one axis (:func:`percolation_radii`)."""
    return percolation_radii(distance, mask, [axis], neighbourhood, spacing, order)[axis]


def connected_fraction(pieces, phase: np.ndarray, axis: int, sample_voxels: int) -> float:
    """Fraction of the sample's volume (``sample_voxels``) in the pieces of the pore phase
    (``phase``, its :class:`._sweep.Pieces`) touching both faces of ``axis``."""
    through = np.intersect1d(pieces.on_face(phase, axis, 0), pieces.on_face(phase, axis, -1))
    return float(pieces.sizes(through).sum() / sample_voxels)


def minkowski(mask: np.ndarray, spacing, chi_pore: int, sample=None, stop=None) -> dict:
    """Minkowski functionals of the pore phase per unit volume of the sample (default: the
    scan); with ``sample`` only the interface inside it counts. ``stop`` (a
    threading.Event), once set, ends the meshing between two slabs with Cancelled."""
    sample_voxels = mask.size if sample is None else int(np.count_nonzero(sample))
    volume = sample_voxels * float(np.prod(spacing))
    if mask.ndim == 3:
        area, curvature = _minkowski.interface_measures(mask, spacing, SURFACE_SMOOTHING_VOXELS,
                                                        sample, stop)
        mean_curvature_density = curvature / volume
    else:
        soft = ndimage.gaussian_filter(mask.astype(np.float32), sigma=SURFACE_SMOOTHING_VOXELS,
                                       mode="nearest")
        area = _minkowski.boundary_length_2d(soft, spacing, sample)
        mean_curvature_density = None
    pore_voxels = np.count_nonzero(mask if sample is None else mask & sample)
    return {
        "phase": "pore",
        "volume_fraction": float(pore_voxels / sample_voxels),
        "surface_area_density": area / volume,
        "mean_curvature_density": mean_curvature_density,
        "euler_density": chi_pore / volume,
    }


def percolation_state(radius: float | None, finest: float) -> str:
    """'yes', 'not resolved' (narrowest passage one or two voxels wide), 'no', or 'not
    measured' (``radius`` None: the sample does not reach both faces)."""
    if radius is None:
        return "not measured"
    if radius <= 0:
        return "no"
    return "yes" if radius >= RESOLVED_RADIUS_VOXELS * finest else "not resolved"


def _sample_distance(scan: Scan, mask: np.ndarray, sample: np.ndarray | None) -> Scan:
    """Signed distance in the sample, float32: -d in the pores, +d in the solid, d to the
    nearest voxel centre of the other phase in the sample (outside a region of interest a
    voxel is neither, as the space beyond the scan's faces is). Without a region of
    interest this is :func:`voxtopo.filtration.signed_distance` of the pore mask, with
    both transforms in one float32 array (:func:`._edt.signed_squared_distance`)."""
    spacing = scan.spacing
    if sample is None:
        field = _edt.signed_squared_distance(mask, spacing)
        np.sqrt(field, out=field)
    else:
        # the pores' distance to the solid, then the rest's distance to the pores
        field = _edt.distance_to_nearest(~mask & sample, spacing)
        np.copyto(field, _edt.distance_to_nearest(mask & sample, spacing),
                  where=~(mask & sample))
    np.negative(field, out=field, where=mask if sample is None else mask & sample)
    return scan.with_data(field, values="distance")


def _voxel_size_notes(unit: str, chi_solid: int, solid_pieces: int | None, ndim: int) -> list[str]:
    notes = []
    if unit == "px":
        notes.append("No voxel size was given or found in the file: every length is in "
                     "voxels (px) and every density per voxel, not a physical quantity; "
                     "give the voxel size (CLI --spacing, --unit) for physical numbers.")
    if chi_solid > 1:
        pieces = "several" if solid_pieces is None else solid_pieces
        notes.append(f"The connectivity density is negative because the solid is "
                     f"{pieces} separate pieces (Euler characteristic {chi_solid} > 1): "
                     f"(1 - chi) / V assumes one connected structure and then counts its "
                     f"loops per unit {'volume' if ndim == 3 else 'area'}.")
    return notes


def pore_summary(*, notes: list, radius: dict, critical: dict, connected: dict, chi, neighbourhoods,
                 solid_pieces, volume: float, functionals: dict, tables, loops_known: bool,
                 robustness, segmentation: dict, roi_used: bool, voxels, unit: str, spacing,
                 shape, min_persistence: float, timings: dict) -> dict:
    """summary.json of a pore analysis, in memory or out of core, from its measurements.

    Adds the percolation and voxel-size notes to ``notes`` (the summary holds that list).

    Parameters
    ----------
    notes : list of str
        Notes so far; extended in place.
    radius, critical, connected : dict
        Per axis name: percolation radius (None when not measured), critical throat
        position, connected porosity.
    chi, neighbourhoods : (int, int)
        Euler characteristic and neighbourhood of the pore and solid phases.
    solid_pieces : int or None
        Number of connected pieces of the solid.
    volume : float
        Sample volume (area in 2D) in the scan's unit.
    functionals : dict
        Minkowski functionals of the pore phase.
    tables : (DataFrame, DataFrame, DataFrame, DataFrame)
        Pores, grains, loops and voids.
    loops_known : bool
        False when the loops (dimension-1 pairs of a volume) were not computed.
    robustness : (float, float)
        Boundary tolerance and the persistence above which a feature is robust.
    segmentation : dict
        How the pore phase was chosen (method, threshold, pores).
    roi_used : bool
        Whether a region of interest bounded the sample.
    voxels : (int, int, int)
        Pore voxels, sample voxels, voxels of the scan.
    unit : str
    spacing, shape : sequence
    min_persistence : float
    timings : dict
        Seconds per stage.

    Returns
    -------
    dict
    """
    pores, grains, loops, voids = tables
    chi_pore, chi_solid = chi
    n_pore, n_solid = neighbourhoods
    delta, robust_above = robustness
    pore_voxels, sample_voxels, scan_voxels = voxels
    ndim = len(shape)
    finest = min(spacing)
    unresolved = [a for a, r in radius.items() if percolation_state(r, finest) == "not resolved"]
    if unresolved:
        notes.append(f"Percolation along {', '.join(unresolved)} is not resolved: the "
                     f"narrowest passage has a radius below {RESOLVED_RADIUS_VOXELS} voxels "
                     f"({RESOLVED_RADIUS_VOXELS * finest:.4g} {unit}), one or two voxels "
                     f"wide, so the scan cannot tell whether it is open.")
    unmeasured = [a for a, r in radius.items() if r is None]
    if unmeasured:
        notes.append(f"Percolation along {', '.join(unmeasured)} is not measured: the "
                     f"sample (region of interest) does not reach both faces of the scan "
                     f"along that axis.")
    notes += _voxel_size_notes(unit, chi_solid, solid_pieces, ndim)
    density_unit = f"1/voxel^{ndim} (no voxel size)" if unit == "px" else f"1/{unit}^{ndim}"
    robust = _robust_counts(pores, grains, loops, voids)
    if not loops_known:
        robust["loops"] = None
    return {
        "porosity": float(pore_voxels / sample_voxels),
        "connected_porosity": connected,
        "percolates": {a: percolation_state(r, finest) for a, r in radius.items()},
        "percolation_radius": {a: (r if r else None) for a, r in radius.items()},
        "critical_throat": {a: (None if c is None else [float(v) for v in c])
                            for a, c in critical.items()},
        "euler_characteristic": {"pore": chi_pore, "solid": chi_solid,
                                 "neighbourhood": {"pore": n_pore, "solid": n_solid}},
        "connectivity_density": {"value": (1 - chi_solid) / volume, "phase": "solid",
                                 "neighbourhood": n_solid, "unit": density_unit,
                                 "solid_pieces": solid_pieces,
                                 "formula": "(1 - euler_characteristic of the solid) / "
                                            "sample volume (Odgaard & Gundersen 1993)"},
        "minkowski": functionals,
        "counts": {
            "what": f"dimension-0 features (pores, grains) and pairs (loops, voids) of the "
                    f"signed distance living longer than min_persistence = "
                    f"{min_persistence:.4g} {unit}; loops and voids count the crossing "
                    f"pairs (features of the segmented mask itself)"
                    + ("" if loops_known else "; loops are not computed out of core (the "
                                              "Betti curves give their number at each level)"),
            "pores": int(len(pores)), "pores_at_border": int(pores["border"].sum()),
            "isolated_pores": int(pores["isolated"].sum()),
            "grains": int(len(grains)), "grains_at_border": int(grains["border"].sum()),
            "loops": int((loops["kind"] == "crossing").sum()) if loops_known else None,
            "voids": int((voids["kind"] == "crossing").sum()),
            "loops_in_filtration": int(len(loops)) if loops_known else None,
            "voids_in_filtration": int(len(voids)),
            "robust": robust,
        },
        "robustness": {"method": sig.ROBUST_METHOD, "boundary_tolerance": delta,
                       "unit": unit, "threshold": robust_above, "robust": robust,
                       "essential_classes": "never die; always robust"},
        "segmentation": segmentation,
        "threshold": segmentation.get("threshold"),
        "threshold_method": segmentation["method"],
        "region_of_interest": ({"voxels": sample_voxels,
                                "fraction_of_scan": sample_voxels / scan_voxels}
                               if roi_used else None),
        "unit": unit,
        "voxel_size_known": unit != "px",
        "spacing": list(spacing),
        "shape": list(shape),
        "sample_volume": volume,
        "min_persistence": float(min_persistence),
        "radius_convention": "distances between voxel centres (pore voxel to nearest solid "
                             "voxel centre); no half-voxel correction; good to about one "
                             "voxel",
        "timings_seconds": {k: round(v, 4) for k, v in timings.items()},
        "notes": notes,
        "cautions": cautions(spacing, unit),
    }


def estimate(shape, dtype=np.uint8, *, neighbourhood: int | None = None,
             engine: str = "auto", roi: bool = False, mapped: bool = False) -> int:
    """Bytes a pore analysis (:func:`analyse`, `voxtopo pores`) of a scan will need at its
    peak, the scan itself included.

    Parameters
    ----------
    shape : tuple of int
        Shape of the scan, (y, x) or (z, y, x).
    dtype : numpy dtype
        Type of the scan as read (uint8 for a mask, uint16 for a gray scan, ...).
    neighbourhood : {4, 8} in 2D, {6, 26} in 3D, optional
        Connectivity of the pore phase (default 8 / 26).
    engine : {"auto", "voxtopo", "gudhi"}
        Persistence engine; its own plan (:func:`voxtopo.engine.estimate`) is used.
    roi : bool
        A region of interest is given (it adds its mask and a second float32 field).
    mapped : bool
        The scan is a gray or label scan mapped from its file (``load(..., mapped=True)``),
        whose memory is given back once it is segmented: only the pore mask is held
        through the run.

    Returns
    -------
    int
        Bytes of the largest of the run's steps, each with what is held through it.

    Notes
    -----
    Held through the run: the scan (unless ``mapped``) and the pore mask, with the
    interpreter and its libraries. On top of them, one step at a time:

    - the segmentation, which holds the scan and makes the mask;

    - the persistence runs of both phases, on the float32 signed distance held as
      uint16 level numbers (:func:`voxtopo.engine._levels.float_levels`; planned for at
      most 65534 distinct distances) and a calibrated share of the engine's estimate for
      the larger of the two runs (its plan covers gray images with many more pairs);
      with a region of interest the float32 field, a second one (the outside levels),
      the region's masks, and the engine's own levels of that field;
    - the sweeps of one phase on the float32 signed distance (the order of its voxels
      and one union-find index per voxel, which also gives its connected pieces), with
      the integral geometry beside them on a second thread (one slab's mesh at a time).

    The constants are calibrated on the peaks of benchmarks/bench_pores.py (see there).

    Examples
    --------
    >>> import numpy as np
    >>> from voxtopo.porosity import estimate
    >>> estimate((512, 512, 512), np.uint8) < estimate((1024, 1024, 1024), np.uint8)
    True
    """
    shape = tuple(int(n) for n in shape)
    voxels = int(np.prod(shape, dtype=np.int64))
    n_pore, _ = construction_of(len(shape), neighbourhood)
    index = index_dtype(voxels).itemsize
    scan = np.dtype(dtype).itemsize
    held = voxels * (1 if mapped else scan + 1)
    segmentation = voxels * scan if mapped else 0
    # a region of interest: its mask, the pore phase and the border rim (3 bytes), and
    # the room in the sample during the sweeps (float32)
    roi_masks = voxels * 3 if roi else 0
    runs = max(_engine.estimate(shape, np.uint16, engine=engine, neighbourhood=n)
               for n in (n_pore, COMPLEMENT[n_pore]))
    persistence_runs = voxels * 2 + _ENGINE_PLAN_SHARE * runs
    if roi:
        persistence_runs += roi_masks + voxels * (4 + 4)
    # the order of one phase's voxels (planned for all of them), one union-find index per
    # voxel and three bits, with a region of interest the solid's mask; beside them the
    # integral geometry's thread holds one slab's mesh (its Euler count holds nothing)
    sweeps = voxels * (4 + 2 * index + 3 / 8 + (1 + 4 if roi else 0)) + roi_masks
    if len(shape) == 3:
        sweeps += _minkowski.slab_bytes(shape)
    return int(_BASE_BYTES + held + max(segmentation, persistence_runs, sweeps))


def _integral_geometry(mask, sample, spacing, neighbourhoods, stop):
    """((chi_pore, chi_solid), Minkowski functionals, seconds) of the phases of ``mask``
    within ``sample``; ``stop`` (an Event) set ends it between two slabs."""
    clock = time.perf_counter()
    chi = _euler.phase_euler_characteristics(mask, neighbourhoods, sample)
    functionals = minkowski(mask, spacing, chi[0], sample, stop=stop)
    return chi, functionals, time.perf_counter() - clock


def _features(field, mask, sample, pore, diagram, solid_diagram, neighbourhoods, spacing,
              min_persistence, robust_above, axes, sample_voxels, timings, step):
    """The feature tables, percolation and connected porosity of both phases, one phase
    at a time; adds the seconds of ``features`` and ``percolation`` to ``timings``.

    Returns (pores, grains, loops, voids, radius, critical, connected, solid_pieces,
    pore_rows)."""
    n_pore, n_solid = neighbourhoods
    names = AXES_3D[3 - mask.ndim:]
    step("pores and grains", 0.0)
    clock = time.perf_counter()
    edge = room_in_sample = None
    if sample is not None:
        rim = sample & ~ndimage.binary_erosion(sample, border_value=1)
        edge = rim.ravel()
        del rim
        room_in_sample = _edt.distance_to_nearest(~sample, spacing)
    pore_order = _sweep.sweep_order(field, pore)
    pores, pieces = _phase_table(_rows_of_dimension(diagram, 0), field, pore, n_pore, spacing,
                                 False, min_persistence, ("body", "throat"), pore_order, edge,
                                 room_in_sample)
    faces_in_sample = {a: sample is None or (np.take(sample, 0, axis=a).any()
                                             and np.take(sample, -1, axis=a).any())
                       for a in axes}
    connected = {names[a]: (connected_fraction(pieces, pore, a, sample_voxels)
                            if faces_in_sample[a] else None) for a in axes}
    del pieces
    timings["features"] = time.perf_counter() - clock

    step("percolation", 0.0)
    clock = time.perf_counter()
    found = percolation_radii(field, pore, [a for a in axes if faces_in_sample[a]], n_pore,
                              spacing, pore_order)
    del pore_order
    radius = {names[a]: found[a][0] if a in found else None for a in axes}
    critical = {names[a]: found[a][1] if a in found else None for a in axes}
    step("percolation", 1.0)
    timings["percolation"] = time.perf_counter() - clock

    clock = time.perf_counter()
    # the solid of a whole scan is swept as the voxels where the mask is False
    solid, member = (mask, False) if sample is None else (~mask & sample, True)
    grains, pieces = _phase_table(_rows_of_dimension(solid_diagram, 0), field, solid, n_solid,
                                  spacing, True, min_persistence, ("body", "neck"), None, edge,
                                  room_in_sample, member=member)
    solid_pieces = pieces.count()
    del pieces, solid, room_in_sample, edge
    pores, grains, loops, voids, pore_rows = finished_tables(
        pores, grains, diagram, solid_diagram, spacing, min_persistence, robust_above)
    timings["features"] += time.perf_counter() - clock
    return pores, grains, loops, voids, radius, critical, connected, solid_pieces, pore_rows


# ------------------------------------------------------------------------------ analyse
def analyse(mask_or_scan, *, threshold=None, pores_bright: bool = False, label=None,
            roi=None, spacing=None, unit=None, axis=None, neighbourhood: int | None = None,
            min_persistence: float | None = None, engine: str = "auto",
            boundary_tolerance: float | None = None, progress=None) -> PoreAnalysis:
    """Pore bodies, throats, grains, percolation and integral geometry of a two-phase scan.

    Parameters
    ----------
    mask_or_scan : ndarray or Scan
        A binary mask (True, or 1, marks pore), a label image (with ``label``) or a
        grayscale scan (with ``threshold``); 2D (y, x) or 3D (z, y, x). A threshold on a
        binary mask is refused: it could only keep or swap the two phases.
    threshold : float or "otsu", optional
        Segment a grayscale scan: pores are the voxels at or below it (above it with
        ``pores_bright``). "otsu" picks the value by Otsu's method; the value used is in
        the summary.
    pores_bright : bool
        With ``threshold``: the pores are the bright phase.
    label : int, optional
        The pore label of a label image.
    roi : ndarray or Scan, optional
        Region of interest on the same grid: True (or 1) marks the sample. Outside it a
        voxel is neither pore nor solid: porosity, percolation, sizes, Euler
        characteristics and connectivity density count only the sample, and a pore or
        grain reaching its edge is flagged ``border`` as at the scan's faces.
    spacing, unit : optional
        Voxel size in (z, y, x) order and its unit; they win over the Scan's own.
    axis : "z", "y", "x", int or a list of them, optional
        Axes along which to measure percolation and connected porosity (default all).
    neighbourhood : 26 or 6 (3D), 8 or 4 (2D), optional
        Connectivity of the pore phase; default 26 / 8 (voxels touching at a corner are
        connected). The solid takes the complementary 6 / 4, so that the two phases'
        Euler characteristics and diagrams agree with each other.
    min_persistence : float, optional
        The shortest lifetime kept: a pore (grain) whose body radius exceeds its throat
        (neck) radius by no more than this is a ripple of the distance map and stays part
        of the feature it drains into; default half the finest spacing. Loops and voids use
        it as a persistence cut.
    engine : {"auto", "voxtopo", "gudhi"}
        Persistence engine, as in :func:`voxtopo.persistence`; the diagram is the same.
    boundary_tolerance : float, optional
        How far the segmented boundary may be off, in the scan's unit (default one voxel,
        the largest spacing). A feature living longer than
        ``2 (boundary_tolerance + h sqrt(d))`` is ``robust``: it survives every such
        segmentation (:func:`voxtopo.significance.robust_flags`).
    progress : callable(phase, fraction), optional
        Called as work advances; raise voxtopo.Cancelled inside it to stop.

    Returns
    -------
    PoreAnalysis
        ``pores``: one row per pore, the largest first: ``id, body_radius, body_z, body_y,
        body_x, throat_radius, throat_z, throat_y, throat_x, border, lifetime`` then
        ``body_volume`` (``body_area`` in 2D: the voxels the pore drains before it joins a
        larger one) and ``isolated`` (a closed pore: its connected piece of the pore
        phase holds no other pore and reaches no border of the scan or sample), then
        ``body_voxel_z, body_voxel_y, body_voxel_x``: the voxel indices of the body centre.
        ``grains``: the same for the solid with ``neck`` for ``throat``. ``loops`` and
        ``voids``: see Notes. Every table has ``robust`` after ``lifetime``, and
        ``diagram`` / ``solid_diagram`` a ``robust`` column (see ``boundary_tolerance``).
        ``summary``: porosity, percolation, integral geometry and ``robustness`` (method,
        boundary tolerance, threshold, robust counts).

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
    tables hold every pair of the filtration above ``min_persistence`` with its ``kind``.

    ``border`` is True when the pore's basin holds a voxel of the scan's outer layer, or
    its inscribed ball is not inside the scan's box (the outer voxel faces): the pore is cut
    by the field of view, and its size is not to be trusted.

    Percolation along an axis: the largest radius r such that the pore voxels with
    ``-f >= r`` connect the first slice to the last, found by one union-find sweep in order
    of decreasing distance with the two faces as virtual nodes. ``percolates`` says "yes",
    "no", "not resolved" when r is below 1.5 voxels (the narrowest passage is one or two
    voxels wide) or "not measured" when the sample does not reach both faces. Connected
    porosity: the volume fraction of pore components (at level 0) touching both faces.

    Euler characteristics are counted on the cubical complex of each phase with its
    neighbourhood; connectivity density ``(1 - chi_solid) / V`` is that of the solid
    (for bone: the trabecular structure), taken as one component; it is negative when the
    solid is several pieces, and the summary's notes say so.

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
    {'z': 'yes'}
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
    spacing = scan.spacing
    if min_persistence is None:
        min_persistence = 0.5 * min(spacing)
    elif not (np.isfinite(min_persistence) and min_persistence >= 0):
        raise InputError(f"min_persistence must be a length >= 0 in {scan.unit}, got "
                         f"{min_persistence}.")
    delta = sig.boundary_tolerance_of(scan, boundary_tolerance)
    robust_above = sig.robust_threshold(scan, delta)
    sample = region_of_interest(roi, scan.shape, where)
    # a gray or label scan mapped from its file is not held once it is segmented
    segmented = threshold is not None or label is not None
    released = segmented and is_mapped(scan.data)
    planned = estimate(scan.shape, scan.data.dtype, neighbourhood=n_pore, engine=engine,
                       roi=sample is not None, mapped=released)
    what = f"Pore analysis of the {'x'.join(map(str, scan.shape))} scan"
    ensure_fits(planned, what, REMEDY)
    mask, segmentation = pore_mask(scan, threshold=threshold, pores_bright=pores_bright,
                                   label=label, sample=sample)
    if released:
        release_pages(scan.data)
    # without a region of interest the pore phase is the mask itself and the solid its
    # complement, made only while a step needs it
    pore = mask if sample is None else mask & sample
    sample_voxels = mask.size if sample is None else int(np.count_nonzero(sample))
    pore_voxels = int(np.count_nonzero(pore))
    notes = list(scan.metadata.get("notes", [])) + _phase_notes(
        pore_voxels, sample_voxels - pore_voxels, sample_voxels, mask.size, where,
        segmentation)
    timings["segmentation"] = time.perf_counter() - clock
    # an allocation that fails after the plan said it fits is still one sentence
    with reported_as_too_big(what, planned, REMEDY):

        def step(name, fraction):
            if progress is not None:
                progress(name, fraction)

        step("distance transform", 0.0)
        clock = time.perf_counter()
        distance = _sample_distance(scan, mask, sample)
        field = distance.data
        level_values = None
        if sample is None:
            pore_field = solid_field = distance
            # held as level numbers through the persistence runs (2 bytes a voxel instead
            # of the float32's 4; a distance transform has few distinct values), and made
            # again from them afterwards, exactly
            numbered = float_levels(field)
            if numbered is not None:
                levels, level_values = numbered
                del numbered, field
                pore_field = solid_field = distance = distance.with_data(levels)
                del levels
        else:
            # the outside enters each sweep last, so no feature of the sample passes through it
            outside_level = float(np.abs(field).max()) + 2 * max(spacing)
            pore_field = distance.with_data(np.where(sample, field, np.float32(outside_level)))
        timings["distance_transform"] = time.perf_counter() - clock

        clock = time.perf_counter()
        # planned above as part of the whole analysis, so not checked again on their own
        diagram = persistence(pore_field, neighbourhood=n_pore, engine=engine, progress=progress,
                              memory_checked=True, level_values=level_values)
        if sample is not None:
            solid_field = pore_field.with_data(np.negative(pore_field.data, out=pore_field.data))
            np.copyto(solid_field.data, field, where=sample)
        solid_diagram = persistence(solid_field, superlevel=True, neighbourhood=n_solid,
                                    engine=engine, progress=progress, memory_checked=True,
                                    level_values=level_values)
        del pore_field, solid_field
        if level_values is not None:
            field = level_values[distance.data]
            distance = distance.with_data(field)
        if sample is not None:
            diagram = diagram.without_outside(outside_level)
            solid_diagram = solid_diagram.without_outside(-outside_level)
        diagram = sig.robust_flags(diagram, delta)
        solid_diagram = sig.robust_flags(solid_diagram, delta)
        timings["persistence"] = time.perf_counter() - clock

        # the integral geometry needs only the mask (and one slab's mesh at a time): it
        # runs on the second core while the sweeps run here, one phase at a time, each
        # with one union-find array besides its sweep order
        step("integral geometry", 0.0)
        stop = threading.Event()
        with ThreadPoolExecutor(max_workers=1) as background:
            geometry = background.submit(_integral_geometry, mask, sample, spacing,
                                         (n_pore, n_solid), stop)
            try:
                features = _features(field, mask, sample, pore, diagram, solid_diagram,
                                     (n_pore, n_solid), spacing, min_persistence,
                                     robust_above, axes, sample_voxels, timings, step)
            except BaseException:
                stop.set()
                raise
            (chi_pore, chi_solid), functionals, timings["integral_geometry"] = \
                geometry.result()
        step("integral geometry", 1.0)
        (pores, grains, loops, voids, radius, critical, connected, solid_pieces,
         pore_rows) = features
        volume = sample_voxels * float(np.prod(spacing))

        summary = pore_summary(
            notes=notes, radius=radius, critical=critical, connected=connected,
            chi=(chi_pore, chi_solid), neighbourhoods=(n_pore, n_solid),
            solid_pieces=solid_pieces, volume=volume, functionals=functionals,
            tables=(pores, grains, loops, voids), loops_known=True, robustness=(delta,
            robust_above), segmentation=segmentation, roi_used=sample is not None,
            voxels=(pore_voxels, sample_voxels, mask.size), unit=scan.unit, spacing=spacing,
            shape=mask.shape, min_persistence=min_persistence, timings=timings)
        summary["timings_note"] = ("integral_geometry runs on a second thread beside features "
                                   "and percolation: their seconds overlap, and the stages "
                                   "add up to more than the run's wall time")
        return PoreAnalysis(pores=pores, grains=grains, loops=loops, voids=voids, summary=summary,
                            diagram=diagram, solid_diagram=solid_diagram, mask=mask,
                            distance=distance, critical_throats=critical, sample=sample,
                            pore_rows=pore_rows)
