"""Figures of a patch-space result: barcode and diagram per coefficient field, the cloud
on its first two DCT coordinates, and a gallery of patches along the longest loop
(matplotlib, Agg backend)."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .plots import plot_barcode, plot_diagram  # noqa: E402

__all__ = ["GALLERY_SIZE", "gallery_indices", "plot_gallery", "plot_projection",
           "save_patch_plots"]

_CLOUD = "#9aa5b1"
_CORE = "#1f7a8c"
_LOOP = "#c8553d"
_INK = "#2b2d42"

#: Patches shown in the loop gallery at most.
GALLERY_SIZE = 16


def plot_projection(cloud, core, persistence, ax=None):
    """The cloud, its dense core and the landmarks on DCT coordinates 1 and 2 (horizontal
    and vertical gradient), with the cycle of the longest loop drawn through its landmarks.
    The primary circle of edge patches shows here as a ring of radius near 1."""
    if ax is None:
        _, ax = plt.subplots(figsize=(5.6, 5.6), constrained_layout=True)
    ax.scatter(cloud[:, 0], cloud[:, 1], s=2, color=_CLOUD, alpha=0.25, edgecolors="none",
               label=f"high-contrast patches ({len(cloud)})")
    ax.scatter(core[:, 0], core[:, 1], s=3, color=_CORE, alpha=0.5, edgecolors="none",
               label=f"dense core ({len(core)})")
    marks = persistence.landmark_points
    ax.scatter(marks[:, 0], marks[:, 1], s=12, color=_INK, marker="x", linewidths=0.7,
               label=f"landmarks ({len(marks)})")
    if len(persistence.loop):
        path = marks[persistence.loop]
        ax.plot(path[:, 0], path[:, 1], color=_LOOP, linewidth=1.6,
                label="cycle of the longest loop")
    angle = np.linspace(0, 2 * np.pi, 361)
    ax.plot(np.cos(angle), np.sin(angle), color="#d0d0d0", linewidth=0.8, zorder=0)
    ax.set_xlim(-1.08, 1.08)
    ax.set_ylim(-1.08, 1.08)
    ax.set_aspect("equal")
    ax.set_xlabel("DCT coordinate 1 (left-right gradient)")
    ax.set_ylabel("DCT coordinate 2 (top-bottom gradient)")
    ax.set_title("Patch cloud, first two DCT coordinates", color=_INK)
    ax.legend(frameon=False, fontsize=7, loc="lower left")
    return ax


def gallery_indices(loop: np.ndarray, size: int = GALLERY_SIZE) -> np.ndarray:
    """Up to ``size`` positions spread evenly along a closed cycle (first == last)."""
    open_cycle = loop[:-1] if len(loop) > 1 and loop[0] == loop[-1] else loop
    if len(open_cycle) <= size:
        return open_cycle
    steps = np.linspace(0, len(open_cycle), size, endpoint=False).astype(int)
    return open_cycle[steps]


def plot_gallery(patches: np.ndarray, labels, title: str):
    """A row (or rows) of gray patches with a label under each; returns the Figure."""
    n = max(len(patches), 1)
    columns = min(n, 8)
    rows = int(np.ceil(n / columns))
    fig, axes = plt.subplots(rows, columns, figsize=(1.3 * columns, 1.5 * rows + 0.5),
                             squeeze=False, constrained_layout=True)
    for ax in axes.ravel():
        ax.axis("off")
    for ax, patch, label in zip(axes.ravel(), patches, labels):
        ax.imshow(patch, cmap="gray", interpolation="nearest")
        ax.set_title(label, fontsize=7, color=_INK)
    if len(patches) == 0:
        axes[0, 0].text(0.5, 0.5, "no loop at these settings", ha="center", va="center")
    fig.suptitle(title, fontsize=9, color=_INK)
    return fig


def save_patch_plots(folder, cloud, dense, persistence) -> list[str]:
    """Draw the plots of a patch-space result into ``folder``.

    Parameters
    ----------
    folder : str or Path
        The result folder being filled.
    cloud : Patches
        Every high-contrast patch kept (:func:`voxtopo.patches.sample`).
    dense : Patches
        Its dense core (:func:`voxtopo.patches.core`).
    persistence : PatchPersistence
        What :func:`voxtopo.patches.persistence` returned for the core's landmarks.

    Returns
    -------
    list of str
        The files written, in this order: ``barcode.png`` and ``diagram.png`` (one panel
        per coefficient field), ``projection.png`` (:func:`plot_projection`) and
        ``loop_gallery.png`` (patches at landmarks spread along the longest loop's cycle).
    """
    folder = Path(folder)
    names = []
    for name, draw, width in (("barcode", plot_barcode, 6.4), ("diagram", plot_diagram, 5.2)):
        fig, axes = plt.subplots(1, len(persistence.fields), squeeze=False,
                                 figsize=(width * len(persistence.fields), 5.0),
                                 constrained_layout=True)
        for ax, f in zip(axes[0], persistence.fields):
            rows = persistence.pairs[persistence.pairs["field"] == f]
            title = f"{'Barcode' if name == 'barcode' else 'Persistence diagram'}, " \
                    f"{persistence.method} over Z/{f} (max edge {persistence.max_edge:.3g})"
            draw(rows, ax=ax, title=title)
            if name == "barcode":
                ax.set_xlabel("scale (distance in DCT coordinates)")
        fig.savefig(folder / f"{name}.png", dpi=110)
        plt.close(fig)
        names.append(f"{name}.png")
    fig, ax = plt.subplots(figsize=(5.6, 5.6), constrained_layout=True)
    plot_projection(cloud.coordinates, dense.coordinates, persistence, ax=ax)
    fig.savefig(folder / "projection.png", dpi=110)
    plt.close(fig)
    names.append("projection.png")
    along = gallery_indices(persistence.loop)
    picked = persistence.landmarks[along]
    coords = dense.coordinates[picked]
    labels = [f"{np.degrees(np.arctan2(c[1], c[0])) % 360:.0f} deg" for c in coords]
    fig = plot_gallery(dense.patches[picked], labels,
                       "Patches along the longest loop (landmarks on its cycle; angle in "
                       "DCT coordinates 1-2)")
    fig.savefig(folder / "loop_gallery.png", dpi=110)
    plt.close(fig)
    names.append("loop_gallery.png")
    return names
