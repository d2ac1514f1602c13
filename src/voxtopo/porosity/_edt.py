"""Exact Euclidean distance transform, one axis at a time, on float32 squared distances.

Felzenszwalb & Huttenlocher's lower envelope of parabolas: along a line, the squared
distance ``d[i] = min_j (f[j] + (step * (i - j))**2)`` is the lower envelope of one
parabola per site ``j`` (every voxel with a finite ``f``), found in one left-to-right scan
that keeps the parabolas of the envelope and the abscissae where they take over, then
read off in a second scan. Applied along each axis in turn to ``f = 0`` at the feature
voxels and ``+inf`` elsewhere, it gives the exact squared Euclidean distance to the
nearest feature voxel (the squared distance is a sum over axes, so the minimisation
separates)::

    f      inf  inf   0   inf  inf  inf   0        (step 1)
    pass     4    1   0     1    4    1   0

Every pass works in place on a float32 array and needs only a few lines' worth of
scratch, so a volume costs 4 bytes per voxel; no feature (index) transform is kept. Lines
are computed in float64 and stored in float32: a squared distance of ``k`` voxels is a sum
of at most three squares, exact in float32 up to 2^24, and the square root of the stored
value is within float32 rounding of the exact distance.

Lines run in parallel (numba ``prange``). A line across the last (contiguous) axis is read
as it lies; across another axis a block of neighbouring lines is gathered together, so
that each cache line read serves all of them.

:func:`squared_distance_pass` is the pass on any block that is whole along its axis (the
out-of-core path calls it on blocks), :func:`distance_to_nearest` the whole transform in
memory, :func:`signed_squared_distance` both phases' transforms of a two-phase mask in one
float32 array, and :func:`two_phase_pass` one pass of those on a block. :func:`lower_envelope_python` is the pass on one line, small enough to
read; the tests run it beside the kernel.

References
----------
Felzenszwalb, P. F. & Huttenlocher, D. P. (2012). Distance transforms of sampled
functions. Theory of Computing 8, 415-428.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = ["squared_distance_pass", "two_phase_pass", "distance_to_nearest",
           "signed_squared_distance", "lower_envelope_python"]

#: Lines across a non-contiguous axis gathered together: 16 float32 fill a 64-byte
#: cache line.
_LINES_PER_BLOCK = 16


@njit(cache=True, nogil=True, inline="always")
def _takeover(f, v, q, fq, step2):
    """Abscissa beyond which the parabola of site ``q`` lies below the one of site ``v``."""
    return ((fq + step2 * q * q) - (f[v] + step2 * v * v)) / (2.0 * step2 * (q - v))


@njit(cache=True, nogil=True, inline="always")
def _envelope(f, n, step2, out, sites, starts):
    """``out[i] = min_j f[j] + step2 * (i - j)**2`` over the finite ``f[j]``; inf when none.

    ``sites`` (int64) and ``starts`` (float64, n + 1) are scratch."""
    k = -1
    for q in range(n):
        fq = f[q]
        if fq == np.inf:
            continue
        if k < 0:
            k = 0
            sites[0] = q
            starts[0] = -np.inf
            starts[1] = np.inf
            continue
        # abscissa where the parabola of q takes over from the last one kept; a parabola
        # it overtakes before that one took over is never lowest (starts[0] = -inf ends it)
        s = _takeover(f, sites[k], q, fq, step2)
        while s <= starts[k]:
            k -= 1
            s = _takeover(f, sites[k], q, fq, step2)
        k += 1
        sites[k] = q
        starts[k] = s
        starts[k + 1] = np.inf
    if k < 0:
        for i in range(n):
            out[i] = np.inf
        return
    j = 0
    for i in range(n):
        while starts[j + 1] < i:
            j += 1
        d = i - sites[j]
        out[i] = f[sites[j]] + step2 * d * d


@njit(cache=True, nogil=True, parallel=True)
def _pass_along_last(volume, step2):
    """One pass along axis 2 of a 3D float32 array (any strides)."""
    n0, n1, n = volume.shape
    for line in prange(n0 * n1):
        a, b = line // n1, line % n1
        f = np.empty(n, np.float64)
        out = np.empty(n, np.float64)
        sites = np.empty(n, np.int64)
        starts = np.empty(n + 1, np.float64)
        for i in range(n):
            f[i] = volume[a, b, i]
        _envelope(f, n, step2, out, sites, starts)
        for i in range(n):
            volume[a, b, i] = out[i]


@njit(cache=True, nogil=True, parallel=True)
def _pass_along_middle(volume, step2, width):
    """One pass along axis 1 of a 3D float32 array, ``width`` lines of axis 2 at a time."""
    n0, n, n2 = volume.shape
    blocks = (n2 + width - 1) // width
    for task in prange(n0 * blocks):
        a, c0 = task // blocks, (task % blocks) * width
        lines = min(width, n2 - c0)
        f = np.empty((lines, n), np.float64)
        out = np.empty(n, np.float64)
        sites = np.empty(n, np.int64)
        starts = np.empty(n + 1, np.float64)
        for i in range(n):
            for c in range(lines):
                f[c, i] = volume[a, i, c0 + c]
        for c in range(lines):
            _envelope(f[c], n, step2, out, sites, starts)
            for i in range(n):
                f[c, i] = out[i]
        for i in range(n):
            for c in range(lines):
                volume[a, i, c0 + c] = f[c, i]


def _as_3d(array: np.ndarray, axis: int) -> tuple[np.ndarray, int]:
    """A 3D view of ``array`` (leading axes of length 1, never a copy) and the position of
    ``axis`` in it."""
    missing = 3 - array.ndim
    return array[(np.newaxis,) * missing], axis + missing


def _check_step(step) -> None:
    if not (np.isfinite(step) and step > 0):
        raise ValueError(f"step must be a finite length > 0, got {step}.")


def squared_distance_pass(squared: np.ndarray, axis: int, step: float) -> None:
    """In place: along ``axis``, ``squared[i] <- min_j (squared[j] + (step*(i-j))**2)``.

    Parameters
    ----------
    squared : ndarray of float32, 1D to 3D
        C-contiguous or not; 0 at the feature voxels and +inf elsewhere before the first
        pass, the result of the earlier passes before a later one. A line without any
        finite value stays +inf.
    axis : int
        The axis of this pass; ``squared`` must be whole along it.
    step : float
        Voxel size along ``axis`` (> 0), in the unit the distances are wanted in.

    Returns
    -------
    None
        ``squared`` holds the result.

    Examples
    --------
    >>> import numpy as np
    >>> line = np.array([np.inf, np.inf, 0, np.inf, np.inf, np.inf, 0], np.float32)
    >>> squared_distance_pass(line, 0, 1.0)
    >>> line.tolist()
    [4.0, 1.0, 0.0, 1.0, 4.0, 1.0, 0.0]
    """
    if not isinstance(squared, np.ndarray) or squared.dtype != np.float32:
        raise TypeError(f"squared must be a float32 ndarray, got "
                        f"{getattr(squared, 'dtype', type(squared).__name__)}.")
    if not 1 <= squared.ndim <= 3:
        raise ValueError(f"squared must have 1 to 3 axes, got shape {squared.shape}.")
    if not -squared.ndim <= axis < squared.ndim:
        raise ValueError(f"axis must be in [0, {squared.ndim - 1}] for shape {squared.shape}, "
                         f"got {axis}.")
    _check_step(step)
    if squared.size == 0:
        return
    axis = axis % squared.ndim
    view, axis3 = _as_3d(squared, axis)
    # bring the pass axis to the middle (or last) place by swapping views, never copying
    if axis3 == 2:
        _pass_along_last(view, float(step) ** 2)
        return
    if axis3 == 0:
        view = view.swapaxes(0, 1)
    if view.shape[2] == 1:
        _pass_along_last(view.swapaxes(1, 2), float(step) ** 2)
    else:
        _pass_along_middle(view, float(step) ** 2, _LINES_PER_BLOCK)


def _check_spacing(spacing, ndim: int) -> tuple[float, ...]:
    spacing = (1.0,) * ndim if spacing is None else tuple(float(s) for s in np.ravel(spacing))
    if len(spacing) == 1 and ndim > 1:
        spacing = spacing * ndim
    if len(spacing) != ndim or not all(np.isfinite(s) and s > 0 for s in spacing):
        raise ValueError(f"spacing must hold {ndim} finite lengths > 0, got {spacing}.")
    return spacing


def distance_to_nearest(feature: np.ndarray, spacing=None) -> np.ndarray:
    """float32 Euclidean distance from every voxel to the nearest True voxel of ``feature``.

    Parameters
    ----------
    feature : ndarray of bool, 1D to 3D
        The voxels distances are measured to (0 on them).
    spacing : float or sequence of float, optional
        Voxel size per axis (default 1); distances are in its unit.

    Returns
    -------
    ndarray of float32
        Same shape as ``feature``; ``+inf`` everywhere when ``feature`` has no True voxel
        (no distance exists). All passes run in memory: 4 bytes per voxel.

    Examples
    --------
    >>> import numpy as np
    >>> feature = np.zeros((1, 5), bool); feature[0, 0] = True
    >>> distance_to_nearest(feature, spacing=(1.0, 2.0)).tolist()
    [[0.0, 2.0, 4.0, 6.0, 8.0]]
    """
    feature = np.asarray(feature, dtype=bool)
    spacing = _check_spacing(spacing, feature.ndim)
    squared = np.where(feature, np.float32(0), np.float32(np.inf))
    for axis in reversed(range(feature.ndim)):
        squared_distance_pass(squared, axis, spacing[axis])
    return np.sqrt(squared, out=squared)


@njit(cache=True, nogil=True, inline="always")
def _two_phase_line(f, phase, n, step2, inner, outer, sites, starts):
    """The pass of both problems on one line: ``f`` holds, at each voxel, the value of the
    problem whose result that voxel keeps (distance to the other phase); the other
    problem's value there is 0 (the voxel is one of its features)."""
    for i in range(n):
        inner[i] = f[i] if phase[i] else 0.0
    _envelope(inner, n, step2, outer, sites, starts)
    for i in range(n):
        inner[i] = outer[i] if phase[i] else f[i]
    for i in range(n):
        f[i] = 0.0 if phase[i] else f[i]
    _envelope(f, n, step2, outer, sites, starts)
    for i in range(n):
        f[i] = inner[i] if phase[i] else outer[i]


@njit(cache=True, nogil=True, parallel=True)
def _two_phase_along_last(volume, phase, step2):
    n0, n1, n = volume.shape
    for line in prange(n0 * n1):
        a, b = line // n1, line % n1
        f = np.empty(n, np.float64)
        inside = np.empty(n, np.bool_)
        inner = np.empty(n, np.float64)
        outer = np.empty(n, np.float64)
        sites = np.empty(n, np.int64)
        starts = np.empty(n + 1, np.float64)
        for i in range(n):
            f[i] = volume[a, b, i]
            inside[i] = phase[a, b, i]
        _two_phase_line(f, inside, n, step2, inner, outer, sites, starts)
        for i in range(n):
            volume[a, b, i] = f[i]


@njit(cache=True, nogil=True, parallel=True)
def _two_phase_first_pass(volume, phase, step2):
    """The first pass (along axis 2) of both problems from the phases alone: along a line
    the squared distance from a voxel to the nearest voxel of the other phase, found from
    the last voxel of each phase seen going right, then going left (the lower envelope of
    parabolas at 0 on the other phase's voxels, without the envelope)."""
    n0, n1, n = volume.shape
    for line in prange(n0 * n1):
        a, b = line // n1, line % n1
        last_in, last_out = -1, -1  # last voxel of the phase, and of the rest
        for i in range(n):
            other = last_out if phase[a, b, i] else last_in
            volume[a, b, i] = np.inf if other < 0 else step2 * (i - other) * (i - other)
            if phase[a, b, i]:
                last_in = i
            else:
                last_out = i
        last_in, last_out = n, n
        for i in range(n - 1, -1, -1):
            other = last_out if phase[a, b, i] else last_in
            if other < n:
                d = step2 * (other - i) * (other - i)
                if d < volume[a, b, i]:
                    volume[a, b, i] = d
            if phase[a, b, i]:
                last_in = i
            else:
                last_out = i


@njit(cache=True, nogil=True, parallel=True)
def _two_phase_along_middle(volume, phase, step2, width):
    n0, n, n2 = volume.shape
    blocks = (n2 + width - 1) // width
    for task in prange(n0 * blocks):
        a, c0 = task // blocks, (task % blocks) * width
        lines = min(width, n2 - c0)
        f = np.empty((lines, n), np.float64)
        inside = np.empty((lines, n), np.bool_)
        inner = np.empty(n, np.float64)
        outer = np.empty(n, np.float64)
        sites = np.empty(n, np.int64)
        starts = np.empty(n + 1, np.float64)
        for i in range(n):
            for c in range(lines):
                f[c, i] = volume[a, i, c0 + c]
                inside[c, i] = phase[a, i, c0 + c]
        for c in range(lines):
            _two_phase_line(f[c], inside[c], n, step2, inner, outer, sites, starts)
        for i in range(n):
            for c in range(lines):
                volume[a, i, c0 + c] = f[c, i]


def two_phase_pass(squared: np.ndarray, phase: np.ndarray, axis: int, step: float) -> None:
    """In place: one pass along ``axis`` of both transforms of a two-phase block, held as
    :func:`signed_squared_distance` holds them.

    Parameters
    ----------
    squared : ndarray of float32, 1D to 3D
        At a ``phase`` voxel the squared distance to the other phase found by the earlier
        passes, at any other voxel the squared distance to ``phase`` (+inf everywhere
        before the first pass); whole along ``axis``.
    phase : ndarray of bool, same shape
    axis : int
    step : float
        Voxel size along ``axis`` (> 0).

    Examples
    --------
    >>> import numpy as np
    >>> line = np.full(6, np.inf, np.float32)
    >>> two_phase_pass(line, np.array([0, 1, 1, 1, 0, 0], bool), 0, 1.0)
    >>> line.tolist()
    [1.0, 1.0, 4.0, 1.0, 1.0, 4.0]
    """
    if squared.dtype != np.float32 or squared.shape != phase.shape or phase.dtype != bool:
        raise TypeError(f"squared must be float32 and phase bool of one shape, got "
                        f"{squared.dtype} {squared.shape} and {phase.dtype} {phase.shape}.")
    _check_step(step)
    if squared.size == 0:
        return
    volume, axis3 = _as_3d(squared, axis % squared.ndim)
    inside, _ = _as_3d(phase, 0)
    step2 = float(step) ** 2
    if axis3 == 2:
        _two_phase_along_last(volume, inside, step2)
        return
    if axis3 == 0:
        volume, inside = volume.swapaxes(0, 1), inside.swapaxes(0, 1)
    if volume.shape[2] == 1:
        _two_phase_along_last(volume.swapaxes(1, 2), inside.swapaxes(1, 2), step2)
    else:
        _two_phase_along_middle(volume, inside, step2, _LINES_PER_BLOCK)


def signed_squared_distance(phase: np.ndarray, spacing=None) -> np.ndarray:
    """Both squared distance transforms of a two-phase mask in one float32 array.

    At a ``phase`` voxel: the squared distance to the nearest voxel outside the phase; at
    any other voxel: the squared distance to the nearest ``phase`` voxel. Each voxel keeps
    only the problem it is not a feature of, because the other problem's value there is 0
    at every pass; so both run in 4 bytes per voxel instead of 8.

    Parameters
    ----------
    phase : ndarray of bool, 1D to 3D
        One phase (True); the other phase is every other voxel. Both must hold a voxel.
    spacing : float or sequence of float, optional
        Voxel size per axis (default 1).

    Returns
    -------
    ndarray of float32
        Squared distances in the squared unit of ``spacing``.

    Examples
    --------
    >>> import numpy as np
    >>> phase = np.array([False, True, True, True, False, False])
    >>> signed_squared_distance(phase).tolist()
    [1.0, 1.0, 4.0, 1.0, 1.0, 4.0]
    """
    phase = np.asarray(phase, dtype=bool)
    spacing = _check_spacing(spacing, phase.ndim)
    if phase.all() or not phase.any():
        raise ValueError("signed_squared_distance needs a voxel of each phase.")
    squared = np.empty(phase.shape, dtype=np.float32)  # the first pass writes every voxel
    volume, _ = _as_3d(squared, 0)
    inside, _ = _as_3d(phase, 0)
    for axis in reversed(range(3 - phase.ndim, 3)):
        step2 = spacing[axis - (3 - phase.ndim)] ** 2
        if axis == 2:
            _two_phase_first_pass(volume, inside, step2)
            continue
        v, p = ((volume.swapaxes(0, 1), inside.swapaxes(0, 1)) if axis == 0
                else (volume, inside))
        if v.shape[2] == 1:
            _two_phase_along_last(v.swapaxes(1, 2), p.swapaxes(1, 2), step2)
        else:
            _two_phase_along_middle(v, p, step2, _LINES_PER_BLOCK)
    return squared


def lower_envelope_python(f, step: float) -> np.ndarray:
    """Twin of one pass on one line, straight from the definition (tests only):
    ``out[i] = min_j f[j] + (step * (i - j))**2`` over the finite ``f[j]``."""
    f = np.asarray(f, dtype=np.float64)
    out = np.full(len(f), np.inf)
    for i in range(len(f)):
        for j in range(len(f)):
            if np.isfinite(f[j]):
                out[i] = min(out[i], f[j] + (step * (i - j)) ** 2)
    return out
