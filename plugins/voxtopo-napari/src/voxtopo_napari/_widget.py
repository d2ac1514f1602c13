"""The analysis panel: pick a layer, choose the sweep, run in the background, get layers.

The panel only turns its controls into library calls (:func:`run_analysis` in a napari
thread worker) and puts the finished layers into the viewer in one go; a cancelled or
failed run adds nothing. Progress arrives through voxtopo's ``progress(phase, fraction)``
callback, carried to the panel by a Qt signal; Cancel makes the next callback raise
``voxtopo.Cancelled``. (The gudhi backend reports only at its start and end, so a cancel
during its computation takes effect when that step returns.)
"""

from __future__ import annotations

from napari.layers import Image, Labels, Layer
from qtpy.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout,
                            QLabel, QVBoxLayout, QWidget)

from voxtopo.errors import InputError, VoxtopoError
from voxtopo.jobs.analyse import AUTO, AnalysisOptions

from ._background import BackgroundRun
from ._diagram_panel import DiagramPanel
from ._job import run_analysis, scan_from_layer_data
from ._layers import METADATA_KEY
from ._saving import SavesResultFolder

__all__ = ["AnalysisWidget", "MODES", "layer_unit"]

#: Sweep choices: label shown -> (superlevel, distance transform)
MODES = {
    "gray values, dark to bright (sublevel)": (False, False),
    "gray values, bright to dark (superlevel)": (True, False),
    "distance transform of a mask (pores)": (False, True),
}
NEIGHBOURHOODS = {
    2: {"8: pixels touching at a corner join": 8, "4: only pixels sharing an edge join": 4},
    3: {"26: voxels touching at a corner join": 26, "6: only voxels sharing a face join": 6},
}
PORE_PHASES = {"dark voxels / label 0": False, "bright voxels / labelled voxels": True}
#: The min persistence box's lowest value, shown as "auto" (--min-persistence auto): keep
#: the significant pairs of a gray-value sweep, the robust ones of a distance sweep.
AUTO_BOX_VALUE = -1.0


def layer_unit(layer) -> str:
    """The physical unit of a layer: what voxtopo put in its metadata, else napari's
    own units ("px" when the layer is in pixels)."""
    meta = layer.metadata.get(METADATA_KEY) or {}
    if meta.get("unit"):
        return meta["unit"]
    unit = layer.units[-1] if getattr(layer, "units", None) else None
    text = f"{unit:~}" if unit is not None else "px"
    return "px" if text in ("pixel", "px", "") else text


class AnalysisWidget(BackgroundRun, SavesResultFolder, QWidget):
    """Dock panel running voxtopo on an image or labels layer."""

    WORK = "The analysis"

    def __init__(self, napari_viewer, parent=None):
        super().__init__(parent)
        self.viewer = napari_viewer
        self.result = None
        self.diagram_panel = None
        self._runs = 0
        self._init_background("Find features", "Compute the persistence of the chosen layer "
                              "in the background.", "Pick a layer and press Find features.")

        self.layer_choice = QComboBox()
        self.layer_choice.setToolTip("The image (gray values) or labels (mask) layer to "
                                     "analyse.")
        self.layer_choice.currentIndexChanged.connect(self._on_layer_changed)
        self.mode_choice = QComboBox()
        self.mode_choice.addItems(list(MODES))
        self.mode_choice.setToolTip(
            "Dark to bright follows dark features as the threshold rises; bright to dark "
            "the bright ones; the distance transform follows pores from their centres out "
            "to their throats.")
        self.mode_choice.currentIndexChanged.connect(self._on_mode_changed)
        self.pore_choice = QComboBox()
        self.pore_choice.addItems(list(PORE_PHASES))
        self.pore_choice.setToolTip("Which phase is pore space. Gray images are split at "
                                    "Otsu's threshold; labels layers by label 0 against "
                                    "the rest.")
        self.neighbourhood_choice = QComboBox()
        self.neighbourhood_choice.setToolTip("Which neighbours belong together. The corner "
                                             "rule is voxtopo's default.")
        self.sigma_box = QDoubleSpinBox()
        self.sigma_box.setDecimals(3)
        self.sigma_box.setRange(0.0, 1e6)
        self.sigma_box.setToolTip("Gaussian smoothing before the analysis, in the layer's "
                                  "physical unit (0 = none).")
        self.min_persistence_box = QDoubleSpinBox()
        self.min_persistence_box.setDecimals(4)
        self.min_persistence_box.setRange(AUTO_BOX_VALUE, 1e12)
        self.min_persistence_box.setSpecialValueText(AUTO)
        self.min_persistence_box.setValue(AUTO_BOX_VALUE)
        self.min_persistence_box.setToolTip(
            "The shortest lifetime kept (as --min-persistence of the voxtopo command). "
            "auto: the significant features (gray values: family-wise test against the "
            "scan's own noise) or the robust ones (distance transform: stable under a "
            "boundary moved by one voxel); a number: every pair living longer than it "
            "(0 = all pairs).")
        self.deaths_check = QCheckBox("also mark where features end")
        self.deaths_check.setToolTip("Adds a second layer per dimension at the voxels where "
                                     "the features die.")
        self.porosity_check = QCheckBox("also measure porosity and percolation")
        self.porosity_check.setChecked(True)
        self.porosity_check.setToolTip("With the distance transform: run voxtopo's pore "
                                       "analysis too (pore volumes, percolation); it takes "
                                       "about twice as long.")

        self._init_saving("`voxtopo pores` for a porosity run, `voxtopo analyse` otherwise")

        form = QFormLayout()
        form.addRow("layer", self.layer_choice)
        form.addRow("sweep", self.mode_choice)
        form.addRow("pore phase", self.pore_choice)
        form.addRow("neighbourhood", self.neighbourhood_choice)
        form.addRow("smoothing σ", self.sigma_box)
        form.addRow("min persistence", self.min_persistence_box)
        form.addRow(self.deaths_check)
        form.addRow(self.porosity_check)
        layout = QVBoxLayout(self)
        layout.addLayout(form)
        self._add_run_controls(layout)
        layout.addWidget(self.export_button)
        layout.addWidget(QLabel("Results support research; they are not a diagnosis nor a "
                                "certification of a part or structure."))
        layout.addStretch(1)

        self.viewer.layers.events.inserted.connect(self._refresh_layers)
        self.viewer.layers.events.removed.connect(self._refresh_layers)
        self._refresh_layers()
        self._on_mode_changed()

    # controls ---------------------------------------------------------------------------
    def _candidate_layers(self):
        return [layer for layer in self.viewer.layers
                if isinstance(layer, (Image, Labels))
                and not (layer.metadata.get(METADATA_KEY) or {}).get("which") == "regions"]

    def _refresh_layers(self, event=None):
        current = self.layer_choice.currentText()
        names = [layer.name for layer in self._candidate_layers()]
        self.layer_choice.blockSignals(True)
        self.layer_choice.clear()
        self.layer_choice.addItems(names)
        if current in names:
            self.layer_choice.setCurrentText(current)
        self.layer_choice.blockSignals(False)
        self._on_layer_changed()

    def selected_layer(self):
        name = self.layer_choice.currentText()
        return self.viewer.layers[name] if name in self.viewer.layers else None

    def _on_layer_changed(self, index=None):
        layer = self.selected_layer()
        ndim = 3 if layer is None or layer.data.ndim != 2 else 2
        current = self.neighbourhood_choice.currentText()
        self.neighbourhood_choice.clear()
        self.neighbourhood_choice.addItems(list(NEIGHBOURHOODS[ndim]))
        if current in NEIGHBOURHOODS[ndim]:
            self.neighbourhood_choice.setCurrentText(current)
        if layer is not None:
            self.sigma_box.setSuffix(f" {layer_unit(layer)}")
            if isinstance(layer, Labels):
                self.mode_choice.setCurrentText("distance transform of a mask (pores)")
                self.pore_choice.setCurrentText("bright voxels / labelled voxels")

    def _on_mode_changed(self, index=None):
        distance = MODES[self.mode_choice.currentText()][1]
        self.pore_choice.setEnabled(distance)
        self.porosity_check.setEnabled(distance)

    def set_neighbourhood(self, value: int) -> None:
        """Choose the neighbourhood by its number (4, 8, 6 or 26)."""
        offered = [self.neighbourhood_choice.itemText(i)
                   for i in range(self.neighbourhood_choice.count())]
        for text in offered:
            if text.startswith(f"{value}:"):
                self.neighbourhood_choice.setCurrentText(text)
                return
        raise InputError(f"Neighbourhood {value} is not offered for this layer; choose one of "
                         f"{[int(text.split(':')[0]) for text in offered]}.")

    def options(self) -> AnalysisOptions:
        """The controls as the library's AnalysisOptions."""
        layer = self.selected_layer()
        superlevel, distance = MODES[self.mode_choice.currentText()]
        ndim = 3 if layer is None or layer.data.ndim != 2 else 2
        pores_bright = PORE_PHASES[self.pore_choice.currentText()]
        is_labels = isinstance(layer, Labels)
        return AnalysisOptions(
            superlevel=superlevel,
            neighbourhood=NEIGHBOURHOODS[ndim].get(self.neighbourhood_choice.currentText()),
            sigma=self.sigma_box.value() or None,
            distance=distance,
            threshold="otsu" if distance and not is_labels else None,
            pores_bright=pores_bright and distance and not is_labels,
            min_persistence=self.min_persistence(),
        )

    def min_persistence(self) -> float | str:
        """The min persistence box as --min-persistence: "auto" or a number."""
        value = self.min_persistence_box.value()
        return AUTO if value <= AUTO_BOX_VALUE else max(value, 0.0)

    # running ----------------------------------------------------------------------------
    def run(self) -> None:
        """Start the analysis of the chosen layer in a worker thread."""
        if self.running:
            return
        layer = self.selected_layer()
        if layer is None:
            self._fail("There is no image or labels layer to analyse; open a scan first.")
            return
        try:
            scan = scan_from_layer_data(
                layer.data if not getattr(layer, "multiscale", False) else layer.data[0],
                name=layer.name, spacing=layer.scale, unit=layer_unit(layer),
                # a mask made from labels is not the file the labels came from
                source="" if isinstance(layer, Labels) else str(layer.source.path or ""),
                rgb=bool(getattr(layer, "rgb", False)),
                is_mask=isinstance(layer, Labels),
                pores_labelled=PORE_PHASES[self.pore_choice.currentText()])
            options = self.options()
        except VoxtopoError as error:
            self._fail(str(error))
            return
        self._runs += 1
        name = f"{layer.name} #{self._runs}"
        translate = tuple(float(t) for t in layer.translate)[-scan.ndim:]
        self._start(run_analysis, scan, options, name=name, translate=translate,
                    mark_deaths=self.deaths_check.isChecked(),
                    with_porosity=self.porosity_check.isChecked(),
                    working=f"Analysing {layer.name} …")

    def _on_done(self, result) -> None:
        if self._cancel.is_set():
            return
        # every layer is made before any is added, so a failure leaves the viewer as it was
        layers = [Layer.create(data, kwargs, layer_type)
                  for data, kwargs, layer_type in result.layers]
        for layer in layers:
            self.viewer.add_layer(layer)
        self.result = result
        self.export_button.setEnabled(True)
        # the job's own line: the same counts and words as `voxtopo analyse` / `pores`
        self.status.setText(result.describe())
        self._show_diagram(result.name)

    # diagram and export -----------------------------------------------------------------
    def _show_diagram(self, name: str) -> None:
        try:
            if self.diagram_panel is not None:
                self.diagram_panel.show_result(name)
                return
        except RuntimeError:  # the user closed the panel and Qt deleted it
            pass
        self.diagram_panel = DiagramPanel(self.viewer)
        window = getattr(self.viewer, "window", None)
        if window is not None:
            window.add_dock_widget(self.diagram_panel, name="voxtopo diagram", area="right")
        self.diagram_panel.show_result(name)

    def _write_result(self, folder, force: bool):
        return self.result.export(folder, force=force)
