"""The pores job: a two-phase scan in, pore bodies, throats and percolation out.

``PoresOptions`` holds the settings in the user's words, :func:`run` measures a
``PoresResult`` with :func:`voxtopo.porosity.analyse`, :func:`write` fills the result folder
(:func:`write_pores`) and :func:`describe` says in one line what was found.
The CLI (`voxtopo pores`), the batch runner and the plugin only build the options.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from contextlib import contextmanager
from dataclasses import asdict, dataclass
from pathlib import Path

from .. import porosity
from ..errors import InputError
from ..io import load_on_grid_of, result_folder
from ..io.results import write_summary
from ..memory import BUDGET_FRACTION, available_bytes
from ..options import (AXIS, BOOLEAN, ENGINE, NEIGHBOURHOOD, NON_NEGATIVE, SHAPE, TEXT,
                       THRESHOLD, WHOLE, check, optional)
from ..report.html import write_report
from ..report.pores import save_pore_plots
from ..scan import Scan, as_scan


@dataclass(frozen=True)
class PoresOptions:
    """Settings of a pores run; every field has the `voxtopo pores` option of that name.

    mask            a binary pore mask file (1 = pore) for a gray scan, which then only
                    shows under the marks of the slice plot
    threshold       segment a gray scan: a value or "otsu"; pores at or below it
    pores_bright    with threshold: the pores are the voxels above it
    label           the pore label of a label image
    roi             a mask file of the sample (1 = sample): outside it voxels are neither
                    pore nor solid, and every number counts only the sample
    axis            axes of percolation and connected porosity ("z", "y", "x" or a list)
    neighbourhood   connectivity of the pore phase: 26 / 8 (default) or 6 / 4
    min_persistence merge pores whose body exceeds their throat by no more than this
                    (default half the finest voxel size)
    engine          persistence engine: "auto", "voxtopo" or "gudhi"
    boundary_tolerance  how far the segmented boundary may be off, in the scan's unit
                    (None = one voxel); features living longer than twice it plus a
                    voxel diagonal are robust
    out_of_core     read the scan chunk by chunk on a dask cluster (zarr / OME-Zarr, or a
                    TIFF / .npy rewritten into a store first): for scans larger than memory
                    (:func:`pores_out_of_core`)
    chunks          with out_of_core: block shape of the tasks (default the store's)
    """

    mask: str | None = None
    threshold: str | float | None = None
    pores_bright: bool = False
    label: int | None = None
    roi: str | None = None
    axis: str | tuple | None = None
    neighbourhood: int | None = None
    min_persistence: float | None = None
    engine: str = "auto"
    boundary_tolerance: float | None = None
    out_of_core: bool = False
    chunks: tuple | None = None

    def __post_init__(self):
        check(asdict(self), PORES_RULES, "the pores options")
        if self.chunks is not None and not self.out_of_core:
            raise InputError("--chunks sets the block shape of the out-of-core path and would "
                             "be ignored without --out-of-core; add it, or leave --chunks out.")
        if self.out_of_core:
            if self.engine != "auto":
                raise InputError(f"--engine {self.engine} picks an in-memory engine and would "
                                 f"be ignored with --out-of-core (the chunked union-find "
                                 f"computes the diagrams); leave it out.")
            if self.mask is not None:
                raise InputError("With --out-of-core the scan itself is analysed and a gray "
                                 "scan under --mask would only be drawn in a plot; give the "
                                 "mask as the scan, or drop --out-of-core.")
        if self.mask is not None and (self.threshold is not None or self.label is not None):
            raise InputError("--mask already says which voxels are pores; leave out "
                             "--threshold and --label.")
        if self.pores_bright and self.threshold is None:
            raise InputError("--pores-bright says which side of --threshold the pores are; "
                             "give --threshold with it, or leave it out.")


#: What each field of PoresOptions accepts (settings files are checked against it).
PORES_RULES = {
    "mask": optional(TEXT), "threshold": optional(THRESHOLD), "pores_bright": BOOLEAN,
    "label": optional(WHOLE), "roi": optional(TEXT), "axis": optional(AXIS),
    "neighbourhood": optional(NEIGHBOURHOOD), "min_persistence": optional(NON_NEGATIVE),
    "engine": ENGINE, "boundary_tolerance": optional(NON_NEGATIVE),
    "out_of_core": BOOLEAN, "chunks": optional(SHAPE),
}

#: The settings class of this job, under the name every job uses.
Options = PoresOptions


@dataclass
class PoresResult:
    """What :func:`run` measured, and the gray scan drawn under the slice plot (None out
    of core: the plot draws the segmented mask)."""

    analysis: object
    scan: Scan | None
    inputs: tuple = ()


def run(scan: Scan, options: PoresOptions | None = None, progress=None) -> PoresResult:
    """Measure the pore space of ``scan`` (or of ``options.mask`` over it).

    Parameters
    ----------
    scan : Scan
        A binary pore mask, a label image or a gray scan (segmented by
        ``options.threshold``); with ``options.mask``, the gray scan drawn under the plots.
    options : PoresOptions, optional
        The settings; the defaults of ``voxtopo pores`` without one.
    progress : callable(phase, fraction), optional
        Called as the work goes on; may raise :class:`~voxtopo.Cancelled`.

    Returns
    -------
    PoresResult
        The :class:`voxtopo.porosity.PoreAnalysis`, the scan, and the mask and region of
        interest files it was made from.

    Raises
    ------
    InputError
        A mask or region of interest of another shape, or what
        :func:`voxtopo.porosity.analyse` refuses.
    """
    options = options or PoresOptions()
    if options.out_of_core:
        raise InputError("An out-of-core pores run reads its scan chunk by chunk from a file: "
                         "call voxtopo.jobs.pores.pores_out_of_core with the scan's path.")
    target = load_on_grid_of(scan, options.mask, "mask") if options.mask else scan
    roi = load_on_grid_of(scan, options.roi, "region of interest") if options.roi else None
    axis = list(options.axis) if isinstance(options.axis, tuple) else options.axis
    analysis = porosity.analyse(target, threshold=options.threshold,
                                pores_bright=options.pores_bright, label=options.label,
                                roi=roi, axis=axis, neighbourhood=options.neighbourhood,
                                min_persistence=options.min_persistence, engine=options.engine,
                                boundary_tolerance=options.boundary_tolerance,
                                progress=progress)
    return PoresResult(analysis, scan, (options.mask, options.roi))


def write(result: PoresResult, out, force: bool = False) -> Path:
    """Fill the result folder ``out`` (pores.csv, grains.csv, loops.csv, voids.csv,
    pairs.csv, summary.json, plots, report.html); see :func:`write_pores`.

    Parameters
    ----------
    result : PoresResult
        What :func:`run` returned.
    out : str or Path
        The result folder to create, whole or not at all; it may not be nor hold the scan,
        the mask or the region of interest.
    force : bool
        Replace ``out`` when it is a result folder voxtopo wrote.

    Returns
    -------
    Path
        ``out``.
    """
    return write_pores(out, result.analysis, result.scan, force=force, inputs=result.inputs)


def describe(result: PoresResult) -> str:
    """What was found, in the words of the CLI lines and the plugin's status (one line
    each: porosity and counts with percolation, then every note the reader did not
    already give before the work started).

    Parameters
    ----------
    result : PoresResult
        What :func:`run` returned.

    Returns
    -------
    str
        The lines of :func:`summary_lines`, without the notes the scan's reader gave.
    """
    said = set(result.scan.metadata.get("notes", [])) if result.scan is not None else set()
    return "\n".join(line for line in summary_lines(result.analysis.summary)
                     if line not in said)


#: first columns of pores.csv, in this order; more columns may follow
PORE_COLUMNS = ["id", "body_radius", "body_z", "body_y", "body_x", "throat_radius",
                "throat_z", "throat_y", "throat_x", "border", "lifetime", "robust"]


def _percolation_words(summary: dict) -> str:
    unit = summary["unit"]
    words = []
    for axis, state in summary["percolates"].items():
        radius = summary["percolation_radius"][axis]
        if state in ("yes", "not resolved"):
            words.append(f"{axis}: {state} (r = {radius:.4g} {unit})")
        else:
            words.append(f"{axis}: {state}")
    return ", ".join(words)


def summary_lines(summary: dict) -> list[str]:
    """The lines a person reads first (CLI, plugin status): porosity, counts, percolation,
    then every note of the summary, one sentence each.

    Parameters
    ----------
    summary : dict
        ``PoreAnalysis.summary`` (or a pores folder's summary.json).

    Returns
    -------
    list of str
        Porosity (of the sample or of the scan, with the unit), the robust and listed
        counts with the robustness threshold, pores at the border and isolated, and
        percolation per axis with its radius; then the notes.
    """
    unit = summary["unit"]
    where = "of the sample" if summary.get("region_of_interest") else "of the scan"
    size = ("voxel size unknown, lengths in px" if unit == "px"
            else f"lengths in {unit}")
    counts = summary["counts"]
    robust = summary["robustness"]
    n = robust["robust"]
    loops = ("loops not computed (dimension 1 is computed in memory only)"
             if counts["loops"] is None else f"{n['loops']} robust of {counts['loops']} loops")
    found = (f"{n['pores']} robust of {counts['pores']} pores, {n['grains']} robust of "
             f"{counts['grains']} grains, {loops}, "
             f"{n['voids']} robust of {counts['voids']} voids (robust: "
             f"{robust_level(summary)}; listed: living longer than "
             f"{summary['min_persistence']:.4g} {unit})")
    isolated = ("" if counts["isolated_pores"] is None
                else f", {counts['isolated_pores']} isolated")
    lines = [f"porosity {summary['porosity']:.4f} {where} ({size}); {found}; of the listed "
             f"pores {counts['pores_at_border']} at the border{isolated}; percolates "
             f"{_percolation_words(summary)}"]
    return lines + list(summary.get("notes", []))


def robust_level(summary: dict) -> str:
    """What makes a pore, grain, loop or void robust, in the words of the result line:
    "persistence above 1.5 um, boundary tolerance 0.5 um, stability theorem".

    Parameters
    ----------
    summary : dict
        ``PoreAnalysis.summary`` (or a pores folder's summary.json).

    Returns
    -------
    str
        The threshold and the boundary tolerance with the scan's unit, and the method.
    """
    unit = summary["unit"]
    robust = summary["robustness"]
    return (f"persistence above {robust['threshold']:.4g} {unit}, boundary tolerance "
            f"{robust['boundary_tolerance']:.4g} {unit}, stability theorem")


def column_units(table, unit: str) -> dict:
    """Column -> unit of a pore, grain, loop or void table ("" for flags, ids and kinds).

    Parameters
    ----------
    table : DataFrame
        The table whose columns are named.
    unit : str
        The scan's unit of length.

    Returns
    -------
    dict
        Column -> "voxel index", ``unit``, ``unit^2``, ``unit^3`` or "".
    """
    units = {}
    for column in table.columns:
        if "_voxel_" in column:
            units[column] = "voxel index"
        elif column.endswith("_volume"):
            units[column] = f"{unit}^3"
        elif column.endswith("_area"):
            units[column] = f"{unit}^2"
        elif column.endswith(("_radius", "_z", "_y", "_x")) or column == "lifetime":
            units[column] = unit
        else:
            units[column] = ""
    return units


def write_pores(out, analysis, scan=None, force: bool = False, inputs=()) -> Path:
    """Write the result folder of a pore analysis, atomically.

    Parameters
    ----------
    out : path
        Folder to create: ``pores.csv`` (columns ``id, body_radius, body_z, body_y, body_x,
        throat_radius, throat_z, throat_y, throat_x, border, lifetime, body_volume,
        isolated``; 2D drops the z columns and has ``body_area``), ``grains.csv``,
        ``loops.csv``, ``voids.csv`` (positions and sizes in the scan's unit),
        ``pairs.csv`` (the diagram of the signed distance: positions in the scan's unit
        and as voxel indices, :class:`voxtopo.Diagram`),
        ``summary.json`` (with ``columns``: file -> column -> unit) and the plots
        ``pore_sizes.png``, ``distance_diagram.png``, ``pore_slices.png``; out of core
        also ``betti_curves.csv`` (levels in the scan's unit, Betti numbers and Euler
        characteristic of the pore sweep).
    analysis : PoreAnalysis
        What :func:`voxtopo.porosity.analyse` returned.
    scan : Scan or ndarray, optional
        The grayscale scan to draw under the marks of the slice plot (default: the mask).
    force : bool
        Replace ``out`` if it is a result folder voxtopo wrote.
    inputs : sequence of paths
        Other files the result was made from (a mask): ``out`` may not be nor hold them.

    Returns
    -------
    Path of the folder.
    """
    background = analysis.mask if scan is None else as_scan(scan).data
    with result_folder(out, force=force,
                       inputs=[getattr(scan, "source", None), *inputs]) as tmp:
        pores = analysis.pores
        extra = [c for c in pores.columns if c not in PORE_COLUMNS]
        ordered = [c for c in PORE_COLUMNS if c in pores.columns] + extra
        pores[ordered].to_csv(tmp / "pores.csv", index=False, float_format="%.6g")
        analysis.grains.to_csv(tmp / "grains.csv", index=False, float_format="%.6g")
        analysis.loops.to_csv(tmp / "loops.csv", index=False, float_format="%.6g")
        analysis.voids.to_csv(tmp / "voids.csv", index=False, float_format="%.6g")
        summary = dict(analysis.summary)
        summary["files"] = {"pores": "pores.csv", "grains": "grains.csv", "loops": "loops.csv",
                            "voids": "voids.csv", "diagram": "pairs.csv"}
        unit = summary["unit"]
        summary["columns"] = {
            f"{name}.csv": column_units(getattr(analysis, name), unit)
            for name in ("pores", "grains", "loops", "voids")}
        summary["columns"]["pairs.csv"] = analysis.diagram.column_units()
        if analysis.betti_curves is not None:
            analysis.betti_curves.to_csv(tmp / "betti_curves.csv", index=False,
                                         float_format="%.6g")
            summary["files"]["betti_curves"] = "betti_curves.csv"
            summary["columns"]["betti_curves.csv"] = {
                c: (unit if c == "level" else "") for c in analysis.betti_curves.columns}
        summary["plots"] = save_pore_plots(tmp, analysis, background)
        write_summary(tmp, summary)
        analysis.diagram.save(tmp)
        write_report(tmp)
    return Path(out)


# ------------------------------------------------------------------------- out of core
#: load options the out-of-core path understands (raw files are not rewritten)
_CHUNKED_LOAD_OPTIONS = {"spacing", "unit", "channel", "timepoint", "level"}


def _opened(source, scratch: Path, name: str, chunks, load_options, progress):
    """``source`` as a chunked array: an array as is, a zarr store opened, a TIFF or .npy
    rewritten into a store in ``scratch`` first."""
    from ..io._chunked import open_chunked, rewrite_as_store
    from ..io._zarr import is_zarr

    if not isinstance(source, (str, Path)):
        return source
    path = Path(source)
    spacing, unit = load_options.get("spacing"), load_options.get("unit")
    if spacing is not None:
        spacing = tuple(float(v) for v in (spacing if hasattr(spacing, "__len__")
                                           else [spacing]))
    if path.exists() and is_zarr(path):
        opened = open_chunked(path, level=load_options.get("level", 0),
                              channel=load_options.get("channel"),
                              timepoint=load_options.get("timepoint"), unit=unit)
    else:
        if not path.exists():
            raise InputError(f"No file or folder at {path}; check the path.")
        opened = rewrite_as_store(path, scratch / f"{name}.zarr", chunks=chunks, unit=unit,
                                  progress=progress)
    if spacing is not None:
        spacing = spacing * opened.ndim if len(spacing) == 1 else spacing
        if len(spacing) != opened.ndim:
            raise InputError(f"Spacing {spacing} has {len(spacing)} values but {path} is "
                             f"{opened.ndim}D; give one value per axis in (z, y, x) order.")
        opened.spacing = spacing
    return opened


def run_out_of_core(source, options: PoresOptions | None = None, *, scratch, scheduler=None,
                    load_options=None, progress=None) -> PoresResult:
    """Measure the pore space of a scan larger than memory, chunk by chunk
    (:func:`voxtopo.porosity.analyse_chunked`); intermediate stores go to ``scratch``,
    which must exist, be reachable by every worker, and is left for the caller to remove.
    """
    options = options or PoresOptions(out_of_core=True)
    load_options = dict(load_options or {})
    unknown = sorted(set(load_options) - _CHUNKED_LOAD_OPTIONS)
    if unknown:
        raise InputError(f"The out-of-core path reads zarr stores, TIFF and .npy files and "
                         f"takes no {unknown} option; leave it out.")
    scratch = Path(scratch)
    array = _opened(source, scratch, "scan", options.chunks, load_options, progress)
    roi = (None if options.roi is None else
           _opened(options.roi, scratch, "region-of-interest", options.chunks or array.chunks,
                   {k: v for k, v in load_options.items() if k in ("level",)}, progress))
    axis = list(options.axis) if isinstance(options.axis, tuple) else options.axis
    analysis = porosity.analyse_chunked(
        array, scratch=scratch / "work", threshold=options.threshold,
        pores_bright=options.pores_bright, label=options.label, roi=roi, axis=axis,
        neighbourhood=options.neighbourhood, min_persistence=options.min_persistence,
        boundary_tolerance=options.boundary_tolerance, chunks=options.chunks,
        scheduler=scheduler, progress=progress)
    # no Scan in memory: the slice plot draws the segmented mask, read slice by slice
    return PoresResult(analysis, None, (options.roi,))


@contextmanager
def dask_scheduler(scheduler, scratch: Path):
    """The scheduler of an out-of-core run: a dask.distributed Client for an ADDRESS, the
    given Client or local scheduler name as is, or (None) a local cluster of one worker
    per core, each with an equal share of the memory, keeping its files in ``scratch``;
    closed on leaving."""
    if scheduler is not None and not isinstance(scheduler, str):
        yield scheduler
        return
    if scheduler in ("sync", "threads", "synchronous"):
        yield scheduler
        return
    from ..batch.cluster import connect, local_cluster

    if scheduler is not None:
        client = connect(scheduler)
        try:
            yield client
        finally:
            client.close()
        return

    workers = max(1, os.cpu_count() or 1)
    share = int(available_bytes() * BUDGET_FRACTION / workers)
    client, cluster = local_cluster(workers, share, scratch, dashboard=False,
                                    config={"distributed.worker.daemon": False})
    try:
        with client:
            yield client
    finally:
        cluster.close()


def pores_out_of_core(source, out, options: PoresOptions | None = None, *, scratch=None,
                      scheduler=None, load_options=None, force: bool = False,
                      progress=None) -> PoresResult:
    """Measure a scan larger than memory and write its result folder ``out``.

    Intermediate stores go to a new folder inside ``scratch`` (default: beside ``out``,
    where the result folder's own temporary copy is made) and are removed at the end, also
    on error; ``out`` appears complete or not at all. ``scheduler`` is a dask scheduler
    address (every worker must reach ``source`` and ``scratch``), a Client, or None for a
    local cluster sized to this machine.
    """
    from ..io.results import check_target

    options = options or PoresOptions(out_of_core=True)
    inputs = [source] if isinstance(source, (str, Path)) else []
    target = check_target(out, force, inputs=inputs + [options.roi])
    parent = Path(scratch) if scratch is not None else target.parent
    parent.mkdir(parents=True, exist_ok=True)
    folder = Path(tempfile.mkdtemp(prefix=f".{target.name}.scratch-", dir=parent))
    try:
        with dask_scheduler(scheduler, folder) as client:
            result = run_out_of_core(source, options, scratch=folder, scheduler=client,
                                     load_options=load_options, progress=progress)
            write(result, out, force=force)
        return result
    finally:
        shutil.rmtree(folder, ignore_errors=True)
