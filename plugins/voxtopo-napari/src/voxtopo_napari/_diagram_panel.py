"""The diagram panel: the persistence diagram of one result, linked to its layers.

Clicking a point or drawing a loop around several selects those features in the viewer and
centres the view on them; selecting points in the viewer rings them in the diagram. The
lifetime slider hides every feature that lives less than the chosen persistence, in the
layers (``Points.shown``) and in the diagram at once.

A result whose pairs were tested (a ``significant`` or ``robust`` column) shows only the
pairs that passed, with the threshold drawn as a band along the diagonal (pairs inside
the band live too briefly to pass); the "show all pairs" switch shows the others too.

The panel reads everything from the layers' ``features`` tables and metadata, so it works
the same for a fresh run and for a result folder opened with the reader.
"""

from __future__ import annotations

import numpy as np
from matplotlib.backends.backend_qtagg import FigureCanvasQTAgg
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from matplotlib.path import Path as PolygonPath
from matplotlib.widgets import LassoSelector
from qtpy.QtCore import Qt
from qtpy.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QHBoxLayout, QLabel, QSlider,
                            QVBoxLayout, QWidget)

from voxtopo.report import literal
from voxtopo.significance import FLAG_COLUMNS

from ._layers import METADATA_KEY, feature_name
from ._lifetime_colours import lifetime_colormap, lifetime_colours, lifetime_fraction

__all__ = ["DiagramPanel", "results_in_viewer"]

#: Marker of each dimension in the diagram (the legend names them).
DIM_MARKERS = ("o", "^", "s")
SLIDER_STEPS = 1000
#: A click selects the nearest point within this many screen pixels.
CLICK_RADIUS_PX = 8.0
BAND_COLOUR = "#c9a227"


def passing(table) -> np.ndarray:
    """Which rows of a features table passed the test; all of them when the table has no
    flag column or a row was not tested (empty flag)."""
    for flag in FLAG_COLUMNS:
        if flag in table.columns:
            column = table[flag]
            return np.asarray(column.astype("boolean").fillna(True), dtype=bool)
    return np.ones(len(table), dtype=bool)


def results_in_viewer(viewer) -> list[str]:
    """Names of the voxtopo results whose layers are in the viewer, oldest first."""
    names = []
    for layer in viewer.layers:
        meta = layer.metadata.get(METADATA_KEY)
        if meta and meta.get("which") in ("birth", "death") and meta["result"] not in names:
            names.append(meta["result"])
    return names


class DiagramPanel(QWidget):
    """Persistence diagram of a result, with selection linked to the viewer."""

    def __init__(self, napari_viewer, parent=None):
        super().__init__(parent)
        self.viewer = napari_viewer
        self.result_name = None
        self.birth_layers = {}   # dim -> Points layer
        self.death_layers = {}   # dim -> Points layer
        self.min_persistence = 0.0
        self.show_all = False
        self.highlighted = set()  # feature ids ringed in the diagram
        self._longest = 1.0
        self._points = {}        # dim -> dict of arrays (feature, birth, death_y, persistence)
        self._scatter = {}
        self._rings = None
        self._syncing = False

        self.result_choice = QComboBox()
        self.result_choice.setToolTip("Which result the diagram shows.")
        self.result_choice.activated.connect(
            lambda _: self.show_result(self.result_choice.currentText()))

        self.figure = Figure(figsize=(4.2, 4.6), layout="constrained")
        grid = self.figure.add_gridspec(2, 1, height_ratios=(14, 1))
        self.axes = self.figure.add_subplot(grid[0])
        self.legend_axes = self.figure.add_subplot(grid[1])
        self.canvas = FigureCanvasQTAgg(self.figure)
        self.canvas.setMinimumSize(320, 340)
        self.canvas.setToolTip("Click a point, or draw a loop around several, to find those "
                               "features in the image.")
        self.lasso = LassoSelector(self.axes, onselect=self._on_lasso)

        self.slider = QSlider(Qt.Horizontal)
        self.slider.setRange(0, SLIDER_STEPS)
        self.slider.setToolTip("Hide features that live less than this (in the diagram and "
                               "in the viewer).")
        # redraw when the handle is let go: a diagram of many points takes a moment to draw
        self.slider.setTracking(False)
        self.slider.valueChanged.connect(self._on_slider)
        self.lifetime_box = QDoubleSpinBox()
        self.lifetime_box.setDecimals(4)
        self.lifetime_box.setRange(0.0, 1e12)
        self.lifetime_box.setToolTip("Shortest lifetime (persistence) still shown.")
        self.lifetime_box.valueChanged.connect(self.set_min_persistence)
        self.show_all_check = QCheckBox("show all pairs")
        self.show_all_check.setToolTip("Also show the pairs that are not significant (gray "
                                       "values) or not robust (distance transform).")
        self.show_all_check.toggled.connect(self.set_show_all)
        self.count_label = QLabel("")

        row = QHBoxLayout()
        row.addWidget(QLabel("min persistence shown"))
        row.addWidget(self.slider, 1)
        row.addWidget(self.lifetime_box)
        layout = QVBoxLayout(self)
        layout.addWidget(self.result_choice)
        layout.addWidget(self.canvas, 1)
        layout.addLayout(row)
        layout.addWidget(self.show_all_check)
        layout.addWidget(self.count_label)

        self.viewer.layers.events.inserted.connect(self._refresh_choices)
        self.viewer.layers.events.removed.connect(self._on_layer_removed)
        self._refresh_choices()
        names = results_in_viewer(self.viewer)
        if names:
            self.show_result(names[-1])
        else:
            self._draw()

    # which result ---------------------------------------------------------------------
    def _refresh_choices(self, event=None):
        names = results_in_viewer(self.viewer)
        self.result_choice.clear()
        self.result_choice.addItems(names)
        if self.result_name in names:
            self.result_choice.setCurrentText(self.result_name)

    def _on_layer_removed(self, event):
        layer = event.value
        for layers in (self.birth_layers, self.death_layers):
            for dim in [d for d, lay in layers.items() if lay is layer]:
                del layers[dim]
        self._refresh_choices()
        if self.result_name is not None and not self.birth_layers:
            self.result_name = None
            self._points = {}
            self.highlighted = set()
            self._draw()

    def show_result(self, name: str) -> None:
        """Show the diagram of the result called ``name`` (its layers must be in the viewer)."""
        for layers in (self.birth_layers, self.death_layers):
            for layer in layers.values():
                layer.selected_data.events.items_changed.disconnect(self._on_viewer_selection)
        self.birth_layers, self.death_layers = {}, {}
        for layer in self.viewer.layers:
            meta = layer.metadata.get(METADATA_KEY) or {}
            if meta.get("result") != name or meta.get("which") not in ("birth", "death"):
                continue
            target = self.birth_layers if meta["which"] == "birth" else self.death_layers
            target[meta["dim"]] = layer
            layer.selected_data.events.items_changed.connect(self._on_viewer_selection)
        self.result_name = name
        self._refresh_choices()
        self.highlighted = set()
        self._points = {}
        self._longest = 1.0
        for dim, layer in sorted(self.birth_layers.items()):
            table = layer.features
            meta = layer.metadata[METADATA_KEY]
            self._longest = meta.get("longest", 1.0)
            self._points[dim] = {
                "feature": table["feature"].to_numpy(dtype=np.int64),
                "birth": table["birth"].to_numpy(dtype=np.float64),
                "death": table["death"].to_numpy(dtype=np.float64),
                "persistence": table["persistence"].to_numpy(dtype=np.float64),
                "passes": passing(table),
            }
        self.slider.blockSignals(True)
        self.slider.setValue(0)
        self.slider.blockSignals(False)
        self.lifetime_box.blockSignals(True)
        self.lifetime_box.setValue(0.0)
        self.lifetime_box.blockSignals(False)
        self.min_persistence = 0.0
        # a run that listed every pair above a number starts with all of them shown
        self.set_show_all(bool(self._meta().get("show_all", False)))

    # drawing ----------------------------------------------------------------------------
    def _meta(self):
        for layer in self.birth_layers.values():
            return layer.metadata[METADATA_KEY]
        return {}

    def _value_range(self):
        values = np.concatenate([np.concatenate([p["birth"], p["death"]])
                                 for p in self._points.values()] or [np.zeros(1)])
        values = values[np.isfinite(values)]
        if len(values) == 0:
            return 0.0, 1.0
        lo, hi = float(values.min()), float(values.max())
        return (lo, hi) if hi > lo else (lo - 0.5, hi + 0.5)

    def _plotted_death(self, death, superlevel):
        """Where a death is drawn: classes that never die sit on a band past the others."""
        lo, hi = self._value_range()
        margin = 0.08 * (hi - lo)
        never = lo - margin if superlevel else hi + margin
        return np.where(np.isfinite(death), death, never), never

    def _draw(self):
        ax = self.axes
        ax.clear()
        self.legend_axes.clear()
        self._scatter = {}
        self._rings = None
        meta = self._meta()
        if not self._points:
            ax.text(0.5, 0.5, "Run an analysis or open a result folder\nto see its diagram.",
                    ha="center", va="center", transform=ax.transAxes, color="#5b6770")
            ax.set_xticks([])
            ax.set_yticks([])
            self.legend_axes.set_axis_off()
            self.count_label.setText("")
            self.canvas.draw_idle()
            return
        superlevel = bool(meta.get("superlevel", False))
        unit = literal(meta.get("unit", "px"))
        values = meta.get("values", "intensity")
        lo, hi = self._value_range()
        margin = 0.08 * (hi - lo)
        _, never = self._plotted_death(np.zeros(0), superlevel)
        ax.plot([lo - margin, hi + margin], [lo - margin, hi + margin], color="#8a969e",
                lw=0.8, zorder=1)
        self._draw_band(lo - margin, hi + margin, superlevel)
        ax.axhline(never, color="#8a969e", lw=0.8, ls="--", zorder=1)
        ax.text(lo - margin, never, " never dies", va="bottom", ha="left", fontsize=7,
                color="#5b6770")
        shown_total = 0
        for dim, points in sorted(self._points.items()):
            visible = self._shown(points["persistence"], points["passes"])
            shown_total += int(visible.sum())
            death_y, _ = self._plotted_death(points["death"], superlevel)
            colours = lifetime_colours(lifetime_fraction(points["persistence"][visible],
                                                         self._longest))
            self._scatter[dim] = ax.scatter(points["birth"][visible], death_y[visible],
                                            c=colours, marker=DIM_MARKERS[dim], s=22,
                                            edgecolors="#1d2327", linewidths=0.4, zorder=3,
                                            label=feature_name(values, dim))
            points["shown_index"] = np.flatnonzero(visible)
            points["xy"] = np.column_stack([points["birth"], death_y])
        what = "distance" if values == "distance" else "value"
        ax.set_xlabel(f"birth ({what}{', ' + unit if values == 'distance' else ''})")
        ax.set_ylabel(f"death ({what}{', ' + unit if values == 'distance' else ''})")
        ax.set_title(f"{literal(self.result_name)}: "
                     f"{'bright to dark' if superlevel else 'dark to bright'} sweep",
                     fontsize=9)
        legend = ax.legend(loc="lower right" if not superlevel else "upper right",
                           fontsize=7, framealpha=0.8)
        for handle in legend.legend_handles:
            if not isinstance(handle, Rectangle):  # the band keeps its own colour
                handle.set_facecolor("#8a969e")
        ax.set_xlim(lo - margin, hi + margin)
        ax.set_ylim(lo - 2 * margin, hi + 2 * margin)
        self._draw_legend(unit if values == "distance" else "")
        self._draw_rings()
        total = sum(len(p["feature"]) for p in self._points.values())
        self.count_label.setText(f"{shown_total} of {total} pairs shown: {self._shown_what()}")
        self.canvas.draw_idle()

    def _flag(self) -> str | None:
        """"significant" or "robust" when the result's pairs were tested."""
        meta = self._meta()
        if "flag" in meta:      # None: the run listed its pairs untested
            return meta["flag"]
        for layer in self.birth_layers.values():
            return next((f for f in FLAG_COLUMNS if f in layer.features.columns), None)
        return None

    def _shown_what(self) -> str:
        """What the shown pairs are, in the words of the job's result line: the flagged
        features with their method and level, or every pair listed."""
        meta = self._meta()
        flag = None if self.show_all else self._flag()
        which = ((meta.get("features") or f"{flag} features") if flag
                 else meta.get("listed") or "all pairs")
        return which + (f" with persistence at least {self.min_persistence:g}"
                        if self.min_persistence > 0 else "")

    def _draw_band(self, low, high, superlevel):
        """The threshold of each dimension as a band along the diagonal: a pair inside it
        lives too briefly to pass."""
        thresholds = {int(d): float(t) for d, t in (self._meta().get("thresholds") or {}).items()
                      if np.isfinite(t)}
        flag = self._flag() or "significant"
        x = np.array([low, high])
        for value in sorted(set(thresholds.values())):
            dims = ", ".join(str(d) for d, t in sorted(thresholds.items()) if t == value)
            edge = x - value if superlevel else x + value
            self.axes.fill_between(x, x, edge, color=BAND_COLOUR, alpha=0.18, lw=0,
                                   zorder=2, label=f"not {flag} (dim {dims})")

    def _shown(self, persistence, passes) -> np.ndarray:
        """Pairs drawn: long enough for the slider, and passing unless all are asked for."""
        return (persistence >= self.min_persistence) & (passes | self.show_all)

    def set_show_all(self, show_all: bool) -> None:
        """Show every pair (True) or only the significant / robust ones (False)."""
        self.show_all = bool(show_all)
        if self.show_all_check.isChecked() != self.show_all:
            self.show_all_check.blockSignals(True)
            self.show_all_check.setChecked(self.show_all)
            self.show_all_check.blockSignals(False)
        self.set_min_persistence(self.min_persistence)

    def _draw_legend(self, unit):
        ramp = np.linspace(0, 1, 256)[None, :]
        self.legend_axes.imshow(ramp, aspect="auto", cmap=lifetime_colormap(),
                                extent=(0, self._longest, 0, 1))
        self.legend_axes.set_yticks([])
        self.legend_axes.set_xlabel(f"lifetime (persistence{', ' + unit if unit else ''}); "
                                    f"the top colour also marks features that never die",
                                    fontsize=7)
        self.legend_axes.tick_params(labelsize=7)

    def _draw_rings(self):
        if self._rings is not None:
            self._rings.remove()
            self._rings = None
        xy = [p["xy"][self._shown(p["persistence"], p["passes"])
                      & np.isin(p["feature"], list(self.highlighted))]
              for p in self._points.values() if "xy" in p]
        xy = np.concatenate(xy) if xy else np.zeros((0, 2))
        if len(xy):
            self._rings = self.axes.scatter(xy[:, 0], xy[:, 1], s=110, facecolors="none",
                                            edgecolors="#d1234a", linewidths=1.6, zorder=4)
        self.canvas.draw_idle()

    # lifetime threshold -----------------------------------------------------------------
    def _on_slider(self, step: int):
        self.lifetime_box.setValue(self._longest * (step / SLIDER_STEPS) ** 2)

    def set_min_persistence(self, value: float) -> None:
        """Hide every feature whose persistence is below ``value``, here and in the viewer."""
        self.min_persistence = float(value)
        if abs(self.lifetime_box.value() - self.min_persistence) > 1e-12:
            self.lifetime_box.blockSignals(True)
            self.lifetime_box.setValue(self.min_persistence)
            self.lifetime_box.blockSignals(False)
        step = int(round(SLIDER_STEPS * np.sqrt(min(self.min_persistence / self._longest, 1.0))))
        self.slider.blockSignals(True)
        self.slider.setValue(step)
        self.slider.blockSignals(False)
        for layer in list(self.birth_layers.values()) + list(self.death_layers.values()):
            persistence = layer.features["persistence"].to_numpy(dtype=np.float64)
            shown = self._shown(persistence, passing(layer.features))
            layer.shown = shown
            hidden_selected = {i for i in layer.selected_data if not shown[i]}
            if hidden_selected:
                layer.selected_data = set(layer.selected_data) - hidden_selected
        self._draw()

    def visible_features(self) -> set[int]:
        """Feature ids drawn in the diagram right now."""
        return {int(p["feature"][i]) for p in self._points.values()
                for i in p.get("shown_index", [])}

    # selection: diagram -> viewer -------------------------------------------------------
    def _on_lasso(self, vertices):
        vertices = np.asarray(vertices, dtype=np.float64)
        if len(vertices) == 0:
            return
        to_screen = self.axes.transData.transform
        screen = to_screen(vertices)
        extent = np.ptp(screen, axis=0).max() if len(screen) > 1 else 0.0
        if extent < 3.0:
            self.select_at(vertices[0])
            return
        path = PolygonPath(vertices)
        chosen = set()
        for p in self._points.values():
            idx = p["shown_index"]
            inside = path.contains_points(p["xy"][idx])
            chosen.update(int(f) for f in p["feature"][idx][inside])
        self.select_features(chosen)

    def select_at(self, xy) -> None:
        """Select the feature drawn nearest to ``xy`` (data coordinates) if it is close."""
        best, best_dist = None, CLICK_RADIUS_PX
        target = self.axes.transData.transform(np.asarray(xy, dtype=np.float64)[None, :])[0]
        for p in self._points.values():
            idx = p["shown_index"]
            if len(idx) == 0:
                continue
            screen = self.axes.transData.transform(p["xy"][idx])
            dist = np.hypot(*(screen - target).T)
            k = int(np.argmin(dist))
            if dist[k] <= best_dist:
                best, best_dist = int(p["feature"][idx][k]), dist[k]
        self.select_features(set() if best is None else {best})

    def select_features(self, features) -> None:
        """Select these features (diagram row ids) in every layer of the result and
        centre the view on them."""
        features = {int(f) for f in features}
        self._syncing = True
        try:
            for layer in list(self.birth_layers.values()) + list(self.death_layers.values()):
                ids = layer.features["feature"].to_numpy(dtype=np.int64)
                chosen = np.flatnonzero(np.isin(ids, list(features)) & layer.shown)
                layer.selected_data = {int(i) for i in chosen}
        finally:
            self._syncing = False
        self.highlighted = features
        self._draw_rings()
        self._centre_on(features)

    def _centre_on(self, features):
        world = []
        for layer in self.birth_layers.values():
            ids = layer.features["feature"].to_numpy(dtype=np.int64)
            for i in np.flatnonzero(np.isin(ids, list(features))):
                world.append(np.asarray(layer.data_to_world(layer.data[i]), dtype=np.float64))
        if not world:
            return
        centre = np.mean(world, axis=0)
        ndim = len(centre)
        offset = self.viewer.dims.ndim - ndim
        displayed = [d - offset for d in self.viewer.dims.displayed if d - offset >= 0]
        for axis in range(ndim):
            if axis not in displayed:
                self.viewer.dims.set_point(axis + offset, centre[axis])
        self.viewer.camera.center = tuple(centre[d] for d in displayed)

    # selection: viewer -> diagram -------------------------------------------------------
    def _on_viewer_selection(self, event=None):
        if self._syncing:
            return
        chosen = set()
        for layer in list(self.birth_layers.values()) + list(self.death_layers.values()):
            ids = layer.features["feature"].to_numpy(dtype=np.int64)
            chosen.update(int(ids[i]) for i in layer.selected_data)
        self.highlighted = chosen
        self._draw_rings()
