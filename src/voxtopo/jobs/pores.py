"""The pores job: a two-phase scan in, pore bodies, throats and percolation out.

``PoresOptions`` holds the settings in the user's words, :func:`run` measures a
``PoresResult`` with :func:`voxtopo.porosity.analyse`, :func:`write` fills the result folder
(:func:`voxtopo.porosity.write_pores`) and :func:`describe` says in one line what was found.
The CLI (`voxtopo pores`), the batch runner and the plugin only build the options.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path

from .. import porosity
from ..errors import InputError
from ..io import load_on_grid_of
from ..options import (AXIS, BOOLEAN, ENGINE, NEIGHBOURHOOD, NON_NEGATIVE, TEXT, THRESHOLD,
                       WHOLE, check, optional)
from ..scan import Scan


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
    """Measure the pore space of ``scan`` (or of ``options.mask`` over it)."""
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
    pairs.csv, summary.json, plots, report.html)."""
    return porosity.write_pores(out, result.analysis, result.scan, force=force,
                                inputs=result.inputs)


def describe(result: PoresResult) -> str:
    """What was found, in the words of the CLI lines and the plugin's status (one line
    each: porosity and counts with percolation, then every note the reader did not
    already give before the work started)."""
    said = set(result.scan.metadata.get("notes", []))
    return "\n".join(line for line in porosity.summary_lines(result.analysis.summary)
                     if line not in said)
