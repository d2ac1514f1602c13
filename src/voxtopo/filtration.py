"""Filtrations: what the engine sweeps through.

Grayscale values are used as they are (sublevel sweeps dark to bright, superlevel bright to
dark; the choice is made in :func:`voxtopo.persistence`). This module prepares them:
smoothing in physical units, cropping, block-mean downsampling, thresholds, the signed
distance transform of a two-phase mask, and handling of invalid (NaN) voxels.

Sign of the signed distance transform::

      solid  solid | pore  pore  pore | solid
       +2     +1   |  -1    -2    -1  |  +1      (spacing 1)

Pore voxels (mask True) carry minus the distance to the nearest solid voxel centre, solid
voxels plus the distance to the nearest pore voxel centre. A sublevel sweep of this field
therefore meets the middle of the largest pores first: pore bodies are born at minus their
inscribed radius and merge at minus the radius of the throat that joins them.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from .errors import InputError
from .memory import ensure_fits
from .scan import Scan, as_scan

__all__ = ["smooth", "crop", "parse_box", "downsample", "threshold", "signed_distance",
           "check_finite", "fill_invalid", "smoothing_bytes", "downsampling_bytes",
           "distance_bytes", "binary_foreground", "region_of_interest", "outside_last"]

#: What to do when a preparation step would not fit in memory.
PREPARATION_REMEDY = "crop it (--crop) or downsample it (--downsample) first"


def _voxels(shape) -> int:
    return int(np.prod(shape, dtype=np.int64))


def _shape_text(shape) -> str:
    return "x".join(map(str, shape))


def smoothing_bytes(shape, dtype) -> int:
    """Bytes :func:`smooth` allocates beyond the scan: a float32 copy of the values (unless
    they are float32 already) and the float32 result (measured with tracemalloc: 4 and 8
    bytes per voxel).

    Parameters
    ----------
    shape : tuple of int
        The scan's shape.
    dtype : numpy dtype
        The scan's type.

    Returns
    -------
    int

    Examples
    --------
    >>> smoothing_bytes((10, 10), "float32"), smoothing_bytes((10, 10), "uint16")
    (400, 800)
    """
    copy = 0 if np.dtype(dtype) == np.float32 else 4
    return _voxels(shape) * (4 + copy)


def downsampling_bytes(shape, factors) -> int:
    """Bytes :func:`downsample` allocates beyond the scan: the blocks as float64, their
    float64 means and the means cast back (at most 8 bytes each).

    Parameters
    ----------
    shape : tuple of int
        The scan's shape.
    factors : tuple of int
        The downsampling factor per axis.

    Returns
    -------
    int
    """
    voxels = _voxels(shape)
    blocks = _voxels(factors)
    return voxels * 8 + (voxels // blocks + 1) * 16


def distance_bytes(shape) -> int:
    """Bytes :func:`signed_distance` allocates beyond the mask: scipy's feature transform
    (one int32 index per axis and voxel) and distances, for both phases, and the signed
    float64 field (measured with tracemalloc: 41 bytes per voxel in 2D, 57 in 3D).

    Parameters
    ----------
    shape : tuple of int
        The mask's shape (2D or 3D).

    Returns
    -------
    int
    """
    return _voxels(shape) * (33 + 8 * len(shape))


def smooth(scan, sigma: float) -> Scan:
    """Gaussian smoothing with ``sigma`` in the scan's physical unit.

    The kernel's width along each axis is sigma / spacing voxels, so an anisotropic scan is
    smoothed by the same physical amount in every direction.

    Parameters
    ----------
    scan : Scan or ndarray
        The scan (an array is taken with spacing 1 px).
    sigma : float
        Standard deviation of the Gaussian in the scan's unit; 0 or None leaves the scan
        as it is.

    Returns
    -------
    Scan
        float32 values; ``metadata["smoothing_sigma"]`` records sigma.

    Raises
    ------
    InputError
        For a negative or non-finite sigma, one longer than the scan along an axis, or NaN
        values.
    TooBigError
        When the smoothed copy would not fit in memory.
    """
    scan = as_scan(scan)
    if sigma is None or sigma == 0:
        return scan
    if not np.isfinite(sigma) or sigma < 0:
        raise InputError(f"Smoothing sigma must be a positive length in {scan.unit}, got {sigma}.")
    check_finite(scan)
    sigmas = _voxel_sigmas(scan, sigma)
    ensure_fits(smoothing_bytes(scan.shape, scan.data.dtype),
                f"Smoothing the {_shape_text(scan.shape)} scan", PREPARATION_REMEDY)
    out = ndimage.gaussian_filter(scan.data.astype(np.float32, copy=False), sigma=sigmas,
                                  mode="nearest")
    return scan.with_data(out, metadata={**scan.metadata, "smoothing_sigma": sigma})


def _voxel_sigmas(scan: Scan, sigma: float) -> list[float]:
    """Sigma in voxels along each axis; refused when longer than the scan along an axis.

    Such a kernel would blur the scan into nearly one value, and its weights alone can
    outgrow memory (four sigmas either side). Along an axis of one voxel smoothing changes
    nothing (the border is repeated), so that axis takes no kernel at all.
    """
    sigmas = []
    for axis, (n, size) in enumerate(zip(scan.shape, scan.spacing)):
        in_voxels = sigma / size
        if n > 1 and in_voxels > n:
            name = "zyx"[3 - scan.ndim + axis]
            raise InputError(
                f"Smoothing sigma (--smooth) {sigma:g} {scan.unit} is {in_voxels:.3g} voxels "
                f"along {name}, longer than the scan there ({n} voxels), and would blur it "
                f"into one value; choose a sigma of at most {n * size:g} {scan.unit}.")
        sigmas.append(in_voxels if n > 1 else 0.0)
    return sigmas


def parse_box(text: str, ndim: int) -> tuple[slice, ...]:
    """'10:50,0:64,:' -> slices, in (z, y, x) order; empty bounds mean the whole axis.

    Parameters
    ----------
    text : str
        One ``start:stop`` range per axis, separated by commas.
    ndim : int
        The scan's number of dimensions.

    Returns
    -------
    tuple of slice

    Examples
    --------
    >>> parse_box("10:50,:", 2)
    (slice(10, 50, None), slice(None, None, None))
    """
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != ndim:
        raise InputError(f"A crop box for a {ndim}D scan needs {ndim} ranges like "
                         f"'10:50,0:64{',:' if ndim == 3 else ''}', got {text!r}.")
    box = []
    for part in parts:
        bounds = part.split(":")
        if len(bounds) != 2:
            raise InputError(f"Crop range {part!r} should look like 'start:stop'.")
        try:
            lo, hi = (int(b) if b else None for b in bounds)
        except ValueError:
            raise InputError(f"Crop range {part!r} should hold whole numbers.") from None
        box.append(slice(lo, hi))
    return tuple(box)


def crop(scan, box) -> Scan:
    """The part of the scan inside ``box`` (a tuple of slices or a 'a:b,c:d,...' string).

    Parameters
    ----------
    scan : Scan or ndarray
        The scan.
    box : tuple of slice or str
        One range per axis, in voxels (see :func:`parse_box`).

    Returns
    -------
    Scan
        The cropped values; ``metadata["crop_origin"]`` holds the first voxel kept.

    Raises
    ------
    InputError
        For a box of the wrong number of ranges, or one that leaves nothing.
    """
    scan = as_scan(scan)
    if isinstance(box, str):
        box = parse_box(box, scan.ndim)
    if len(box) != scan.ndim:
        raise InputError(f"The crop box has {len(box)} ranges but the scan is {scan.ndim}D.")
    out = scan.data[tuple(box)]
    if out.size == 0 or min(out.shape) == 0:
        shown = ",".join(f"{'' if b.start is None else b.start}:{'' if b.stop is None else b.stop}"
                         for b in box)
        raise InputError(f"The crop box {shown} leaves nothing of the scan of shape "
                         f"{'x'.join(map(str, scan.shape))}; each range should run from a "
                         f"smaller start to a larger stop inside the scan.")
    origin = [b.indices(n)[0] for b, n in zip(box, scan.shape)]
    return scan.with_data(np.ascontiguousarray(out),
                          metadata={**scan.metadata, "crop_origin": origin})


def downsample(scan, factor) -> Scan:
    """Block-mean downsampling by an integer ``factor`` (one for all axes or one per axis).

    Voxels left over at the far end of an axis (shape not divisible by the factor) are
    dropped. The spacing grows by the factor.

    Parameters
    ----------
    scan : Scan or ndarray
        The scan.
    factor : int or sequence of int
        Block side, 1 or more, for every axis or per axis.

    Returns
    -------
    Scan
        The block means in the scan's type (integers rounded); the spacing times the
        factors; ``metadata["downsample"]`` records them.

    Raises
    ------
    InputError
        For a factor below 1, one per axis of the wrong count, or one larger than the scan.
    """
    scan = as_scan(scan)
    factors = (int(factor),) * scan.ndim if np.isscalar(factor) else tuple(int(f) for f in factor)
    if len(factors) != scan.ndim or min(factors) < 1:
        raise InputError(f"Downsampling factor must be a whole number >= 1 (or one per axis), "
                         f"got {factor}.")
    if all(f == 1 for f in factors):
        return scan
    check_finite(scan)
    ensure_fits(downsampling_bytes(scan.shape, factors),
                f"Downsampling the {_shape_text(scan.shape)} scan", "crop it (--crop) first")
    trimmed = scan.data[tuple(slice(0, (n // f) * f) for n, f in zip(scan.shape, factors))]
    if trimmed.size == 0:
        raise InputError(f"Downsampling by {factors} leaves nothing of the scan of shape "
                         f"{scan.shape}.")
    shape = []
    for n, f in zip(trimmed.shape, factors):
        shape += [n // f, f]
    blocks = trimmed.reshape(shape).astype(np.float64)
    mean = blocks.mean(axis=tuple(range(1, 2 * scan.ndim, 2)))
    if np.issubdtype(scan.data.dtype, np.integer):
        mean = np.rint(mean).astype(scan.data.dtype)
    else:
        mean = mean.astype(scan.data.dtype)
    spacing = tuple(s * f for s, f in zip(scan.spacing, factors))
    return scan.with_data(mean, spacing=spacing,
                          metadata={**scan.metadata, "downsample": list(factors)})


def threshold(scan, value="otsu", *, below: bool = True) -> tuple[np.ndarray, float]:
    """Binary mask of the voxels at or below ``value`` (or above, with ``below=False``).

    ``value="otsu"`` picks the threshold by Otsu's method (scikit-image).

    Parameters
    ----------
    scan : Scan or ndarray
        The gray scan.
    value : float or "otsu"
        The threshold, in the scan's gray values.
    below : bool
        True: the mask holds the voxels at or below ``value``; False: those above.

    Returns
    -------
    mask : ndarray of bool
    value : float
        The threshold used.

    Raises
    ------
    InputError
        For NaN values, or a constant scan with "otsu".
    """
    scan = as_scan(scan)
    check_finite(scan)
    data = scan.data
    if value == "otsu":
        from skimage.filters import threshold_otsu
        if data.min() == data.max():
            raise InputError(f"{scan.source or 'The scan'} is constant ({data.min()}); "
                             f"Otsu's method needs two phases to separate.")
        value = float(threshold_otsu(data))
    else:
        value = float(value)
    mask = data <= value if below else data > value
    return mask, value


def signed_distance(mask_or_scan, spacing=None, unit=None) -> Scan:
    """Signed Euclidean distance transform of a two-phase mask (pores negative).

    Parameters
    ----------
    mask_or_scan : bool ndarray or Scan with boolean data
        True marks the pore phase (or whichever phase should be negative).
    spacing, unit : optional
        Voxel size; distances are in this unit (anisotropic spacing is honoured).

    Returns
    -------
    Scan
        float64 values in the scan's unit, ``values="distance"``: -d inside the pores, +d in
        the solid, where d is the distance to the nearest voxel centre of the other phase.

    Examples
    --------
    >>> import numpy as np
    >>> mask = np.zeros((1, 7), bool); mask[0, 2:5] = True
    >>> signed_distance(mask).data[0].tolist()
    [2.0, 1.0, -1.0, -2.0, -1.0, 1.0, 2.0]
    """
    scan = as_scan(mask_or_scan, spacing=spacing, unit=unit)
    mask = scan.data
    if mask.dtype != bool:
        values = np.unique(mask)
        if not set(values.tolist()) <= {0, 1}:
            raise InputError(
                f"{scan.source or 'The mask'} is not binary (values like {values[:4].tolist()}); "
                f"threshold it first (voxtopo.filtration.threshold or --threshold)."
            )
        mask = mask.astype(bool)
    if mask.all() or not mask.any():
        phase = "pore" if mask.all() else "solid"
        raise InputError(f"{scan.source or 'The mask'} is all {phase}; a distance transform "
                         f"needs both phases.")
    ensure_fits(distance_bytes(mask.shape),
                f"The distance transform of the {_shape_text(mask.shape)} mask",
                PREPARATION_REMEDY)
    sampling = scan.spacing
    inside = ndimage.distance_transform_edt(mask, sampling=sampling)
    outside = ndimage.distance_transform_edt(~mask, sampling=sampling)
    field = np.where(mask, -inside, outside)
    return scan.with_data(field, values="distance")


def check_finite(scan_or_array, source: str | None = None) -> None:
    """Raise InputError when the data hold NaN or infinite values.

    Parameters
    ----------
    scan_or_array : Scan or array_like
        The values.
    source : str, optional
        What they are, for the message (default the scan's source).

    Raises
    ------
    InputError
        With the number of NaN or infinite voxels and the remedies.
    """
    if isinstance(scan_or_array, Scan):
        data, source = scan_or_array.data, source or scan_or_array.source
    else:
        data = np.asarray(scan_or_array)
    if np.issubdtype(data.dtype, np.floating):
        bad = np.count_nonzero(~np.isfinite(data))
        if bad:
            raise InputError(
                f"{source or 'The scan'} has {bad} NaN or infinite voxels; fill them "
                f"(voxtopo.filtration.fill_invalid or --fill-invalid) or crop them away."
            )


def fill_invalid(scan, value="max") -> Scan:
    """Replace NaN and infinite voxels by ``value``: a number, "max" or "min" of the
    valid voxels. With "max" they enter a sublevel sweep last (they act as background).

    Parameters
    ----------
    scan : Scan or ndarray
        The scan; integer scans are returned as they are.
    value : float, "max" or "min"
        What the invalid voxels become.

    Returns
    -------
    Scan
        A copy with the voxels filled (``metadata["filled_invalid"]`` counts them), or
        ``scan`` itself when none is invalid.

    Raises
    ------
    InputError
        When no voxel is valid.

    Examples
    --------
    >>> import numpy as np
    >>> fill_invalid(np.array([[1.0, np.nan, 3.0]])).data.tolist()
    [[1.0, 3.0, 3.0]]
    """
    scan = as_scan(scan)
    data = scan.data
    if not np.issubdtype(data.dtype, np.floating):
        return scan
    bad = ~np.isfinite(data)
    if not bad.any():
        return scan
    if bad.all():
        raise InputError(f"{scan.source or 'The scan'} has no valid voxels at all.")
    if value == "max":
        fill = data[~bad].max()
    elif value == "min":
        fill = data[~bad].min()
    else:
        fill = float(value)
    out = data.copy()
    out[bad] = fill
    return scan.with_data(out, metadata={**scan.metadata, "filled_invalid": int(bad.sum())})


# --------------------------------------------------------------------- region of interest
def binary_foreground(data: np.ndarray):
    """The value marking the foreground when ``data`` is a binary mask (True, 1, or 255 in
    an 8-bit image without any 1), else None.

    Examples
    --------
    >>> binary_foreground(np.array([0, 255], np.uint8)), binary_foreground(np.array([0, 2]))
    (255, None)
    """
    if data.dtype == bool:
        return True
    if not (np.issubdtype(data.dtype, np.integer) or np.issubdtype(data.dtype, np.floating)):
        return None
    # 8-bit masks from image editors mark the foreground 255
    foreground = 255 if data.dtype == np.uint8 and not (data == 1).any() else 1
    return foreground if np.logical_or(data == 0, data == foreground).all() else None


def region_of_interest(roi, shape, where: str) -> np.ndarray | None:
    """The sample as a bool array of ``shape`` (True = sample), or None for the whole scan.

    ``roi`` is a binary array or Scan (True, 1 or 255 = sample); ``where`` names the scan
    in the messages. A wrong shape, a mask that is not binary or one without any voxel
    of the sample is refused in one sentence.

    Examples
    --------
    >>> int(region_of_interest(np.array([[0, 1], [1, 1]]), (2, 2), "array").sum())
    3
    """
    if roi is None:
        return None
    data = roi.data if isinstance(roi, Scan) else np.asarray(roi)
    named = roi.source if isinstance(roi, Scan) and roi.source else "the region of interest"
    if data.shape != tuple(shape):
        raise InputError(f"The region of interest {named} has shape {data.shape} but the "
                         f"scan {where} has shape {tuple(shape)}; give a mask of the same "
                         f"grid.")
    foreground = binary_foreground(data)
    if foreground is None:
        raise InputError(f"The region of interest {named} is not a binary mask (True or 1 "
                         f"marks the sample); threshold it first.")
    sample = data == foreground
    if not sample.any():
        raise InputError(f"The region of interest {named} holds no voxel of the sample "
                         f"(it is all 0); True or 1 marks the sample.")
    return sample


def outside_last(scan, sample: np.ndarray, *, superlevel: bool = False,
                 min_persistence: float = 0.0) -> tuple[Scan, float]:
    """The scan with every voxel outside ``sample`` set to one level that the sweep meets
    after every voxel inside: above the inside maximum for a sublevel sweep, below the
    minimum for a superlevel one.

    Returns the field and that level. Up to the level the sweep is the sweep of the
    region's own cubical complex; :meth:`voxtopo.Diagram.without_outside` then drops what
    the outside adds. The level is far enough out that a class of the region alive when the
    outside enters lives longer than ``min_persistence`` and so is kept by the engine::

        inside values  [lo ............ hi]   outside: hi + (hi - lo) + min_persistence + 1

    Examples
    --------
    >>> field, level = outside_last(np.array([[1.0, 3.0], [2.0, 9.0]]),
    ...                             np.array([[True, True], [True, False]]))
    >>> level, float(field.data[1, 1])
    (6.0, 6.0)
    """
    scan = as_scan(scan)
    inside = scan.data[sample]
    low, high = float(inside.min()), float(inside.max())
    margin = (high - low) + float(min_persistence) + 1.0
    level = low - margin if superlevel else high + margin
    data = np.where(sample, scan.data.astype(np.float64, copy=False), level)
    return scan.with_data(data), level
