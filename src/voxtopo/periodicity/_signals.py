"""Signals of a time-lapse: the mean intensity over time of pixels, blocks, tiles or regions.

Every kind of signal is a mean over a set of pixels (voxels), so they share one table:
``traces`` (one row per signal, one column per frame) plus where each signal sits.
Pixels binned N x N and tiles are both boxes of a regular grid and are summed with
``np.add.reduceat`` along each spatial axis; regions are summed with ``np.bincount``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

KINDS = ("pixel", "tile", "region")


@dataclass(frozen=True)
class Signals:
    """Mean-intensity traces and where they come from.

    Attributes
    ----------
    traces : ndarray, shape (n, frames)
        float64 mean intensity of each signal at each frame.
    kind : {"pixel", "tile", "region"}
        Pixels (binned ``bin`` x ``bin`` when ``bin`` > 1), tiles of a grid, or labelled
        regions.
    labels : ndarray of int, shape (n,)
        Region label (kind "region") or the signal's number in ``grid`` order.
    centres : ndarray, shape (n, spatial ndim)
        Centre of each signal's pixels, in pixel indices ((y, x) or (z, y, x)).
    sizes : ndarray of int, shape (n,)
        Number of pixels averaged into each signal.
    owner : ndarray of int, shape spatial_shape
        For every pixel, the row of ``traces`` it belongs to (-1 for pixels outside every
        region): maps are painted from it.
    bin : int
        Side of the pixel bins (1: single pixels).
    """

    traces: np.ndarray
    kind: str
    labels: np.ndarray
    centres: np.ndarray
    sizes: np.ndarray
    owner: np.ndarray
    bin: int = 1

    def __len__(self) -> int:
        return len(self.traces)

    def paint(self, values, fill=np.nan) -> np.ndarray:
        """A map of the spatial shape holding each signal's value on its pixels.

        Parameters
        ----------
        values : array_like, shape (signals,)
            One value per signal (a column of the measured table).
        fill : float
            The value of pixels that belong to no signal (outside every region).

        Returns
        -------
        ndarray of float32
            The frames' spatial shape.
        """
        values = np.asarray(values, dtype=np.float32)
        out = np.full(self.owner.shape, fill, dtype=np.float32)
        inside = self.owner >= 0
        out[inside] = values[self.owner[inside]]
        return out


def _check_stack(stack) -> np.ndarray:
    stack = np.asarray(stack)
    if stack.ndim not in (3, 4):
        raise InputError(f"A time-lapse must be (t, y, x) or (t, z, y, x), got an array of "
                         f"shape {stack.shape}.")
    if stack.dtype.kind not in "biuf":
        raise InputError(f"The time-lapse holds {stack.dtype} values; it needs numbers.")
    return stack


def _box_signals(stack: np.ndarray, edges: list[np.ndarray], kind: str, size: int) -> Signals:
    """Mean over the boxes of a grid whose starts along each spatial axis are ``edges``."""
    sums = stack.astype(np.float64, copy=False)
    for axis, starts in enumerate(edges, start=1):
        sums = np.add.reduceat(sums, starts, axis=axis)
    spatial = stack.shape[1:]
    lengths = [np.diff(np.append(starts, n)) for starts, n in zip(edges, spatial)]
    counts = lengths[0]
    for extra in lengths[1:]:
        counts = np.multiply.outer(counts, extra)
    traces = (sums / counts[None]).reshape(stack.shape[0], -1).T
    centres = np.stack(np.meshgrid(*[starts + (length - 1) / 2.0
                                     for starts, length in zip(edges, lengths)],
                                   indexing="ij"), axis=-1).reshape(-1, len(spatial))
    owner_axes = [np.repeat(np.arange(len(starts)), length)
                  for starts, length in zip(edges, lengths)]
    grid = tuple(len(starts) for starts in edges)
    owner = np.ravel_multi_index(np.meshgrid(*owner_axes, indexing="ij"), grid)
    return Signals(traces=np.ascontiguousarray(traces), kind=kind,
                   labels=np.arange(len(traces)), centres=centres,
                   sizes=counts.ravel().astype(np.int64), owner=owner.astype(np.int64),
                   bin=size)


def pixel_signals(stack, bin: int = 1) -> Signals:
    """One signal per pixel, or per ``bin`` x ``bin`` block of pixels (mean intensity).

    Blocks at the far edges are smaller when ``bin`` does not divide the image.

    Parameters
    ----------
    stack : array_like, shape (t, y, x) or (t, z, y, x)
        The time-lapse.
    bin : int
        Side of the blocks in pixels (1: every pixel).

    Returns
    -------
    Signals
        One row of ``traces`` per block, in row-major order.

    Examples
    --------
    >>> stack = np.arange(2 * 4 * 4, dtype=float).reshape(2, 4, 4)
    >>> signals = pixel_signals(stack, bin=2)
    >>> signals.traces.shape, signals.traces[0].tolist()
    ((4, 2), [2.5, 18.5])
    """
    stack = _check_stack(stack)
    if isinstance(bin, bool) or not isinstance(bin, (int, np.integer)) or bin < 1:
        raise InputError(f"bin must be a whole number of pixels, 1 or more, got {bin!r}.")
    if any(bin > n for n in stack.shape[1:]):
        raise InputError(f"bin={bin} is larger than the image ({stack.shape[1:]} pixels); "
                         f"choose at most {min(stack.shape[1:])}.")
    edges = [np.arange(0, n, bin) for n in stack.shape[1:]]
    return _box_signals(stack, edges, "pixel", int(bin))


def tile_signals(stack, tiles: int) -> Signals:
    """One signal per tile: the image cut into ``tiles`` parts along every spatial axis.

    Parameters
    ----------
    stack : array_like, shape (t, y, x) or (t, z, y, x)
        The time-lapse.
    tiles : int
        Parts along each spatial axis (``tiles ** ndim`` signals), as equal as can be.

    Returns
    -------
    Signals
        One row of ``traces`` per tile, in row-major order.

    Examples
    --------
    >>> signals = tile_signals(np.zeros((3, 10, 12)), tiles=2)
    >>> len(signals), signals.sizes.tolist()
    (4, [30, 30, 30, 30])
    """
    stack = _check_stack(stack)
    if isinstance(tiles, bool) or not isinstance(tiles, (int, np.integer)) or tiles < 1:
        raise InputError(f"tiles must be a whole number, 1 or more, got {tiles!r}.")
    if any(tiles > n for n in stack.shape[1:]):
        raise InputError(f"tiles={tiles} asks for more tiles than the image has pixels along "
                         f"an axis ({stack.shape[1:]}); choose at most {min(stack.shape[1:])}.")
    edges = [np.array([part[0] for part in np.array_split(np.arange(n), tiles)])
             for n in stack.shape[1:]]
    return _box_signals(stack, edges, "tile", 1)


def region_signals(stack, regions, source: str = "the regions image") -> Signals:
    """One signal per labelled region (label > 0) of an integer image of the same shape.

    Parameters
    ----------
    stack : array_like, shape (t, y, x) or (t, z, y, x)
        The time-lapse.
    regions : array_like of int
        A label image of the frame shape: 0 background, 1, 2, ... regions.
    source : str
        What the label image is, for the messages (its file name).

    Returns
    -------
    Signals
        One row of ``traces`` per label present, in increasing label order.

    Examples
    --------
    >>> stack = np.ones((2, 3, 3)); stack[:, 0] = 5
    >>> labels = np.zeros((3, 3), dtype=int); labels[0] = 1; labels[2] = 2
    >>> region_signals(stack, labels).traces.tolist()
    [[5.0, 5.0], [1.0, 1.0]]
    """
    stack = _check_stack(stack)
    regions = np.asarray(regions)
    if regions.shape != stack.shape[1:]:
        raise InputError(f"{source} has shape {regions.shape} but the frames of the "
                         f"time-lapse have shape {stack.shape[1:]}; give a label image of "
                         f"the frame shape.")
    if regions.dtype.kind not in "biu":
        raise InputError(f"{source} holds {regions.dtype} values; a label image holds whole "
                         f"numbers (0 for background, 1, 2, ... for regions).")
    found = np.unique(regions)
    found = found[found > 0]
    if len(found) == 0:
        raise InputError(f"{source} has no region: every pixel is 0 (background) or "
                         f"negative; label regions 1, 2, ...")
    index = np.searchsorted(found, regions.ravel())
    inside = (regions.ravel() > 0)
    index = np.where(inside, index, len(found))
    sizes = np.bincount(index, minlength=len(found) + 1)[:-1]
    flat = stack.reshape(stack.shape[0], -1)
    traces = np.empty((len(found), stack.shape[0]))
    for frame in range(stack.shape[0]):
        traces[:, frame] = np.bincount(index, weights=flat[frame],
                                       minlength=len(found) + 1)[:-1] / sizes
    coordinates = np.indices(regions.shape).reshape(regions.ndim, -1)
    centres = np.stack([np.bincount(index, weights=c, minlength=len(found) + 1)[:-1] / sizes
                        for c in coordinates], axis=1)
    owner = np.where(inside, index, -1).reshape(regions.shape)
    return Signals(traces=traces, kind="region", labels=found.astype(np.int64),
                   centres=centres, sizes=sizes.astype(np.int64), owner=owner.astype(np.int64))
