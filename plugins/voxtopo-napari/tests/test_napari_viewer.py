"""The plugin in a real (headless) viewer: run, layers, slider, selection, cancel, reader.

Every test here needs a display (Xvfb in CI); see conftest.py. Volumes are small so the
whole file runs in well under a minute.
"""

import json

import numpy as np
import pandas as pd
import pytest

import voxtopo
from voxtopo import cli
from voxtopo.diagram import AXES_3D
from voxtopo.jobs import pores as pores_job
from voxtopo_napari._layers import METADATA_KEY
from voxtopo.porosity._regions import pore_regions_by_levels
from voxtopo_napari._reader import napari_get_reader
from voxtopo_napari._widget import AnalysisWidget

pytestmark = pytest.mark.viewer

WAIT_MS = 60_000


def _widget(make_napari_viewer, data, name="scan", scale=None, labels=False):
    viewer = make_napari_viewer()
    add = viewer.add_labels if labels else viewer.add_image
    add(data, name=name, **({"scale": scale} if scale else {}))
    widget = AnalysisWidget(viewer)
    viewer.window.add_dock_widget(widget, name="voxtopo analysis")
    widget.layer_choice.setCurrentText(name)
    return viewer, widget


def _run(qtbot, widget):
    widget.run()
    qtbot.waitUntil(lambda: not widget.running, timeout=WAIT_MS)


def _result_layers(viewer, which="birth"):
    return {layer.metadata[METADATA_KEY]["dim"]: layer for layer in viewer.layers
            if (layer.metadata.get(METADATA_KEY) or {}).get("which") == which}


def _sorted_rows(array):
    array = np.asarray(array, dtype=np.float64)
    return array[np.lexsort(array.T[::-1])] if len(array) else array


def test_points_layers_equal_gudhi_persistence(make_napari_viewer, qtbot):
    """Birth voxels, births, deaths and persistence of every Points layer equal the diagram
    of gudhi (Maria et al. 2014, CubicalComplex, top-dimensional cells = 26-neighbourhood)
    on the same data, through voxtopo.persistence(engine="gudhi"). Random floats: no ties,
    so any exact engine must give the same pairs and locations."""
    data = np.random.default_rng(7).random((9, 10, 11))
    viewer, widget = _widget(make_napari_viewer, data, scale=(2.0, 1.0, 0.5))
    _run(qtbot, widget)
    expected = voxtopo.persistence(data, neighbourhood=26, engine="gudhi")
    layers = _result_layers(viewer)
    assert sorted(layers) == [0, 1, 2]
    for dim, layer in layers.items():
        rows = expected.pairs[expected.pairs["dim"] == dim]
        births = rows[[f"birth_voxel_{a}" for a in AXES_3D]].to_numpy(dtype=np.float64)
        np.testing.assert_array_equal(_sorted_rows(layer.data), _sorted_rows(births))
        table = layer.features.sort_values(["birth", "death"]).reset_index(drop=True)
        rows = rows.sort_values(["birth", "death"]).reset_index(drop=True)
        np.testing.assert_allclose(table["birth"], rows["birth"])
        np.testing.assert_allclose(table["death"], rows["death"])
        np.testing.assert_allclose(table["persistence"], rows["persistence"])
        assert tuple(layer.scale) == (2.0, 1.0, 0.5)


def test_2d_image_with_the_4_neighbourhood_equals_gudhi_vertices(make_napari_viewer, qtbot):
    """A 2D image with neighbourhood 4 is gudhi's vertex construction (Maria et al. 2014,
    CubicalComplex(vertices=...)), compared through voxtopo.persistence(engine="gudhi")."""
    data = np.random.default_rng(12).random((12, 13))
    viewer, widget = _widget(make_napari_viewer, data)
    widget.set_neighbourhood(4)
    _run(qtbot, widget)
    expected = voxtopo.persistence(data, neighbourhood=4, engine="gudhi")
    layers = _result_layers(viewer)
    assert sorted(layers) == [0, 1]
    for dim, layer in layers.items():
        rows = expected.pairs[expected.pairs["dim"] == dim]
        np.testing.assert_array_equal(
            _sorted_rows(layer.data), _sorted_rows(rows[["birth_voxel_y", "birth_voxel_x"]].to_numpy()))
        np.testing.assert_allclose(np.sort(layer.features["death"]), np.sort(rows["death"]))
    with pytest.raises(voxtopo.InputError, match=r"choose one of \[8, 4\]\.$"):
        widget.set_neighbourhood(26)


def test_spherical_shell_shows_one_component_and_one_cavity(make_napari_viewer, qtbot):
    """A bright spherical shell swept bright to dark: Betti numbers (1, 0, 1) (Hatcher 2002,
    spherical shell), so above a noise threshold one component, no loop, one cavity."""
    z, y, x = np.indices((22, 22, 22)) - 10.5
    r = np.sqrt(z ** 2 + y ** 2 + x ** 2)
    data = np.where((r > 6) & (r < 9), 1.0, 0.0)
    data += np.random.default_rng(2).normal(0, 0.05, data.shape)
    viewer, widget = _widget(make_napari_viewer, data)
    widget.mode_choice.setCurrentText("gray values, bright to dark (superlevel)")
    widget.min_persistence_box.setValue(0.5)
    _run(qtbot, widget)
    layers = _result_layers(viewer)
    assert [len(layers[d].data) for d in (0, 1, 2)] == [1, 0, 1]
    cavity_birth = layers[2].data[0]
    assert 6 - 1 <= np.linalg.norm(cavity_birth - 10.5) <= 9 + 1  # born on the shell


def test_panels_use_the_words_of_the_command_and_the_plots(make_napari_viewer, qtbot):
    """One name for one idea (common practice, no source): the shortest lifetime kept is
    "min persistence" as the command's --min-persistence, and a class that never dies is
    "never dies" as in the plots of voxtopo.report and voxtopo.porosity."""
    from qtpy.QtWidgets import QLabel
    z, y, x = np.indices((12, 12, 12)) - 5.5
    data = np.sqrt(z ** 2 + y ** 2 + x ** 2)
    viewer, widget = _widget(make_napari_viewer, data)
    _run(qtbot, widget)
    labels = {label.text() for label in widget.findChildren(QLabel)}
    labels |= {label.text() for label in widget.diagram_panel.findChildren(QLabel)}
    assert "min persistence" in labels and "min persistence shown" in labels
    assert not any("lifetime" in text for text in labels)
    texts = [t.get_text().strip() for t in widget.diagram_panel.axes.texts]
    assert "never dies" in texts and "never ends" not in texts


def test_slider_hides_exactly_the_features_below_the_threshold(make_napari_viewer, qtbot):
    """Common practice, no source: a persistence threshold separates features from noise;
    here 'hidden' must mean exactly persistence < threshold, in layers and diagram."""
    data = np.random.default_rng(11).random((10, 10, 10))
    viewer, widget = _widget(make_napari_viewer, data)
    widget.deaths_check.setChecked(True)
    widget.min_persistence_box.setValue(0.0)  # every pair listed: the slider alone decides
    _run(qtbot, widget)
    panel = widget.diagram_panel
    all_persistence = widget.result.diagram.pairs["persistence"].to_numpy()
    threshold = float(np.median(all_persistence[np.isfinite(all_persistence)]))
    panel.set_min_persistence(threshold)
    expected_visible = set()
    for which in ("birth", "death"):
        for layer in _result_layers(viewer, which).values():
            persistence = layer.features["persistence"].to_numpy()
            np.testing.assert_array_equal(layer.shown, persistence >= threshold)
            if which == "birth":
                expected_visible |= set(layer.features["feature"][persistence >= threshold])
    assert panel.visible_features() == expected_visible
    assert 0 < len(expected_visible) < len(all_persistence)
    panel.slider.setValue(0)
    assert all(layer.shown.all() for layer in _result_layers(viewer).values())


def test_selection_links_diagram_and_viewer_both_ways(make_napari_viewer, qtbot):
    data = np.random.default_rng(5).random((8, 9, 10))
    viewer, widget = _widget(make_napari_viewer, data, scale=(1.0, 2.0, 2.0))
    widget.min_persistence_box.setValue(0.0)  # every pair listed, so every loop is drawn
    _run(qtbot, widget)
    panel = widget.diagram_panel
    loops = _result_layers(viewer)[1]
    table = loops.features
    target = int(table["persistence"].to_numpy().argmax())
    feature = int(table["feature"][target])
    birth, death = table["birth"][target], table["death"][target]

    # a click on the point in the diagram selects it in the viewer and centres on it
    panel.select_at((birth, death))
    assert set(loops.selected_data) == {target}
    world = np.asarray(loops.data_to_world(loops.data[target]))
    assert viewer.dims.point[0] == pytest.approx(world[0])
    assert tuple(viewer.camera.center)[-2:] == pytest.approx(tuple(world[1:]))

    # a loop drawn around it in the diagram does the same
    eps = 1e-6
    panel._on_lasso([(birth - eps, death - eps), (birth + eps, death - eps),
                     (birth + eps, death + eps), (birth - eps, death + eps)])
    assert set(loops.selected_data) == {target}

    # selecting points in the viewer rings them in the diagram
    other = [i for i in range(len(table)) if i != target][:2]
    loops.selected_data = set(other)
    assert panel.highlighted == {int(table["feature"][i]) for i in other}
    assert feature not in panel.highlighted


def test_cancel_before_and_during_the_run_adds_no_layer(make_napari_viewer, qtbot):
    data = np.random.default_rng(9).random((40, 40, 40))
    viewer, widget = _widget(make_napari_viewer, data)
    before = [layer.name for layer in viewer.layers]

    widget.run()
    widget.cancel()
    qtbot.waitUntil(lambda: not widget.running, timeout=WAIT_MS)
    assert isinstance(widget.last_error, voxtopo.Cancelled)
    assert [layer.name for layer in viewer.layers] == before
    assert widget.result is None

    widget.run()
    # wait until the engine itself reports (its phases are the engine's own words)
    qtbot.waitUntil(lambda: not widget.status.text().startswith(("Analysing", "preparing")),
                    timeout=WAIT_MS)
    widget.cancel()
    qtbot.waitUntil(lambda: not widget.running, timeout=WAIT_MS)
    assert isinstance(widget.last_error, voxtopo.Cancelled)
    assert [layer.name for layer in viewer.layers] == before
    assert widget.status.text() == "Cancelled; nothing was added."
    assert widget.run_button.isEnabled()


def test_distance_mode_labels_each_pore_region(make_napari_viewer, qtbot):
    """Two ball pores (radius 5) joined by a narrow tube in a labels layer: two pores with
    radius -birth = 5 within one voxel (closed form of a ball on a voxel grid, CHECKS.md
    tolerance), and the pore-region layer equals the definition (scipy.ndimage.label of
    {distance < death level} per pore)."""
    z, y, x = np.indices((16, 16, 34))
    ball = lambda cx: (z - 8) ** 2 + (y - 8) ** 2 + (x - cx) ** 2 <= 25
    tube = ((z - 8) ** 2 + (y - 8) ** 2 <= 2) & (x >= 10) & (x <= 24)
    mask = (ball(10) | ball(24) | tube).astype(np.uint8)
    viewer, widget = _widget(make_napari_viewer, mask, name="pores", labels=True)
    widget.min_persistence_box.setValue(0.5)
    _run(qtbot, widget)
    pores = _result_layers(viewer)[0]
    assert pores.name.startswith("pores")
    assert len(pores.data) == 2
    np.testing.assert_allclose(pores.features["body_radius"], 5.0, atol=1.0)
    regions = [layer for layer in viewer.layers
               if (layer.metadata.get(METADATA_KEY) or {}).get("which") == "regions"]
    assert len(regions) == 1
    distance = widget.result.prepared.data
    births = pores.data.astype(np.int64)
    by_order = pore_regions_by_levels(distance, births, pores.features["death"].to_numpy(), 26)
    # the regions carry the pore's id of the pore table, as the pore layer does
    ids = np.concatenate([[0], pores.features["pore_id"].to_numpy()])
    np.testing.assert_array_equal(regions[0].data, ids[by_order])
    assert set(np.unique(regions[0].data)) == {0, 1, 2}
    # voxtopo.porosity sweeps its own basins: the pore that ends at the throat drains
    # exactly the voxels of its region (voxel volume 1)
    table = pores.features
    ending = int(np.flatnonzero(np.isfinite(table["death"].to_numpy()))[0])
    assert table["body_volume"][ending] == np.count_nonzero(
        regions[0].data == table["pore_id"][ending])
    # the status is the pores job's own line, as `voxtopo pores` prints it
    assert widget.status.text() == pores_job.describe(widget.result.job)
    assert widget.status.text().startswith("porosity")


def test_reader_opens_a_folder_written_by_the_cli(make_napari_viewer, tmp_path):
    """The reader shows what `voxtopo analyse` wrote: the scan under the features and one
    layer per dimension at the births in pairs.csv (read here with pandas alone); the
    number of pairs per dimension is gudhi's (Maria et al. 2014, CubicalComplex)."""
    from reference import gudhi_intervals

    data = np.random.default_rng(4).random((8, 9, 10))
    scan_path = tmp_path / "speckle.npy"
    np.save(scan_path, data)
    out = tmp_path / "speckle-result"
    assert cli.main(["analyse", str(scan_path), "--out", str(out), "--spacing", "3,3,3",
                     "--min-persistence", "0"]) == 0      # every pair, as gudhi lists them
    assert napari_get_reader(str(out)) is not None
    assert napari_get_reader(str(tmp_path)) is None

    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    scan_layer = viewer.layers["speckle"]
    np.testing.assert_array_equal(scan_layer.data, data)
    assert tuple(scan_layer.scale) == (3.0, 3.0, 3.0)

    pairs = pd.read_csv(out / "pairs.csv")
    layers = _result_layers(viewer)
    for dim in range(3):
        rows = pairs[pairs["dim"] == dim]
        assert len(rows) == len(gudhi_intervals(data, dim))
        np.testing.assert_array_equal(
            _sorted_rows(layers[dim].data),
            _sorted_rows(rows[["birth_voxel_z", "birth_voxel_y", "birth_voxel_x"]].to_numpy()))
        assert tuple(layers[dim].scale) == (3.0, 3.0, 3.0)
    assert set(_result_layers(viewer, "death")) == {0, 1, 2}


def test_reader_without_the_scan_shows_the_features_alone(make_napari_viewer, tmp_path):
    data = np.random.default_rng(6).random((6, 7))
    scan_path = tmp_path / "gone.npy"
    np.save(scan_path, data)
    out = tmp_path / "gone-result"
    assert cli.main(["analyse", str(scan_path), "--out", str(out)]) == 0
    scan_path.unlink()
    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    assert "gone" not in [layer.name for layer in viewer.layers]
    pairs = pd.read_csv(out / "pairs.csv")
    assert sum(len(layer.data) for layer in _result_layers(viewer).values()) == len(pairs)


def test_export_writes_the_same_folder_as_the_cli(make_napari_viewer, qtbot, tmp_path):
    """Export and `voxtopo analyse` on the same data give the same pairs.csv."""
    data = np.random.default_rng(8).random((7, 8, 9))
    viewer, widget = _widget(make_napari_viewer, data)
    widget.min_persistence_box.setValue(0.0)
    _run(qtbot, widget)
    exported = widget.export(tmp_path / "from-viewer")
    np.save(tmp_path / "same.npy", data)
    # every pair with its p_value and significant flag, as the command writes them
    assert cli.main(["analyse", str(tmp_path / "same.npy"), "--out",
                     str(tmp_path / "from-cli"), "--min-persistence", "0"]) == 0
    ours = pd.read_csv(exported / "pairs.csv")
    theirs = pd.read_csv(tmp_path / "from-cli" / "pairs.csv")
    assert {"p_value", "significant"} <= set(ours.columns)
    pd.testing.assert_frame_equal(ours, theirs)
    # the same files, report.html and the plots included
    assert sorted(p.name for p in exported.iterdir()) == \
        sorted(p.name for p in (tmp_path / "from-cli").iterdir())
    assert "report.html" in {p.name for p in exported.iterdir()}
    summary = json.loads((exported / "summary.json").read_text())
    assert summary["diagram"]["neighbourhood"] == 26
    assert summary["significance"]["alpha"] == 0.05
    assert widget.export(tmp_path / "from-viewer") is None  # never overwritten silently
    assert "already exists" in widget.status.text()


def test_colour_layer_is_refused_with_one_sentence(make_napari_viewer):
    viewer = make_napari_viewer()
    viewer.add_image(np.zeros((5, 6, 3), dtype=np.uint8), rgb=True, name="photo")
    widget = AnalysisWidget(viewer)
    widget.layer_choice.setCurrentText("photo")
    widget.run()
    assert not widget.running
    assert widget.status.text() == ("The layer 'photo' holds colour (RGB) pixels; convert "
                                    "it to gray values or pick a gray image layer.")
    assert [layer.name for layer in viewer.layers] == ["photo"]


def test_diagram_panel_shows_a_unit_with_dollar_signs_as_typed(make_napari_viewer, tmp_path):
    """A unit such as "$\\foo$" is the user's words: matplotlib draws an escaped dollar as a
    dollar and parses no math in it (matplotlib documentation, "Writing mathematical
    expressions"); unescaped, drawing the panel raises on the unknown command \\foo."""
    from voxtopo_napari._diagram_panel import DiagramPanel

    mask = np.zeros((14, 14), np.uint8)
    mask[3:7, 3:7] = 1
    mask[8:12, 7:12] = 1
    np.save(tmp_path / "mask.npy", mask)
    out = tmp_path / "$\\pores$"
    assert cli.main(["analyse", str(tmp_path / "mask.npy"), "--distance", "--unit", "$\\foo$",
                     "--out", str(out)]) == 0
    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    panel = DiagramPanel(viewer)
    panel.figure.canvas.draw()
    assert "\\$\\foo\\$" in panel.axes.get_xlabel()
    assert "\\$\\foo\\$" in panel.legend_axes.get_xlabel()


def _bright_disks_in_noise():
    """Three bright disks 2.0 above white noise of 0.1: twenty noise levels, far above the
    largest persistence noise of this size reaches (a few sigma), so each disk must be
    significant; nothing else is."""
    y, x = np.indices((48, 48))
    data = np.random.default_rng(5).normal(0.0, 0.1, (48, 48))
    for cy, cx in ((12, 12), (12, 34), (34, 22)):
        data[(y - cy) ** 2 + (x - cx) ** 2 <= 16] += 2.0
    return data


def test_significant_features_are_shown_by_default_and_the_switch_shows_all(
        make_napari_viewer, qtbot):
    """Monte Carlo test (Besag & Clifford 1989): with min persistence at "auto" the panel
    shows only the significant pairs, here the three planted disks (one component that
    never dies and two that merge into it), draws the threshold as a band, and "show all
    pairs" shows every tested pair. The status line is the command's own line."""
    from matplotlib.collections import PolyCollection

    from voxtopo.jobs import analyse
    viewer, widget = _widget(make_napari_viewer, _bright_disks_in_noise())
    widget.mode_choice.setCurrentText("gray values, bright to dark (superlevel)")
    assert widget.min_persistence_box.text() == "auto"
    _run(qtbot, widget)
    panel = widget.diagram_panel
    layers = _result_layers(viewer)
    assert [int(layers[d].shown.sum()) for d in (0, 1)] == [3, 0]
    assert len(layers[0].data) > 3 and "p_value" in layers[0].features
    assert len(panel.visible_features()) == 3
    assert widget.status.text() == analyse.describe(widget.result.job)
    assert widget.status.text().startswith("3 significant of ")
    assert "alpha 0.05" in widget.status.text()
    bands = [c for c in panel.axes.collections if isinstance(c, PolyCollection)]
    assert bands and all(c.get_label().startswith("not significant") for c in bands)
    assert "significant features" in panel.count_label.text()
    panel.show_all_check.setChecked(True)
    assert all(layer.shown.all() for layer in layers.values())
    assert len(panel.visible_features()) == sum(len(layer.data) for layer in layers.values())
    assert "all pairs" in panel.count_label.text()


@pytest.mark.parametrize("with_porosity", [False, True])
def test_distance_mode_shows_the_robust_pores_by_default(make_napari_viewer, qtbot,
                                                         with_porosity):
    """Stability (Cohen-Steiner, Edelsbrunner & Harer 2007): with a boundary tolerance of
    one voxel a pore is robust when it lives longer than 2 (1 + sqrt(3)) voxels (the
    voxel-centre offset of a 3D grid added). Two balls of radius 9 joined by a thin tube:
    the second pore lives about 9 - 1.4 voxels, so both pores are robust and shown, and
    nothing else of dimension 0; the band is drawn at that threshold."""
    from matplotlib.collections import PolyCollection
    z, y, x = np.indices((24, 24, 50))
    ball = lambda cx: (z - 12) ** 2 + (y - 12) ** 2 + (x - cx) ** 2 <= 81  # noqa: E731
    tube = ((z - 12) ** 2 + (y - 12) ** 2 <= 2) & (x >= 12) & (x <= 37)
    mask = (ball(12) | ball(37) | tube).astype(np.uint8)
    viewer, widget = _widget(make_napari_viewer, mask, name="pores", labels=True)
    widget.porosity_check.setChecked(with_porosity)
    _run(qtbot, widget)
    threshold = 2 * (1 + np.sqrt(3))
    pores = _result_layers(viewer)[0]
    lifetimes = pores.features["persistence"].to_numpy()
    np.testing.assert_array_equal(pores.shown, lifetimes > threshold)
    assert int(pores.shown.sum()) == 2
    bands = [c for c in widget.diagram_panel.axes.collections
             if isinstance(c, PolyCollection)]
    assert bands and all(c.get_label().startswith("not robust") for c in bands)
    status = widget.status.text()
    assert ("2 robust of" in status) and f"{threshold:.4g}" in status


def test_reader_carries_the_threshold_band_of_a_tested_folder(make_napari_viewer, tmp_path):
    """A folder of `voxtopo analyse` with its defaults lists the significant pairs (Monte
    Carlo test, Besag & Clifford 1989): the three planted disks; opened in the viewer,
    the diagram panel draws the thresholds of summary.json as the band."""
    from matplotlib.collections import PolyCollection
    from voxtopo_napari._diagram_panel import DiagramPanel
    np.save(tmp_path / "disks.npy", _bright_disks_in_noise())
    out = tmp_path / "disks"
    assert cli.main(["analyse", str(tmp_path / "disks.npy"), "--out", str(out),
                     "--superlevel"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    panel = DiagramPanel(viewer)
    viewer.window.add_dock_widget(panel, name="voxtopo diagram")
    layers = _result_layers(viewer)
    assert sum(len(layer.data) for layer in layers.values()) == 3
    meta = layers[0].metadata[METADATA_KEY]
    assert meta["flag"] == "significant"
    assert meta["thresholds"][0] == pytest.approx(summary["significance"]["threshold"]["0"])
    assert any(isinstance(c, PolyCollection) for c in panel.axes.collections)
    assert len(panel.visible_features()) == 3


def test_reader_opens_a_periodicity_folder_with_its_maps_in_the_scans_unit(
        make_napari_viewer, tmp_path):
    """A folder of `voxtopo periodicity` opens as its score map over the scan's grid, with
    the scan's pixel size (0.5 um: ImageJ resolution 2 pixels per um, TIFF 6.0 / ImageJ),
    and one point per signal at the centre regions.csv gives (read with pandas alone)."""
    import tifffile

    rng = np.random.default_rng(0)
    time = np.arange(60) * 0.1
    yy, xx = np.mgrid[0:12, 0:12]
    disc = (yy - 5) ** 2 + (xx - 6) ** 2 < 10
    stack = 100 + 4 * rng.standard_normal((60, 12, 12))
    stack += 20 * np.cos(2 * np.pi * time / 1.5)[:, None, None] * disc
    path = tmp_path / "beats.tif"
    tifffile.imwrite(path, stack.astype(np.float32), imagej=True, resolution=(2.0, 2.0),
                     metadata={"axes": "TYX", "finterval": 0.1, "unit": "um"})
    labels = np.zeros((12, 12), np.uint16)
    labels[disc] = 1
    labels[8:, :4] = 2
    tifffile.imwrite(tmp_path / "labels.tif", labels)
    out = tmp_path / "rhythm"
    assert cli.main(["periodicity", str(path), "--out", str(out), "--regions",
                     str(tmp_path / "labels.tif"), "--surrogates", "19",
                     "--no-whole-field"]) == 0
    assert napari_get_reader(str(out)) is not None
    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    score = viewer.layers["score · rhythm"]
    assert score.data.shape == (12, 12) and tuple(score.scale) == (0.5, 0.5)
    table = pd.read_csv(out / "regions.csv")
    assert np.nanmax(score.data) == pytest.approx(table["score"].max(), rel=1e-6)
    signals = viewer.layers["signals · rhythm"]
    np.testing.assert_allclose(signals.data * np.asarray(signals.scale),
                               table[["centre_y", "centre_x"]].to_numpy())
    assert list(signals.features["region"]) == [1, 2]
    assert "period · rhythm" in viewer.layers


def test_reader_opens_a_patches_folder_with_the_patches_on_their_image(
        make_napari_viewer, tmp_path):
    """A folder of `voxtopo patches` opens as its source image with a point at the centre
    of every kept patch: the top-left pixel in cloud_origin.npy plus (k - 1) / 2 (a k x k
    patch's centre, common practice, no source), and core marks the dense core."""
    from skimage import data as samples

    image = tmp_path / "gravel.npy"
    np.save(image, samples.gravel()[:96, :96])
    out = tmp_path / "cloud"
    assert cli.main(["patches", str(image), "--out", str(out), "--positions", "all",
                     "--resamples", "0"]) == 0
    assert napari_get_reader(str(out)) is not None
    viewer = make_napari_viewer()
    viewer.open(str(out), plugin="voxtopo-napari")
    assert viewer.layers["gravel"].data.shape == (96, 96)
    points = viewer.layers["patches · gravel · cloud"]
    origin = np.load(out / "cloud_origin.npy", allow_pickle=False)
    np.testing.assert_allclose(points.data, origin[:, 2:] + 1.0)      # k = 3
    core = np.load(out / "core.npy", allow_pickle=False)
    assert points.features["core"].sum() == len(core)
    assert points.features["core"].to_numpy()[core].all()
