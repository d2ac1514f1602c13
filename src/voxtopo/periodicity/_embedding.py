"""Sliding-window (delay) embeddings of many signals at once, and their Rips persistence.

A window of a signal f starting at time t is the vector

    SW f(t) = ( f(t), f(t + tau), f(t + 2 tau), ..., f(t + M tau) )        (M + 1 values)

For a signal of period L the cloud {SW f(t)} traces a closed loop; with the window
length M tau = L M / (M + 1) the M + 1 samples of a window are spread evenly over one
period, which makes the loop of a sinusoid round (Perea & Harer 2015). Every window is
centred (its mean removed) and scaled to unit length, as in SW1PerS (Perea, Deckard,
Haase & Harer 2015): the cloud then lies on the unit sphere, an amplitude that changes
slowly (a damped oscillation) leaves it unchanged, and a circle of radius 1 has an H1 bar
that dies at sqrt(3) (Adamaszek & Adams 2017), so the longest H1 bar over sqrt(3) is a
score between 0 and 1.

::

      f:  /\\/\\/\\/\\        window (M + 1 samples over ~ one period)
          [.....]                ->  one point of the cloud
           [.....]               ->  the next ...        the points go round a loop
"""

from __future__ import annotations

import gudhi
import numpy as np

from ._rips_kernel import MAX_POINTS, h1_bars, longest_h1_many

#: Embedding dimension M (a window holds M + 1 samples): enough for the first five
#: harmonics (M >= 2N, Perea & Harer 2015), so square and sawtooth waves keep their shape.
DIMENSION = 10

#: The H1 bar of a dense circle of radius r dies at r sqrt(3) (Adamaszek & Adams 2017).
SQRT3 = float(np.sqrt(3.0))


def window_length(period_frames, dimension: int = DIMENSION):
    """Window length M tau, in frames, for a period in frames: L M / (M + 1).

    Parameters
    ----------
    period_frames : float or array_like
        Periods L, in frames.
    dimension : int
        The embedding dimension M.

    Returns
    -------
    ndarray of float64
        Window lengths in frames, of the shape of ``period_frames``.

    Examples
    --------
    >>> float(window_length(11.0, dimension=10))
    10.0
    """
    return np.asarray(period_frames, dtype=np.float64) * dimension / (dimension + 1.0)


#: Candidate windows per cloud point; max-min selection keeps ``points`` of them.
CANDIDATES = 6

#: Fractional part of the golden ratio: the step of the start times (as a fraction of the
#: span of possible starts) that stays out of step with every period.
GOLDEN = (np.sqrt(5.0) - 1.0) / 2.0


def sliding_windows(traces, period_frames, points: int, dimension: int = DIMENSION):
    """Centred and normalised sliding-window clouds, one per row of ``traces``.

    Parameters
    ----------
    traces : ndarray, shape (n, frames)
    period_frames : ndarray, shape (n,)
        Period of each row in frames; sets its window (``window_length``).
    points : int
        Points per cloud: ``CANDIDATES * points`` windows start at times spread over the
        signal by a Weyl sequence, and max-min (farthest point) selection keeps this many,
        spread evenly over the loop. (Starts at whole frames would hit only as many
        phases as a period has frames.)
    dimension : int
        M: each window holds M + 1 samples, read between frames by Catmull-Rom cubic
        interpolation.

    Returns
    -------
    ndarray, shape (n, points, dimension + 1)
        Points on the unit sphere (a window that does not vary is left at the origin).

    Examples
    --------
    >>> t = np.arange(120)
    >>> cloud = sliding_windows(np.cos(2 * np.pi * t / 12.0)[None], np.array([12.0]), 30)
    >>> cloud.shape, bool(np.allclose(np.linalg.norm(cloud, axis=2), 1))
    ((1, 30, 11), True)
    """
    traces = np.atleast_2d(np.asarray(traces, dtype=np.float64))
    rows, frames = traces.shape
    window = window_length(period_frames, dimension)
    tau = window / dimension
    last_start = np.maximum(frames - 1 - window, 0.0)
    candidates = CANDIDATES * points
    # a Weyl sequence: starts cover the signal evenly but never in step with the period
    spread = (np.arange(candidates) * GOLDEN) % 1.0
    starts = last_start[:, None] * spread[None, :]
    times = starts[:, :, None] + tau[:, None, None] * np.arange(dimension + 1)[None, None, :]
    cloud = _catmull_rom(traces, np.clip(times, 0.0, frames - 1.0))
    cloud -= cloud.mean(axis=2, keepdims=True)
    norms = np.linalg.norm(cloud, axis=2, keepdims=True)
    cloud = np.divide(cloud, norms, out=np.zeros_like(cloud), where=norms > 1e-12)
    return cloud[np.arange(rows)[:, None], maxmin_batch(cloud, points)]


def _catmull_rom(traces, times) -> np.ndarray:
    """Values of each row at fractional frame ``times`` (rows, ...) by Catmull-Rom cubic
    interpolation (exact at the frames, continuous slope; the ends repeat the edge)."""
    rows, frames = traces.shape
    base = np.minimum(np.floor(times).astype(np.int64), frames - 2)
    u = times - base
    row = np.arange(rows).reshape((rows,) + (1,) * (times.ndim - 1))
    p0 = traces[row, np.maximum(base - 1, 0)]
    p1 = traces[row, base]
    p2 = traces[row, base + 1]
    p3 = traces[row, np.minimum(base + 2, frames - 1)]
    return p1 + 0.5 * u * (p2 - p0 + u * (2 * p0 - 5 * p1 + 4 * p2 - p3
                                          + u * (3 * (p1 - p2) + p3 - p0)))


def maxmin_batch(clouds, count: int) -> np.ndarray:
    """Indices of ``count`` max-min landmarks of each cloud (first: point 0), shape
    (n, count); every cloud point ends up close to a landmark (de Silva & Carlsson 2004)."""
    rows = clouds.shape[0]
    chosen = np.zeros((rows, count), dtype=np.int64)
    nearest = np.sum((clouds - clouds[:, :1]) ** 2, axis=2)
    every = np.arange(rows)
    for k in range(1, count):
        pick = np.argmax(nearest, axis=1)
        chosen[:, k] = pick
        step = np.sum((clouds - clouds[every, pick][:, None]) ** 2, axis=2)
        np.minimum(nearest, step, out=nearest)
    return chosen


def rips_bars(cloud, fields=(2,), max_dimension: int = 1) -> dict:
    """Bars of the Vietoris-Rips complex of a point cloud, scales in Euclidean distance.

    Parameters
    ----------
    cloud : ndarray, shape (n, d)
    fields : tuple of int
        Primes p of the coefficients Z/p.
    max_dimension : int
        Highest homology dimension (1 or 2).

    Returns
    -------
    dict
        ``{(p, dim): ndarray (k, 2) of (birth, death)}`` for dimensions 1 to
        ``max_dimension``, bars of zero length left out, longest first.

    Notes
    -----
    Dimension 1 of clouds up to ``MAX_POINTS`` points comes from our own kernel
    (``_rips_kernel.h1_bars``); dimension 2, and larger clouds, from gudhi's RipsComplex
    (Maria, Boissonnat, Glisse & Yvinec 2014), with no threshold.

    Examples
    --------
    >>> angle = np.linspace(0, 2 * np.pi, 12, endpoint=False)
    >>> bars = rips_bars(np.column_stack([np.cos(angle), np.sin(angle)]))[(2, 1)]
    >>> bars.round(4).tolist()
    [[0.5176, 1.7321]]
    """
    cloud = np.ascontiguousarray(cloud, dtype=np.float64)
    bars = {}
    if max_dimension == 1 and len(cloud) <= MAX_POINTS:
        for p in fields:
            found = h1_bars(cloud, int(p)) if len(cloud) >= 3 else np.zeros((0, 2))
            bars[(int(p), 1)] = found[np.argsort(found[:, 0] - found[:, 1], kind="stable")]
        return bars
    tree = gudhi.RipsComplex(points=cloud).create_simplex_tree(max_dimension=max_dimension + 1)
    for p in fields:
        tree.compute_persistence(homology_coeff_field=int(p), persistence_dim_max=True)
        for dim in range(1, max_dimension + 1):
            found = np.asarray(tree.persistence_intervals_in_dimension(dim),
                               dtype=np.float64).reshape(-1, 2)
            found = found[found[:, 1] > found[:, 0]]
            order = np.argsort(found[:, 0] - found[:, 1], kind="stable")
            bars[(int(p), dim)] = found[order]
    return bars


def longest_h1(clouds, field: int = 2) -> np.ndarray:
    """Persistence of the longest H1 bar over Z/``field`` of each cloud (rows, n, d), the
    clouds shared among numba's threads."""
    clouds = np.ascontiguousarray(clouds, dtype=np.float64)
    if clouds.shape[1] > MAX_POINTS:
        longest = []
        for cloud in clouds:
            bars = rips_bars(cloud, (field,))[(field, 1)]
            longest.append(float(bars[0, 1] - bars[0, 0]) if len(bars) else 0.0)
        return np.array(longest)
    return longest_h1_many(clouds, int(field))
