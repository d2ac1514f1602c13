"""One analysis, start to finish, as plain library calls (it runs in a worker thread).

The widget turns its controls into an :class:`AnalysisOptions` and a Scan, then calls
:func:`run_analysis`; everything here is ordinary voxtopo: ``jobs.analyse.run`` (smoothing,
threshold, distance transform), ``voxtopo.persistence`` and, for a distance transform, the
pore regions. Nothing touches a viewer, so nothing is half-made when the work is cancelled.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

import voxtopo
from voxtopo.errors import InputError
from voxtopo.jobs import analyse
from voxtopo.jobs.analyse import AnalysisOptions, write_result
from voxtopo.scan import Scan

from ._layers import Placement, placement_of, result_layers
from ._pore_regions import pore_regions

__all__ = ["AnalysisResult", "run_analysis", "scan_from_layer_data"]


@dataclass
class AnalysisResult:
    """What one run produced: the scan, what was analysed, the diagram and its layers."""

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

    def export(self, out, force: bool = False):
        """Write this result as a voxtopo result folder (the files of ``voxtopo analyse``)."""
        return write_result(out, self.scan, self.diagram, self.options,
                            prepared=self.prepared, timings=self.timings, notes=self.notes,
                            force=force)


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


def _pore_details(prepared: Scan, diagram, options: AnalysisOptions, progress):
    """voxtopo.porosity's measures of the same pore phase: (summary, per-pore table).

    The table has the diagram row of each pore (``feature``, matched by the pore's
    deepest voxel) and the porosity columns ``body_volume``, ``border``, ``isolated``.
    """
    from voxtopo import porosity

    analysis = porosity.analyse(prepared.data < 0, spacing=prepared.spacing,
                                unit=prepared.unit, neighbourhood=diagram.neighbourhood,
                                engine=options.engine, progress=progress)
    axes = ("z", "y", "x")[3 - diagram.ndim:]
    spacing = np.asarray(prepared.spacing)
    body_voxels = np.rint(analysis.pores[[f"body_{a}" for a in axes]].to_numpy(
        dtype=np.float64) / spacing).astype(np.int64)
    pores = diagram.dimension(0).pairs
    rows = diagram.pairs.index[diagram.pairs["dim"] == 0]
    birth_voxels = pores[[f"birth_{a}" for a in axes]].to_numpy(dtype=np.int64)
    row_of_voxel = {tuple(v): int(r) for v, r in zip(birth_voxels, rows)}
    features = [row_of_voxel.get(tuple(v), -1) for v in body_voxels]
    table = analysis.pores[["body_volume", "border", "isolated"]].copy()
    table.insert(0, "feature", features)
    return analysis.summary, table[table["feature"] >= 0].reset_index(drop=True)


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
        For a distance transform, also run :func:`voxtopo.porosity.analyse` on the pore
        phase: its summary (porosity, percolation) and per-pore volumes join the result.
    progress : callable(phase, fraction), optional
        Raise voxtopo.Cancelled in it to stop; the run then leaves nothing behind.

    Returns
    -------
    AnalysisResult
    """
    def report(phase, fraction):
        if progress is not None:
            progress(phase, fraction)

    report("preparing the filtration", 0.0)
    computed = analyse.run(scan, options, progress)
    prepared, diagram = computed.prepared, computed.diagram
    notes, timings = computed.notes, dict(computed.timings)

    regions = None
    if with_regions and prepared.values == "distance":
        start = time.perf_counter()
        pores = diagram.dimension(0).pairs
        axes = ("birth_z", "birth_y", "birth_x")[3 - diagram.ndim:]
        regions = pore_regions(prepared.data, pores[list(axes)].to_numpy(dtype=np.int64),
                               pores["death"].to_numpy(), diagram.neighbourhood,
                               progress=progress)
        timings["pore_regions"] = time.perf_counter() - start

    porosity_summary, pore_details = None, None
    if with_porosity and prepared.values == "distance":
        start = time.perf_counter()
        porosity_summary, pore_details = _pore_details(prepared, diagram, options, progress)
        timings["porosity"] = time.perf_counter() - start

    report("building the layers", 0.0)
    placement = placement_of(scan.shape, scan.spacing, scan.unit, crop=options.crop,
                             downsample=options.downsample, translate=translate)
    layers = result_layers(diagram, placement, name, mark_deaths=mark_deaths, regions=regions,
                           pore_details=pore_details)
    report("building the layers", 1.0)
    return AnalysisResult(name=name, scan=scan, prepared=prepared, options=options,
                          diagram=diagram, placement=placement, layers=layers,
                          regions=regions, porosity=porosity_summary, notes=notes,
                          timings=timings)
