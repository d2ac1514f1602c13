"""Plots of a pore analysis: sizes of bodies and throats, the signed-distance diagram,
and slices with the largest pores and the critical throats."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..diagram import AXES_3D
from ..porosity import size_column
from ._text import literal

__all__ = ["save_pore_plots"]

_PORE_COLOUR = "#2b6f8f"
_GRAIN_COLOUR = "#b5652a"
_LOOP_COLOUR = "#5e8c3a"
_VOID_COLOUR = "#7a4f9a"
_PORE_ZONE = "#cfe3d4"
_SOLID_ZONE = "#eadbc0"
_WALL_ZONE = "#dcd6ea"


def save_pore_plots(folder, analysis, background) -> list[str]:
    """Draw the plots of a pore analysis into ``folder``.

    Parameters
    ----------
    folder : str or Path
        The result folder being filled.
    analysis : PoreAnalysis
        What :func:`voxtopo.porosity.analyse` returned.
    background : ndarray
        The image drawn under the marks of the slice plot (the gray scan, or the mask),
        of the analysis' shape.

    Returns
    -------
    list of str
        The files written, in this order: ``pore_sizes.png`` (body and throat radii by
        count and by size, with their cumulative curves), ``distance_diagram.png`` (the
        persistence diagram of the signed distance, its three zones named) and
        ``pore_slices.png`` (the largest pores and the critical throat on slices).
    """
    folder = Path(folder)
    ndim = analysis.mask.ndim
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    unit = literal(analysis.summary["unit"])
    names = []
    for name, draw in (("pore_sizes.png", _size_plot), ("distance_diagram.png", _diagram_plot),
                       ("pore_slices.png", _slice_plot)):
        fig = draw(plt, analysis, unit, background, ndim)
        fig.savefig(folder / name, dpi=110)
        plt.close(fig)
        names.append(name)
    return names


def _cumulative(values, weights):
    order = np.argsort(values)[::-1]
    values, weights = values[order], weights[order]
    total = weights.sum()
    return values, np.cumsum(weights) / (total if total > 0 else 1.0)


def _size_plot(plt, analysis, unit, background, ndim):
    pores = analysis.pores[~analysis.pores["border"]]
    which = "pores clear of the border"
    if len(pores) == 0:
        pores, which = analysis.pores, "all pores (every pore touches the border)"
    body = pores["body_radius"].to_numpy(dtype=float)
    throat = pores["throat_radius"].to_numpy(dtype=float)
    volume = pores[size_column(ndim)].to_numpy(dtype=float)
    has_throat = np.isfinite(throat)
    fig, ax = plt.subplots(2, 2, figsize=(10, 7.5))
    finite = np.concatenate([body, throat[has_throat]])
    bins = np.linspace(0, finite.max() * 1.05 if len(finite) else 1.0, 31)
    ax[0, 0].hist(body, bins=bins, color=_PORE_COLOUR, alpha=0.8, label="pore bodies")
    ax[0, 0].hist(throat[has_throat], bins=bins, color=_GRAIN_COLOUR, alpha=0.6,
                  label="throats")
    ax[0, 0].set(xlabel=f"radius ({unit})", ylabel="count", title="Sizes by count")
    ax[0, 1].hist(body, bins=bins, weights=volume, color=_PORE_COLOUR, alpha=0.8,
                  label="pore bodies")
    ax[0, 1].hist(throat[has_throat], bins=bins, weights=volume[has_throat],
                  color=_GRAIN_COLOUR, alpha=0.6, label="throats")
    size_word = "volume" if ndim == 3 else "area"
    ax[0, 1].set(xlabel=f"radius ({unit})", ylabel=f"pore {size_word} ({unit}^{ndim})",
                 title=f"Sizes weighted by the pore's body {size_word}")
    for axis, weights, title in ((ax[1, 0], None, "Cumulative, by count"),
                                 (ax[1, 1], volume, f"Cumulative, by body {size_word}")):
        for values, w, colour, label in ((body, weights, _PORE_COLOUR, "pore bodies"),
                                         (throat[has_throat],
                                          None if weights is None else weights[has_throat],
                                          _GRAIN_COLOUR, "throats")):
            if len(values) == 0:
                continue
            x, y = _cumulative(values, np.ones_like(values) if w is None else w)
            axis.step(x, y, where="post", color=colour, label=label)
        axis.set(xlabel=f"radius ({unit})", ylabel="fraction at this radius or larger",
                 title=title, ylim=(0, 1.02))
    for axis in ax.ravel():
        axis.legend(frameon=False, fontsize=8)
    fig.suptitle(f"Pore bodies and throats: {len(pores)} {which}; isolated pores have "
                 f"no throat")
    fig.tight_layout()
    return fig


def _diagram_plot(plt, analysis, unit, background, ndim):
    pairs = analysis.diagram.pairs
    finite = pairs[np.isfinite(pairs["death"])]
    fig, ax = plt.subplots(figsize=(7, 6.5))
    values = finite[["birth", "death"]].to_numpy(dtype=float)
    lo = float(min(values.min(), 0.0)) if len(values) else -1.0
    hi = float(max(values.max(), 0.0)) if len(values) else 1.0
    pad = 0.05 * (hi - lo or 1.0)
    lo, hi = lo - pad, hi + pad
    markers = {0: ("o", _PORE_COLOUR), 1: ("^", _LOOP_COLOUR), 2: ("s", _VOID_COLOUR)}
    for dim in range(ndim):
        rows = finite[finite["dim"] == dim]
        marker, colour = markers[dim]
        ax.scatter(rows["birth"], rows["death"], s=12, marker=marker, color=colour,
                   alpha=0.7, label=f"dimension {dim}: {len(rows)} pairs (all pairs), "
                                    f"{int(rows['robust'].sum())} robust")
    essential = pairs[~np.isfinite(pairs["death"])]
    if len(essential):
        ax.scatter(essential["birth"], np.full(len(essential), hi - pad / 2), marker="*",
                   s=60, color="black", label=f"never dies: {len(essential)}")
    ax.plot([lo, hi], [lo, hi], color="0.4", lw=0.8)
    robust = analysis.summary["robustness"]
    ax.fill_between([lo, hi], [lo, hi], [lo + robust["threshold"], hi + robust["threshold"]],
                    color="0.55", alpha=0.25, lw=0, zorder=1,
                    label=f"not robust: persistence at most {robust['threshold']:.3g} {unit} "
                          f"(boundary tolerance {robust['boundary_tolerance']:.3g} {unit})")
    # three zones of the signed-distance diagram, each a plain rectangle or triangle named
    # in the legend: a feature that lives in one phase only, or one that spans the wall
    zones = (
        (([lo, 0, lo], [lo, 0, 0]), _PORE_ZONE, "pore-phase features (birth and death < 0)"),
        (([0, hi, 0], [0, hi, hi]), _SOLID_ZONE, "solid-phase features (birth and death > 0)"),
        (([lo, 0, 0, lo], [0, 0, hi, hi]), _WALL_ZONE,
         "features across the wall (birth < 0 < death)"),
    )
    for (xs, ys), colour, label in zones:
        ax.fill(xs, ys, facecolor=colour, edgecolor="none", alpha=0.6, zorder=0, label=label)
    ax.set(xlim=(lo, hi), ylim=(lo, hi), xlabel=f"birth: signed distance ({unit})",
           ylabel=f"death: signed distance ({unit})",
           title="Persistence diagram of the signed distance (pores negative)")
    ax.legend(frameon=True, framealpha=0.9, fontsize=7.5, loc="lower right")
    fig.tight_layout()
    return fig


def _slice_plot(plt, analysis, unit, background, ndim):
    pores = analysis.pores
    spacing = np.asarray(analysis.summary["spacing"], dtype=float)
    throats = {a: c for a, c in analysis.critical_throats.items() if c is not None}
    panels = []
    clear = pores[~pores["border"]]
    if ndim == 3:
        if len(clear):
            panels.append(("largest pore clear of the border",
                           int(round(clear["body_z"].iloc[0] / spacing[0]))))
        elif len(pores):
            panels.append(("largest pore", int(round(pores["body_z"].iloc[0] / spacing[0]))))
        for a, c in throats.items():
            panels.append((f"critical throat along {a}", int(round(c[0] / spacing[0]))))
            break
        if not panels:
            panels.append(("middle slice", background.shape[0] // 2))
    else:
        panels.append(("image", None))
    fig, axes = plt.subplots(1, len(panels), figsize=(6 * len(panels), 5.6), squeeze=False)
    axes_names = AXES_3D[3 - ndim:]
    for ax, (title, z) in zip(axes[0], panels):
        image = background if z is None else background[z]
        ny, nx = image.shape
        extent = (-0.5 * spacing[-1], (nx - 0.5) * spacing[-1],
                  (ny - 0.5) * spacing[-2], -0.5 * spacing[-2])
        ax.imshow(image, cmap="gray", extent=extent, interpolation="nearest")
        near = pores
        if z is not None:
            near = pores[np.abs(pores["body_z"] - z * spacing[0]) <= pores["body_radius"]]
        for _, row in near.head(10).iterrows():
            if z is not None:
                dz = row["body_z"] - z * spacing[0]
                radius = float(np.sqrt(max(row["body_radius"] ** 2 - dz ** 2, 0.0)))
            else:
                radius = float(row["body_radius"])
            ax.add_patch(plt.Circle((row["body_x"], row["body_y"]), radius, fill=False,
                                    color="#e0a800" if row["border"] else "#00a0d0", lw=1.4))
            ax.text(row["body_x"], row["body_y"], str(int(row["id"])), color="#00a0d0",
                    fontsize=7, ha="center", va="center")
        for a, c in throats.items():
            if z is None or int(round(c[0] / spacing[0])) == z:
                ax.plot(c[-1], c[-2], marker="x", color="#d03030", ms=11, mew=2.2,
                        label=f"critical throat ({a}): radius "
                              f"{analysis.summary['percolation_radius'][a]:.3g} {unit}")
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        label = title if z is None else f"{title}: {axes_names[0]} = {z * spacing[0]:.4g} {unit}"
        ax.set(title=label, xlabel=f"x ({unit})", ylabel=f"y ({unit})")
        if ax.get_legend_handles_labels()[0]:
            ax.legend(frameon=True, fontsize=8, loc="upper right")
    fig.suptitle("Ten largest pores near the slice (blue; amber: cut by the border)")
    fig.tight_layout()
    return fig
