"""The pores job: a two-phase scan in, pore bodies, throats and percolation out.

``PoresOptions`` holds the settings in the user's words, :func:`run` measures a
``PoresResult`` with :func:`voxtopo.porosity.analyse`, :func:`write` fills the result folder
(:func:`write_pores`) and :func:`describe` says in one line what was found.
The CLI (`voxtopo pores`), the batch runner and the plugin only build the options.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

from .. import porosity
from ..errors import InputError
from ..io import load_on_grid_of, result_folder
from ..io.results import write_summary
from ..options import (AXIS, BOOLEAN, ENGINE, NEIGHBOURHOOD, NON_NEGATIVE, TEXT, THRESHOLD,
                       WHOLE, check, optional)
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

    def __post_init__(self):
        check(asdict(self), PORES_RULES, "the pores options")
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
}

#: The settings class of this job, under the name every job uses.
Options = PoresOptions


@dataclass
class PoresResult:
    """What :func:`run` measured, and the gray scan drawn under the slice plot."""

    analysis: object
    scan: Scan
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
    said = set(result.scan.metadata.get("notes", []))
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
    found = (f"{n['pores']} robust of {counts['pores']} pores, {n['grains']} robust of "
             f"{counts['grains']} grains, {n['loops']} robust of {counts['loops']} loops, "
             f"{n['voids']} robust of {counts['voids']} voids (robust: persistence above "
             f"{robust['threshold']:.4g} {unit}, boundary tolerance "
             f"{robust['boundary_tolerance']:.4g} {unit}, stability theorem; listed: living "
             f"longer than {summary['min_persistence']:.4g} {unit})")
    lines = [f"porosity {summary['porosity']:.4f} {where} ({size}); {found}; of the listed "
             f"pores {counts['pores_at_border']} at the border, {counts['isolated_pores']} "
             f"isolated; percolates {_percolation_words(summary)}"]
    return lines + list(summary.get("notes", []))


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
        ``pore_sizes.png``, ``distance_diagram.png``, ``pore_slices.png``.
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
        summary["plots"] = save_pore_plots(tmp, analysis, background)
        write_summary(tmp, summary)
        analysis.diagram.save(tmp)
        write_report(tmp)
    return Path(out)
