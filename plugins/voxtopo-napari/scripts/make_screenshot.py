"""Screenshot of the plugin on the bead sample, for the README.

Run under a display (on a server: ``QT_QPA_PLATFORM=xcb xvfb-run -a``)::

    .venv/bin/python plugins/voxtopo-napari/scripts/make_screenshot.py docs/images/napari-plugin.png

It opens the bead filter disc, finds its pores with the distance transform, hides the
features that live less than two voxels, selects the longest-lived pore that does not touch
the border and saves the window.
"""

import sys
import time
from pathlib import Path

import napari
import numpy as np
from napari.settings import get_settings
from qtpy.QtWidgets import QApplication

from voxtopo_napari._sample_data import beads
from voxtopo_napari._widget import AnalysisWidget


def main(out: str) -> None:
    out = Path(out)
    if not out.parent.is_dir():
        sys.exit(f"The folder {out.parent} does not exist; name a PNG file in an existing "
                 f"folder.")
    # keep passing notices (e.g. about the Qt backend) off the picture
    get_settings().application.gui_notification_level = "error"
    viewer = napari.Viewer(show=True)
    viewer.window.resize(1760, 960)
    for data, kwargs, _ in beads():
        viewer.add_image(data, **kwargs)
    widget = AnalysisWidget(viewer)
    viewer.window.add_dock_widget(widget, name="Find features (persistence)", area="right")
    widget.mode_choice.setCurrentText("distance transform of a mask (pores)")
    widget.pore_choice.setCurrentText("dark voxels / label 0")
    widget.min_persistence_box.setValue(1.0)
    app = QApplication.instance()
    widget.run()
    while widget.running:
        app.processEvents()
        time.sleep(0.02)
    if widget.result is None:
        sys.exit(f"The analysis did not finish: {widget.status.text()}")
    panel = widget.diagram_panel
    panel.set_min_persistence(2 * widget.result.diagram.spacing[0])
    pores = panel.birth_layers[0]
    table = pores.features
    inside = (np.isfinite(table["death"].to_numpy())
              & ~table["border"].fillna(True).to_numpy(dtype=bool))
    longest = int(np.argmax(np.where(inside, table["persistence"], -1)))
    viewer.reset_view()
    panel.select_features({int(table["feature"][longest])})
    viewer.camera.zoom *= 1.6
    viewer.layers.selection.active = pores
    for _ in range(20):
        app.processEvents()
        time.sleep(0.05)
    viewer.screenshot(path=str(out), canvas_only=False, flash=False)
    print(f"Saved {out} ({widget.status.text()})")
    viewer.close()


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "docs/images/napari-plugin.png")
