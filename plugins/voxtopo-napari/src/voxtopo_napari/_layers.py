"""From a Diagram to ordinary napari layers: where features sit, how long they live.

Every result becomes one Points layer per dimension at the birth voxels (and, on request,
one at the death voxels), each with a ``features`` table, plus a Labels layer of pore
regions for a distance transform. The functions here return napari layer-data tuples
``(data, kwargs, layer_type)`` and never touch a viewer, so the widget, the reader and
the tests share them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from voxtopo.diagram import AXES_3D
from voxtopo.filtration import parse_box

from ._lifetime_colours import (RAMP_STOPS, lifetime_colours, lifetime_fraction, lifetime_sizes,
                                longest_finite)

__all__ = ["FEATURE_NAMES", "feature_name", "Placement", "placement_of", "features_table",
           "result_layers", "METADATA_KEY"]

#: What a class of each dimension is, in the words of the two kinds of filtration.
FEATURE_NAMES = {
    "intensity": ("components", "loops", "cavities"),
    "distance": ("pores", "pore loops", "enclosed solid"),
}

#: Key of the layer metadata that ties a layer to its result.
METADATA_KEY = "voxtopo"


def feature_name(values: str, dim: int) -> str:
    """'components', 'loops', 'cavities' for gray values; 'pores', ... for a distance."""
    return FEATURE_NAMES["distance" if values == "distance" else "intensity"][dim]


@dataclass(frozen=True)
class Placement:
    """Where the analysed grid sits in the world: voxel size and the position of voxel 0."""

    scale: tuple[float, ...]
    translate: tuple[float, ...]
    unit: str = "px"


def placement_of(shape, spacing, unit="px", crop=None, downsample=1,
                 translate=None) -> Placement:
    """Placement of a grid analysed after an optional crop and block-mean downsampling.

    ``shape``, ``spacing`` and ``translate`` describe the scan as it was loaded (or as
    its layer shows it). A crop moves voxel 0 to the box's corner; a block of ``f``
    voxels has its centre (f - 1) / 2 voxels in from its corner.
    """
    ndim = len(shape)
    spacing = np.asarray(spacing, dtype=np.float64)
    origin = np.zeros(ndim)
    if crop:
        box = parse_box(crop, ndim) if isinstance(crop, str) else crop
        origin = np.array([b.indices(n)[0] for b, n in zip(box, shape)], dtype=np.float64)
    factors = np.ones(ndim) * (downsample if np.isscalar(downsample) else np.asarray(downsample))
    base = np.zeros(ndim) if translate is None else np.asarray(translate, dtype=np.float64)
    corner = base + origin * spacing + (factors - 1) / 2 * spacing
    return Placement(tuple(float(s) for s in spacing * factors),
                     tuple(float(t) for t in corner), unit)


def features_table(diagram, dim: int, placement: Placement) -> pd.DataFrame:
    """The features of one dimension: the diagram's rows, physical positions and sizes.

    Columns: ``feature`` (row of the diagram), ``dim, birth, death, persistence``, the
    positions ``birth_z .. death_x`` in ``placement.unit`` (world coordinates of the scan
    as shown, so a crop's corner is added), the voxel indices ``birth_voxel_z ..
    death_voxel_x`` of the analysed grid, ``span`` (the
    physical distance from the birth voxel to the death voxel, a rough size of the
    feature), and for pores of a distance transform ``body_radius`` (minus the birth: the
    radius of the largest ball inside the pore, as in pores.csv) and ``throat_radius`` (minus the death:
    the radius of the narrowest passage to an older pore; empty when the pore only meets
    others through the solid or never does).
    """
    axes = AXES_3D[3 - diagram.ndim:]
    rows = diagram.pairs[diagram.pairs["dim"] == dim]
    table = pd.DataFrame({"feature": rows.index.to_numpy(dtype=np.int64)})
    for column in rows.columns:
        table[column] = rows[column].to_numpy() if rows[column].dtype != "Int64" \
            else rows[column].array
    scale = np.asarray(placement.scale)
    corner = np.asarray(placement.translate)
    births = rows[[f"birth_voxel_{a}" for a in axes]].to_numpy(dtype=np.float64,
                                                               na_value=np.nan)
    deaths = rows[[f"death_voxel_{a}" for a in axes]].to_numpy(dtype=np.float64,
                                                               na_value=np.nan)
    for k, a in enumerate(axes):
        table[f"birth_{a}"] = births[:, k] * scale[k] + corner[k]
        table[f"death_{a}"] = deaths[:, k] * scale[k] + corner[k]
    table["span"] = np.sqrt((((deaths - births) * scale) ** 2).sum(axis=1))
    if diagram.values == "distance" and dim == 0:
        table["body_radius"] = -rows["birth"].to_numpy()
        death = rows["death"].to_numpy()
        table["throat_radius"] = np.where(np.isfinite(death) & (death < 0), -death, np.nan)
    return table


def _points(diagram, dim, which, placement, longest, result_name, pore_details=None,
            rows=None, flag=None, thresholds=None, show_all=False):
    axes = AXES_3D[3 - diagram.ndim:]
    table = features_table(diagram, dim, placement)
    if rows is not None:
        table = table[table["feature"].isin(rows)].reset_index(drop=True)
    if pore_details is not None and dim == 0:
        extra = pore_details.drop(columns=[c for c in pore_details.columns
                                           if c in table.columns and c != "feature"])
        table = table.merge(extra, on="feature", how="left")
    coords = table[[f"{which}_voxel_{a}" for a in axes]].to_numpy(dtype=np.float64,
                                                                  na_value=np.nan)
    if which == "death":
        has_death = ~np.isnan(coords).any(axis=1)
        coords, table = coords[has_death], table[has_death].reset_index(drop=True)
    fraction = lifetime_fraction(table["persistence"], longest)
    name = feature_name(diagram.values, dim)
    # napari cannot take per-point colours or sizes for a layer without points
    colours = lifetime_colours(fraction) if len(table) else RAMP_STOPS[-1][1]
    sizes = lifetime_sizes(fraction, diagram.shape) if len(table) else 1.0
    kwargs = {
        "name": f"{name} · {result_name}" if which == "birth"
                else f"{name} (where they end) · {result_name}",
        "ndim": diagram.ndim,
        "scale": placement.scale,
        "translate": placement.translate,
        "features": table,
        "face_color": colours,
        "size": sizes,
        "symbol": "disc" if which == "birth" else "diamond",
        "border_width": 0.1,
        "border_color": "#1d2327",
        "projection_mode": "rescale_spherical",
        "metadata": {METADATA_KEY: {"result": result_name, "dim": dim, "which": which,
                                    "unit": placement.unit, "values": diagram.values,
                                    "superlevel": diagram.superlevel,
                                    "longest": longest, "flag": flag,
                                    "thresholds": dict(thresholds or {}),
                                    "show_all": show_all}},
    }
    return coords.reshape(-1, diagram.ndim), kwargs, "points"


def result_layers(diagram, placement: Placement, result_name: str, *,
                  mark_deaths: bool = False, regions=None, pore_details=None,
                  shown_rows=None, flag: str | None = None,
                  thresholds: dict | None = None, show_all: bool = False) -> list[tuple]:
    """Layer-data tuples for one result: births per dimension, deaths on request, and
    the pore regions when given (an int array on the analysed grid: k + 1 = pore k of the
    diagram, or the pore's id for a pore analysis).

    ``pore_details`` (a table with a ``feature`` column, e.g. voxtopo.porosity's pore
    table keyed by diagram row) is joined to the features of dimension 0.
    ``shown_rows`` (dim -> diagram rows) keeps only those features of a dimension, e.g.
    the pores of the pore table.
    ``flag`` names the column ("significant" or "robust") that says which pairs are
    features, and ``thresholds`` (dim -> persistence) the level it was decided at; the
    diagram panel shows the flagged pairs and draws the thresholds as a band; with
    ``show_all`` (the user listed every pair above a number) it starts showing all.
    """
    longest = longest_finite(diagram.pairs["persistence"])
    which = ["birth", "death"] if mark_deaths else ["birth"]
    shown_rows = shown_rows or {}
    layers = [_points(diagram, dim, end, placement, longest, result_name, pore_details,
                      shown_rows.get(dim), flag, thresholds, show_all)
              for end in which for dim in range(diagram.ndim)]
    if regions is not None:
        layers.append((regions, {
            "name": f"pore regions · {result_name}",
            "scale": placement.scale,
            "translate": placement.translate,
            "opacity": 0.45,
            "metadata": {METADATA_KEY: {"result": result_name, "which": "regions",
                                        "unit": placement.unit}},
        }, "labels"))
    return layers
