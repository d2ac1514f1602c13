"""One analysis, start to finish, as plain library calls (it runs in a worker thread).

The widget turns its controls into an :class:`AnalysisOptions` and a Scan, then calls
:func:`run_analysis`; everything here is ordinary voxtopo: ``jobs.analyse.run`` (smoothing,
threshold, distance transform, persistence and the verdict on every pair: significant for a
gray-value sweep, robust for a distance sweep) and, for a distance transform, the pore
regions. The layers hold every tested pair with its flag, so the diagram panel can show the
features by default and all pairs on request. With porosity, the pores job
(``jobs.pores.run``) does the segmentation, the diagram, the pore table and the regions,
exactly as ``voxtopo pores`` does, and its pores are tied to the diagram by their ids. The
result keeps the job's own result, so the status line and the saved folder are the job's
``describe`` and ``write``, as in the command. Nothing touches a viewer, so nothing is
half-made when the work is cancelled.
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass, field

import numpy as np

import voxtopo
from voxtopo import jobs, porosity
from voxtopo.errors import InputError
from voxtopo.jobs import analyse, pores
from voxtopo.jobs.analyse import AUTO, AnalysisOptions, prepare
from voxtopo.scan import Scan

from ._layers import Placement, placement_of, result_layers

__all__ = ["AnalysisResult", "run_analysis", "scan_from_layer_data"]


@dataclass
class AnalysisResult:
    """What one run produced: the scan, what was analysed, the diagram and its layers, and
    the result of the job that made them (``job_name``: "analyse" or "pores")."""

    name: str
    scan: Scan
    prepared: Scan
    options: AnalysisOptions
    diagram: voxtopo.Diagram
    placement: Placement
    layers: list = field(default_factory=list)
    regions: np.ndarray | None = None
    porosity: dict | None = None
    notes: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)
    job_name: str = "analyse"
    job: analyse.AnalysisResult | pores.PoresResult | None = None

    def describe(self) -> str:
        """What was found, in the words of the command: the job's ``describe`` (N
        significant / robust of M pairs with method and level, or the pore lines)."""
        return jobs.get(self.job_name).describe(self.job)

    def export(self, out, force: bool = False):
        """Write this result as the job's result folder, report.html included: what
        ``voxtopo pores`` or ``voxtopo analyse`` writes for the same settings."""
        return jobs.get(self.job_name).write(self.job, out, force)


def scan_from_layer_data(data, *, name: str, spacing, unit: str, source: str = "",
                         rgb: bool = False, is_mask: bool = False,
                         pores_labelled: bool = True) -> Scan:
    """A Scan from a layer's array: gray 2D / 3D only; a labels layer becomes a 0/1 mask.

    For a mask, ``pores_labelled`` says whether the labelled voxels (label > 0) are the
    pores; otherwise label 0 is.
    """
    if rgb:
        raise InputError(f"The layer {name!r} holds colour (RGB) pixels; convert it to gray "
                         f"values or pick a gray image layer.")
    array = np.asarray(data)
    if array.ndim not in (2, 3):
        raise InputError(f"The layer {name!r} has {array.ndim} dimensions (shape "
                         f"{array.shape}); pick a 2D image or a 3D volume.")
    if is_mask:
        array = (array > 0) if pores_labelled else (array == 0)
        array = array.astype(np.uint8)
    spacing = tuple(float(s) for s in spacing)[-array.ndim:]
    return Scan(array, spacing=spacing, unit=unit, source=source or f"napari layer {name}")


def _pore_job(scan: Scan, options: AnalysisOptions, progress) -> pores.PoresResult:
    """The pores job on the layer, with the panel's crop, downsampling and smoothing first;
    a binary image keeps its own phases (True, 1 = pore) instead of the panel's threshold,
    which the job would refuse on it."""
    gray, _ = prepare(scan, dataclasses.replace(options, distance=False, threshold=None,
                                                pores_bright=False))
    threshold, pores_bright = options.threshold, options.pores_bright
    if porosity.is_binary_mask(gray.data):
        threshold, pores_bright = None, False
    return pores.run(gray, pores.PoresOptions(
        threshold=threshold, pores_bright=pores_bright, neighbourhood=options.neighbourhood,
        min_persistence=None if options.min_persistence == AUTO else options.min_persistence,
        engine=options.engine, boundary_tolerance=options.boundary_tolerance), progress)


def _pore_details(analysis):
    """The pore table keyed by the diagram row of each pore (``feature``)."""
    details = analysis.pores.drop(columns=[c for c in analysis.pores.columns
                                           if c.startswith("body_voxel_")])
    details = details.rename(columns={"id": "pore_id"})
    details.insert(0, "feature", analysis.pore_rows)
    return details


def run_analysis(scan: Scan, options: AnalysisOptions, *, name: str, translate=None,
                 mark_deaths: bool = False, with_regions: bool = True,
                 with_porosity: bool = False, progress=None) -> AnalysisResult:
    """Prepare, compute persistence and build the layers of one result.

    Parameters
    ----------
    scan : Scan
        The layer's data with its spacing.
    options : AnalysisOptions
        Filtration, neighbourhood, smoothing and minimum persistence.
    name : str
        Name of the result (it appears in the layer names).
    translate : sequence of float, optional
        World position of the layer's voxel 0, so the results sit on top of it.
    mark_deaths : bool
        Also make Points layers at the death voxels.
    with_regions : bool
        For a distance transform, label the region of every pore.
    with_porosity : bool
        For a distance transform, run the pores job (``jobs.pores.run``) instead: its
        diagram, its pores (the pore layer then holds exactly the pores of the pore table,
        with their ids), its regions and its summary.
    progress : callable(phase, fraction), optional
        Raise voxtopo.Cancelled in it to stop; the run then leaves nothing behind.

    Returns
    -------
    AnalysisResult
    """
    def report(phase, fraction):
        if progress is not None:
            progress(phase, fraction)

    timings = {}
    porosity_summary, pore_details, regions, shown_rows = None, None, None, None
    computed, flag, thresholds = None, None, None
    if with_porosity and options.distance:
        start = time.perf_counter()
        computed = _pore_job(scan, options, progress)
        analysis = computed.analysis
        prepared, diagram, notes = analysis.distance, analysis.diagram, {}
        porosity_summary = analysis.summary
        pore_details = _pore_details(analysis)
        shown_rows = {0: analysis.pore_rows}
        flag = "robust"
        thresholds = {d: porosity_summary["robustness"]["threshold"]
                      for d in range(diagram.ndim)}
        timings["porosity"] = time.perf_counter() - start
        if with_regions:
            start = time.perf_counter()
            regions = porosity.regions_of(analysis, progress=progress)
            timings["pore_regions"] = time.perf_counter() - start
    else:
        report("preparing the filtration", 0.0)
        computed = analyse.run(scan, options, progress)
        prepared, diagram, notes = computed.prepared, computed.diagram, computed.notes
        timings.update(computed.timings)
        if computed.verdict.tested_any:
            flag, thresholds = computed.verdict.flag, computed.verdict.thresholds

        if with_regions and prepared.values == "distance":
            start = time.perf_counter()
            pore_pairs = diagram.dimension(0)
            regions = porosity.pore_regions(
                prepared.data, pore_pairs.voxels("birth"),
                pore_pairs.pairs["death"].to_numpy(), diagram.neighbourhood,
                progress=progress)
            timings["pore_regions"] = time.perf_counter() - start

    report("building the layers", 0.0)
    placement = placement_of(scan.shape, scan.spacing, scan.unit, crop=options.crop,
                             downsample=options.downsample, translate=translate)
    # every tested pair becomes a point, so the panel's switch can show all of them
    shown = diagram if porosity_summary is not None else computed.verdict.tested
    layers = result_layers(shown, placement, name, mark_deaths=mark_deaths, regions=regions,
                           pore_details=pore_details, shown_rows=shown_rows, flag=flag,
                           thresholds=thresholds,
                           show_all=options.min_persistence != AUTO)
    report("building the layers", 1.0)
    return AnalysisResult(name=name, scan=scan, prepared=prepared, options=options,
                          diagram=diagram, placement=placement, layers=layers,
                          regions=regions, porosity=porosity_summary, notes=notes,
                          timings=timings,
                          job_name="analyse" if porosity_summary is None else "pores",
                          job=computed)
