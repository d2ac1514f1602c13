"""Sampling high-contrast k x k patches from images and volume slices."""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import InputError
from ..memory import ensure_fits
from ..scan import Scan
from ._basis import check_patch_size
from ._contrast import d_norm, normalise

AXIS_NAMES = {"z": 0, "y": 1, "x": 2}

#: Columns of ``Patches.origin``: which input, which slice of it (-1 for a 2D image), and
#: the row and column of the patch's top-left pixel in that image or slice.
ORIGIN_COLUMNS = ("source", "slice", "row", "column")


@dataclass(frozen=True)
class Patches:
    """A cloud of normalised high-contrast patches and where each came from.

    Attributes
    ----------
    k : int
        Patch size (k x k pixels).
    coordinates : ndarray, shape (n, k*k - 1)
        DCT coordinates of each patch; every row has unit length (the cloud lies on the
        sphere S^(k*k - 2), the 7-sphere for 3 x 3 patches).
    patches : ndarray, shape (n, k, k)
        The patches after centring and division by their D-norm (zero mean, unit D-norm).
    contrast : ndarray, shape (n,)
        D-norm of each patch before normalisation (of log values when ``log`` was on).
    origin : ndarray of int, shape (n, 4)
        ``source, slice, row, column`` of each patch (see ``ORIGIN_COLUMNS``).
    sources : tuple of str
        The inputs, in the order ``origin[:, 0]`` counts them.
    parameters : dict
        How the cloud was made (k, contrast_percent, positions, seed, log, axis, slices).
    counts : dict
        Patch positions available, sampled, left out by the mask, flat (zero contrast), kept.
    neighbour_distance : ndarray or None
        Distance to the k-th nearest neighbour, once :func:`core` has measured it.
    """

    k: int
    coordinates: np.ndarray
    patches: np.ndarray
    contrast: np.ndarray
    origin: np.ndarray
    sources: tuple[str, ...]
    parameters: dict = field(default_factory=dict)
    counts: dict = field(default_factory=dict)
    neighbour_distance: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.coordinates)

    def subset(self, indices, **changes) -> "Patches":
        """The patches at ``indices`` (an index array or boolean mask), in that order.

        Parameters
        ----------
        indices : array_like of int or bool
            Which patches to keep.
        **changes
            Other fields of the new cloud (``counts``, ``parameters``, ...).

        Returns
        -------
        Patches
            A new cloud with the chosen rows of every per-patch array.
        """
        indices = np.asarray(indices)
        distance = None if self.neighbour_distance is None else self.neighbour_distance[indices]
        fields = {"coordinates": self.coordinates[indices], "patches": self.patches[indices],
                  "contrast": self.contrast[indices], "origin": self.origin[indices],
                  "neighbour_distance": distance}
        fields.update(changes)
        return replace(self, **fields)

    def describe(self) -> dict:
        """Parameters, counts and sources as JSON values."""
        return {"k": self.k, "points": len(self), "dimension": int(self.coordinates.shape[1]),
                "sources": list(self.sources), "parameters": dict(self.parameters),
                "counts": dict(self.counts), "origin_columns": list(ORIGIN_COLUMNS)}

    def save(self, folder, name: str = "cloud") -> None:
        """Write ``<name>.npy`` (coordinates), ``<name>_patches.npy``,
        ``<name>_origin.npy`` and ``<name>.json`` (parameters and sources) into ``folder``.

        Parameters
        ----------
        folder : str or Path
            An existing folder.
        name : str
            The files' stem.
        """
        folder = Path(folder)
        np.save(folder / f"{name}.npy", self.coordinates)
        np.save(folder / f"{name}_patches.npy", self.patches)
        np.save(folder / f"{name}_origin.npy", self.origin)
        (folder / f"{name}.json").write_text(json.dumps(self.describe(), indent=2))


@dataclass(frozen=True)
class _Plane:
    """One 2D picture to cut patches from: an image, or one slice of a volume."""

    values: np.ndarray
    source: int
    slice: int
    blocked: np.ndarray | None


def sample(images_or_scans, k: int = 3, *, axis=None, slices=None, positions="all",
           seed: int = 0, log: bool = False, mask=None,
           contrast_percent: float = 20.0) -> Patches:
    """Sample k x k patches, keep the high-contrast ones and normalise them.

    Parameters
    ----------
    images_or_scans : ndarray, Scan, or a list of them
        Gray 2D images (y, x) and/or 3D volumes (z, y, x).
    k : int
        Patch size: 3, 5 or 7.
    axis : int or {"z", "y", "x"}, optional
        Axis along which volumes are cut into slices; z (0) when not given. A 3D input
        whose last axis has 3 or 4 entries is taken for a colour image and refused unless
        ``axis`` is given.
    slices : sequence of int, optional
        Which slices of each volume to use; all when not given.
    positions : "all" or int
        Every patch position, or this many positions drawn at random (without
        replacement, seeded by ``seed``) from all images and slices together.
    seed : int
        Seed of the random draw of positions.
    log : bool
        Use log intensities, ``log(1 + value)`` (values must not be negative), as Lee,
        Pedersen & Mumford did.
    mask : ndarray of bool or a list of them, optional
        True where the image must not be used; patches that touch a True pixel are left
        out. One mask per input, each of the input's shape.
    contrast_percent : float
        Keep this percentage of the sampled patches with the highest D-norm, separately in
        each image or slice (so that one bright picture does not supply them all).

    Returns
    -------
    Patches
        The normalised high-contrast patches with their DCT coordinates on the unit sphere.

    Notes
    -----
    Contrast is the D-norm: the square root of the sum of squared differences over the
    4-neighbour pixel pairs of the patch. Kept patches are centred (mean subtracted),
    divided by their D-norm and written in the DCT basis of :func:`dct_basis`. Patches of
    zero contrast cannot be normalised and are never kept.

    References
    ----------
    Lee, Pedersen & Mumford (2003), "The nonlinear statistics of high-contrast patches in
    natural images", International Journal of Computer Vision 54.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> cloud = sample(rng.random((64, 64)), k=3, contrast_percent=20)
    >>> len(cloud), cloud.coordinates.shape[1]
    (769, 8)
    >>> bool(np.allclose(np.linalg.norm(cloud.coordinates, axis=1), 1.0))
    True
    """
    k = check_patch_size(k)
    contrast_percent = _check_percent(contrast_percent, "contrast_percent")
    inputs, names = _as_inputs(images_or_scans, volume_axis_given=axis is not None)
    masks = _as_masks(mask, inputs, names)
    axis_index = _check_axis(axis)
    planes = []
    for index, (values, name) in enumerate(zip(inputs, names)):
        _check_values(values, name, k, log, axis_index)
        planes.extend(_planes(values, index, name, axis_index, slices, masks[index]))
    available = [_open_positions(plane, k) for plane in planes]
    total = int(sum(len(a) for a in available))
    if total == 0:
        raise InputError(f"Every {k}x{k} patch position touches the mask in "
                         f"{_listing(names)}; give a mask that leaves some of the image free.")
    chosen = _choose_positions(available, positions, seed, total)
    n_sampled = int(sum(len(c) for c in chosen))
    ensure_fits(n_sampled * k * k * 8 * 4, f"Sampling {n_sampled} patches of {k}x{k} pixels",
                "sample fewer positions (positions=N)")
    kept_patches, kept_contrast, kept_origin = [], [], []
    flat = 0
    for plane, flat_positions in zip(planes, chosen):
        if len(flat_positions) == 0:
            continue
        values = np.log1p(plane.values) if log else plane.values
        width = plane.values.shape[1] - k + 1
        rows, cols = np.divmod(flat_positions, width)
        windows = sliding_window_view(values, (k, k))[rows, cols].astype(np.float64)
        contrast = d_norm(windows)
        n_keep = int(np.ceil(len(windows) * contrast_percent / 100.0))
        # stable sort: among equal contrast the earlier position wins, so runs repeat
        order = np.argsort(-contrast, kind="stable")[:n_keep]
        positive = order[contrast[order] > 0]
        flat += len(order) - len(positive)
        kept_patches.append(windows[positive])
        kept_contrast.append(contrast[positive])
        kept_origin.append(np.column_stack([
            np.full(len(positive), plane.source), np.full(len(positive), plane.slice),
            rows[positive], cols[positive]]).astype(np.int64))
    n_kept = int(sum(len(c) for c in kept_contrast))
    if n_kept == 0:
        raise InputError(f"No high-contrast patches in {_listing(names)}: every sampled "
                         f"{k}x{k} patch is flat (a constant image?); give images with "
                         f"edges or texture.")
    raw = np.concatenate(kept_patches)
    contrast = np.concatenate(kept_contrast)
    unit, coordinates = normalise(raw, contrast)
    parameters = {"k": k, "contrast_percent": contrast_percent,
                  "positions": positions if positions == "all" else int(positions),
                  "seed": int(seed), "log": bool(log),
                  "axis": None if axis_index is None else "zyx"[axis_index],
                  "slices": None if slices is None else [int(s) for s in slices],
                  "masked": mask is not None}
    counts = {"positions_available": total, "sampled": n_sampled,
              "left_out_by_mask": int(sum(_position_count(p, k) for p in planes) - total),
              "flat_among_top": int(flat), "kept": n_kept}
    return Patches(k=k, coordinates=coordinates, patches=unit, contrast=contrast,
                   origin=np.concatenate(kept_origin), sources=tuple(names),
                   parameters=parameters, counts=counts)


def _check_percent(value, name: str) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number between 0 and 100, got {value!r}.")
    if not 0 < value <= 100:
        raise InputError(f"{name} must be more than 0 and at most 100, got {value}.")
    return value


def _as_inputs(images_or_scans, volume_axis_given: bool):
    items = images_or_scans if isinstance(images_or_scans, (list, tuple)) else [images_or_scans]
    if len(items) == 0:
        raise InputError("No images were given; pass a 2D image, a 3D volume or a list.")
    inputs, names = [], []
    for i, item in enumerate(items):
        if isinstance(item, Scan):
            array, name = item.data, item.source or f"input {i}"
        else:
            array, name = np.asarray(item), f"input {i}"
        if array.ndim == 3 and array.shape[-1] in (3, 4) and not volume_axis_given:
            raise InputError(f"{name} has shape {array.shape}, which looks like a colour "
                             f"image; convert it to gray first (for instance with "
                             f"skimage.color.rgb2gray), or name the slicing axis if it "
                             f"is a volume.")
        if array.ndim not in (2, 3):
            raise InputError(f"{name} has shape {array.shape}; patches come from gray 2D "
                             f"images (y, x) or 3D volumes (z, y, x).")
        inputs.append(array)
        names.append(name)
    return inputs, names


def _as_masks(mask, inputs, names):
    if mask is None:
        return [None] * len(inputs)
    masks = list(mask) if isinstance(mask, (list, tuple)) else [mask]
    if len(masks) != len(inputs):
        raise InputError(f"Got {len(masks)} masks for {len(inputs)} inputs; give one mask "
                         f"per input (None for an input without one).")
    out = []
    for m, values, name in zip(masks, inputs, names):
        if m is None:
            out.append(None)
            continue
        m = np.asarray(m)
        if m.shape != values.shape:
            raise InputError(f"The mask for {name} has shape {m.shape} but the input has "
                             f"shape {values.shape}; give a mask of the same shape.")
        out.append(m.astype(bool))
    return out


def _check_axis(axis):
    if axis is None:
        return None
    if isinstance(axis, str) and axis in AXIS_NAMES:
        return AXIS_NAMES[axis]
    if isinstance(axis, (int, np.integer)) and not isinstance(axis, bool) and 0 <= axis <= 2:
        return int(axis)
    raise InputError(f"axis must be 0, 1, 2 or 'z', 'y', 'x', got {axis!r}.")


def _check_values(values, name, k, log, axis_index):
    if values.dtype.kind not in "biuf":
        raise InputError(f"{name} holds {values.dtype} values; patches need gray numbers.")
    if values.dtype.kind == "f" and not np.isfinite(values).all():
        raise InputError(f"{name} contains NaN or infinite values; fill or crop them first "
                         f"(voxtopo.filtration can fill invalid values).")
    if log and values.dtype.kind in "if" and values.min() < 0:
        raise InputError(f"{name} has negative values (minimum {values.min():g}), so log "
                         f"intensities are undefined; shift the values or leave log off.")
    plane_shape = values.shape if values.ndim == 2 else \
        tuple(s for a, s in enumerate(values.shape) if a != (axis_index or 0))
    if min(plane_shape) < k:
        raise InputError(f"{name} has images of {plane_shape[0]}x{plane_shape[1]} pixels, "
                         f"smaller than a {k}x{k} patch; use a larger image or a smaller k.")


def _planes(values, index, name, axis_index, slices, mask):
    if values.ndim == 2:
        if slices is not None:
            raise InputError(f"slices were given but {name} is a 2D image; slices apply to "
                             f"volumes only.")
        return [_Plane(values.astype(np.float64, copy=False), index, -1, mask)]
    axis_index = 0 if axis_index is None else axis_index
    depth = values.shape[axis_index]
    chosen = range(depth) if slices is None else slices
    planes = []
    for s in chosen:
        if isinstance(s, bool) or not isinstance(s, (int, np.integer)) or not 0 <= s < depth:
            raise InputError(f"Slice {s!r} is outside {name}, which has {depth} slices "
                             f"along axis {'zyx'[axis_index]} (0 to {depth - 1}).")
        plane = np.take(values, int(s), axis=axis_index).astype(np.float64)
        blocked = None if mask is None else np.take(mask, int(s), axis=axis_index)
        planes.append(_Plane(plane, index, int(s), blocked))
    return planes


def _position_count(plane: _Plane, k: int) -> int:
    h, w = plane.values.shape
    return (h - k + 1) * (w - k + 1)


def _open_positions(plane: _Plane, k: int) -> np.ndarray:
    """Flat indices (row * width + column) of top-left corners of patches that touch no
    masked pixel; a summed-area table counts the masked pixels under every window."""
    h, w = plane.values.shape
    if plane.blocked is None:
        return np.arange((h - k + 1) * (w - k + 1), dtype=np.int64)
    table = np.zeros((h + 1, w + 1), dtype=np.int64)
    table[1:, 1:] = plane.blocked.astype(np.int64).cumsum(0).cumsum(1)
    under = table[k:, k:] - table[:-k, k:] - table[k:, :-k] + table[:-k, :-k]
    return np.flatnonzero(under.ravel() == 0).astype(np.int64)


def _choose_positions(available, positions, seed, total):
    if isinstance(positions, str):
        if positions != "all":
            raise InputError(f"positions must be 'all' or a number of patches, "
                             f"got {positions!r}.")
        return available
    if isinstance(positions, bool) or not isinstance(positions, (int, np.integer)) \
            or positions < 1:
        raise InputError(f"positions must be 'all' or a positive whole number, "
                         f"got {positions!r}.")
    if positions > total:
        raise InputError(f"positions={positions} is more than the {total} patch positions "
                         f"the input offers; ask for at most {total} or 'all'.")
    rng = np.random.default_rng(seed)
    picked = np.sort(rng.choice(total, size=int(positions), replace=False))
    starts = np.cumsum([0] + [len(a) for a in available])
    return [a[picked[(picked >= lo) & (picked < hi)] - lo]
            for a, lo, hi in zip(available, starts[:-1], starts[1:])]


def _listing(names) -> str:
    return names[0] if len(names) == 1 else f"the {len(names)} inputs"
