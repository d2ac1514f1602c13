"""Persistence backends and the `persistence` function that chooses between them.

Backends are plain functions ``compute(values, *, superlevel, construction, periodic,
field, progress) -> RawPairs``. ``"gudhi"`` is the reference; the project's own exact
engine is ``"voxtopo"`` (engine/own.py) and ``engine="auto"`` prefers it where it applies
(Z/2 coefficients, no periodic boundaries).
"""

from __future__ import annotations

import time

import numpy as np

from ..diagram import TABLE_BYTES_PER_PAIR, Diagram, check_min_persistence
from ..errors import InputError
from ..memory import ensure_fits
from ..scan import Scan, as_scan
from . import _gudhi, own
from ._pairs import RawPairs, check_exact_in_float64

__all__ = ["persistence", "estimate", "out_of_core_remedy", "construction_of",
           "default_neighbourhood", "BACKENDS", "RawPairs"]

#: name -> (compute function, bytes per voxel or a callable giving the bytes of a run)
BACKENDS = {
    "gudhi": (_gudhi.compute, _gudhi.BYTES_PER_VOXEL),
    "voxtopo": (own.compute, own.BYTES_PER_VOXEL),
}

_NEIGHBOURHOODS = {2: {4: "vertex", 8: "voxel"}, 3: {6: "vertex", 26: "voxel"}}


def default_neighbourhood(ndim: int) -> int:
    """8 in 2D and 26 in 3D: the voxel construction, where voxels that share only a
    corner belong to the same component of the swept set (sublevel or superlevel).

    Parameters
    ----------
    ndim : int
        2 or 3.

    Returns
    -------
    int
        The default neighbourhood.

    Examples
    --------
    >>> default_neighbourhood(2), default_neighbourhood(3)
    (8, 26)
    """
    return 8 if ndim == 2 else 26


def construction_of(ndim: int, neighbourhood: int | None) -> tuple[int, str]:
    """(neighbourhood, "vertex" | "voxel") for a scan of ``ndim`` dimensions.

    Parameters
    ----------
    ndim : int
        2 or 3.
    neighbourhood : int or None
        4 or 8 in 2D, 6 or 26 in 3D; None: :func:`default_neighbourhood`.

    Returns
    -------
    (int, str)
        The neighbourhood and its construction: 4 / 6 the vertex construction, 8 / 26
        the voxel (top-dimensional cell) construction.

    Raises
    ------
    InputError
        For a neighbourhood that the scan's dimension does not have.

    Examples
    --------
    >>> construction_of(3, None), construction_of(2, 4)
    ((26, 'voxel'), (4, 'vertex'))
    """
    if neighbourhood is None:
        neighbourhood = default_neighbourhood(ndim)
    choices = _NEIGHBOURHOODS[ndim]
    if neighbourhood not in choices:
        raise InputError(
            f"Neighbourhood for a {ndim}D scan should be one of {sorted(choices)}, "
            f"got {neighbourhood}."
        )
    return neighbourhood, choices[neighbourhood]


def _choose_engine(engine: str, field: int, periodic: bool) -> tuple[str, list[str]]:
    notes = []
    if engine == "auto":
        if field == 2 and not periodic:
            return "voxtopo", notes
        reason = "periodic boundaries" if periodic else f"coefficients in Z/{field}"
        notes.append(f"{reason}: computed with the gudhi backend")
        return "gudhi", notes
    if engine not in BACKENDS:
        raise InputError(f"Unknown engine {engine!r}; choose one of "
                         f"{sorted(BACKENDS) + ['auto']}.")
    return engine, notes


def estimate(shape, dtype=np.float32, *, engine: str = "auto", neighbourhood=None,
             field: int = 2, periodic: bool = False) -> int:
    """Bytes a persistence run on an array of ``shape`` and ``dtype`` will need beyond the
    array itself: the backend's peak, or the table of pairs the Diagram is built into
    (planned at one pair per 25 voxels, :data:`voxtopo.diagram.TABLE_BYTES_PER_PAIR`
    each), whichever is larger; the two are never held at once.

    Parameters
    ----------
    shape : tuple of int
        The array's shape.
    dtype : numpy dtype
        The array's type.
    engine : {"auto", "voxtopo", "gudhi"}
        The engine :func:`persistence` would use ("auto" chooses as it does).
    neighbourhood : int, optional
        As for :func:`persistence` (the own engine's plan depends on it).
    field : int
        Coefficient field Z/field.
    periodic : bool
        Periodic boundaries (these go to the gudhi backend).

    Returns
    -------
    int
        Planned bytes of the run's working memory.

    Examples
    --------
    >>> import numpy as np
    >>> 10e9 < estimate((1024, 1024, 1024), np.uint16) < 16e9
    True
    """
    name, _ = _choose_engine(engine, field, periodic)
    voxels = int(np.prod(shape, dtype=np.int64))
    per_voxel = BACKENDS[name][1]
    if callable(per_voxel):
        backend = int(per_voxel(tuple(shape), np.dtype(dtype), neighbourhood))
    else:
        backend = voxels * per_voxel + voxels * np.dtype(np.float64).itemsize
    table = int(own.PLANNED_PAIRS_PER_VOXEL * voxels * TABLE_BYTES_PER_PAIR)
    return max(backend, table)


def out_of_core_remedy(ndim: int) -> str:
    """The remedies for a scan too big for an in-memory run, in the user's words."""
    computed = "the whole diagram" if ndim == 2 else f"dimensions 0 and {ndim - 1}"
    return (f"crop it (--crop), downsample it (--downsample), or compute {computed} out of "
            f"core from an OME-Zarr copy of the scan (voxtopo analyse --out-of-core, or "
            f"voxtopo batch)")


def _check_values(data: np.ndarray, source: str) -> None:
    if not (np.issubdtype(data.dtype, np.integer) or np.issubdtype(data.dtype, np.floating)
            or data.dtype == bool):
        raise InputError(f"Cannot compute persistence of {data.dtype} values from {source}; "
                         f"give gray values as integers or floats.")
    if np.issubdtype(data.dtype, np.floating) and not np.isfinite(data).all():
        bad = int(np.count_nonzero(~np.isfinite(data)))
        raise InputError(
            f"{source} has {bad} NaN or infinite voxels; fill them "
            f"(voxtopo.filtration.fill_invalid) or mask them out before computing persistence."
        )
    check_exact_in_float64(data, source)


def persistence(scan_or_array, superlevel: bool = False, neighbourhood: int | None = None,
                periodic=False, field: int = 2, engine: str = "auto",
                min_persistence: float = 0.0, *, spacing=None, unit=None,
                progress=None, memory_checked: bool = False,
                level_values: np.ndarray | None = None) -> Diagram:
    """Cubical persistence diagram of a 2D image or 3D volume, with feature locations.

    Parameters
    ----------
    scan_or_array : Scan or ndarray
        Gray values (or a signed distance transform), 2D (y, x) or 3D (z, y, x).
    superlevel : bool
        Sweep from high to low values (bright features first). Pairs keep the scan's
        own values: birth is the higher value, death the lower, essential death -inf.
    neighbourhood : {4, 8} in 2D, {6, 26} in 3D, optional
        Connectivity of the swept set. 8/26 (default) is the voxel construction, in which
        voxels touching at a corner are connected; 4/6 is the vertex construction.
    periodic : bool or sequence of bool
        Glue opposite faces (all axes, or per axis).
    field : int
        Prime p of the coefficient field Z/p.
    engine : {"auto", "voxtopo", "gudhi"}
        "auto" uses the project's own engine where it applies, else gudhi.
    min_persistence : float
        Keep pairs whose persistence is strictly greater than this.
    spacing, unit : optional
        Voxel size and unit for a bare array (they override a Scan's own).
    progress : callable(phase: str, fraction: float), optional
        Called as work advances; raise voxtopo.Cancelled inside it to stop.
    memory_checked : bool
        The caller has already planned this run's memory within a larger job and checked
        that it fits (:func:`voxtopo.porosity.analyse` does), so the run is not checked
        again against what is left after the job's own arrays, nor refused with remedies
        that name another command.
    level_values : ndarray, optional
        The scan holds level numbers (non-negative integers) in place of these values:
        ``level_values[k]`` is the value of level ``k``, in increasing order of ``k``
        (:func:`voxtopo.engine._levels.float_levels` makes both). The diagram holds the
        values. A float field kept as levels takes half or less of its memory.

    Returns
    -------
    Diagram

    Examples
    --------
    >>> import numpy as np, voxtopo
    >>> ring = np.ones((7, 7)); ring[1:6, 1:6] = 0
    >>> d = voxtopo.persistence(ring, superlevel=True)
    >>> d.betti(1.0)
    [1, 1]
    """
    min_persistence = check_min_persistence(min_persistence)
    scan = as_scan(scan_or_array, spacing=spacing, unit=unit)
    data = scan.data
    if data.dtype == bool:
        data = data.astype(np.uint8)
    _check_values(data, scan.source or "the array")
    neighbourhood, construction = construction_of(scan.ndim, neighbourhood)
    if isinstance(periodic, (bool, np.bool_)):
        periodic_axes = (bool(periodic),) * scan.ndim
    else:
        periodic_axes = tuple(bool(p) for p in periodic)
        if len(periodic_axes) != scan.ndim:
            raise InputError(f"periodic needs one flag per axis ({scan.ndim}), got {periodic}.")
    if field < 2 or any(field % k == 0 for k in range(2, int(field ** 0.5) + 1)):
        raise InputError(f"The coefficient field must be Z/p for a prime p, got {field}.")
    name, notes = _choose_engine(engine, field, any(periodic_axes))
    if not memory_checked:
        needed = estimate(data.shape, data.dtype, engine=name, neighbourhood=neighbourhood,
                          field=field, periodic=any(periodic_axes))
        ensure_fits(needed, f"Persistence of the {'x'.join(map(str, data.shape))} scan with "
                            f"the {name} engine", out_of_core_remedy(scan.ndim))
    compute = BACKENDS[name][0]
    start = time.perf_counter()
    raw = compute(data, superlevel=superlevel, construction=construction,
                  periodic=periodic_axes if any(periodic_axes) else None, field=field,
                  progress=progress)
    seconds = time.perf_counter() - start
    if level_values is not None:
        raw = raw.at_levels(level_values)
    return Diagram.from_raw(raw, scan, superlevel=superlevel, neighbourhood=neighbourhood,
                            field=field, periodic=periodic_axes,
                            min_persistence=min_persistence,
                            notes=tuple(notes) + tuple(raw.notes), seconds=seconds)
