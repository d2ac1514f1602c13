"""Layer data built from a diagram: placement, features tables, input checks."""

import numpy as np
import pandas as pd
import pytest

import voxtopo
from voxtopo.errors import InputError
from voxtopo_napari._job import scan_from_layer_data
from voxtopo_napari._layers import features_table, placement_of, result_layers
from voxtopo_napari._lifetime_colours import RAMP_STOPS, lifetime_colours


def test_crop_and_downsample_move_voxel_zero_to_the_first_block_centre():
    """A crop starting at (2, 3) with 1.5-unit voxels puts voxel 0 at (3.0, 4.5); blocks of
    2 voxels have their centre half a voxel in: 3.75, 5.25; the voxel size doubles
    (block-mean geometry, common practice, no source)."""
    placement = placement_of((10, 12), (1.5, 1.5), "um", crop="2:,3:", downsample=2)
    assert placement.translate == pytest.approx((3.75, 5.25))
    assert placement.scale == pytest.approx((3.0, 3.0))


def test_features_table_positions_are_voxels_times_spacing():
    """Physical positions are voxel index times spacing plus the layer offset; the values
    come from gudhi (Maria et al. 2014, CubicalComplex) through the gudhi backend."""
    rng = np.random.default_rng(3)
    diagram = voxtopo.persistence(rng.random((6, 7, 8)), engine="gudhi",
                                  spacing=(0.5, 2.0, 3.0), unit="um")
    placement = placement_of((6, 7, 8), (0.5, 2.0, 3.0), "um", translate=(10, 0, -1))
    table = features_table(diagram, 1, placement)
    rows = diagram.pairs[diagram.pairs["dim"] == 1]
    assert len(table) == len(rows) > 0
    np.testing.assert_allclose(table["birth_x"],
                               rows["birth_voxel_x"].to_numpy(dtype=float) * 3.0 - 1)
    np.testing.assert_allclose(table["birth_z"],
                               rows["birth_voxel_z"].to_numpy(dtype=float) * 0.5 + 10)
    assert "birth_x_position" not in table.columns      # one name for one idea
    assert (table["feature"].to_numpy() == rows.index.to_numpy()).all()


def test_body_radius_and_throat_radius_are_minus_birth_and_death():
    """Body radius (pores.csv's name) = -birth, throat radius = -death of the signed distance (filtration
    convention of voxtopo.filtration.signed_distance; common practice, no source)."""
    pairs = pd.DataFrame({"dim": [0, 0, 0], "birth": [-5.0, -3.0, -2.0],
                          "death": [np.inf, -1.0, 1.0], "persistence": [np.inf, 2.0, 3.0]})
    for column, values in (("birth_y", [1, 2, 3]), ("birth_x", [1, 2, 3]),
                           ("death_y", [pd.NA, 4, 5]), ("death_x", [pd.NA, 4, 5])):
        pairs[column] = pd.array(values, dtype="Float64").astype(float)
        pairs[column.replace("_", "_voxel_")] = pd.array(values, dtype="Int64")
    diagram = voxtopo.Diagram(pairs=pairs, ndim=2, shape=(8, 8), neighbourhood=8,
                              spacing=(1.0, 1.0), values="distance")
    table = features_table(diagram, 0, placement_of((8, 8), (1.0, 1.0)))
    np.testing.assert_allclose(table["body_radius"], [5.0, 3.0, 2.0])
    assert "pore_radius" not in table.columns
    np.testing.assert_allclose(table["throat_radius"], [np.nan, 1.0, np.nan])
    layers = result_layers(diagram, placement_of((8, 8), (1.0, 1.0)), "t", mark_deaths=True)
    names = [kwargs["name"] for _, kwargs, _ in layers]
    assert names[0] == "pores · t"
    deaths = layers[2][0]
    assert deaths.shape == (2, 2)  # the pore that never dies has no death voxel


def test_ramp_ends_at_its_first_and_last_colours():
    first = np.array([int(RAMP_STOPS[0][1][i:i + 2], 16) / 255 for i in (1, 3, 5)])
    last = np.array([int(RAMP_STOPS[-1][1][i:i + 2], 16) / 255 for i in (1, 3, 5)])
    colours = lifetime_colours([0.0, 1.0])
    np.testing.assert_allclose(colours[0, :3], first)
    np.testing.assert_allclose(colours[1, :3], last)


def test_rgb_layer_is_refused_in_one_sentence():
    with pytest.raises(InputError, match=r"^The layer 'photo' holds colour \(RGB\) pixels; "
                                         r"convert it to gray values or pick a gray image "
                                         r"layer\.$"):
        scan_from_layer_data(np.zeros((4, 4, 3)), name="photo", spacing=(1, 1, 1),
                             unit="px", rgb=True)


def test_time_series_layer_is_refused_in_one_sentence():
    with pytest.raises(InputError, match=r"has 4 dimensions \(shape \(2, 3, 4, 5\)\); pick a "
                                         r"2D image or a 3D volume\.$"):
        scan_from_layer_data(np.zeros((2, 3, 4, 5)), name="movie", spacing=(1,) * 4,
                             unit="px")


def test_labels_become_a_mask_of_the_chosen_phase():
    labels = np.array([[0, 1], [2, 0]])
    pores_labelled = scan_from_layer_data(labels, name="l", spacing=(1, 1), unit="px",
                                          is_mask=True, pores_labelled=True)
    pores_unlabelled = scan_from_layer_data(labels, name="l", spacing=(1, 1), unit="px",
                                            is_mask=True, pores_labelled=False)
    assert pores_labelled.data.tolist() == [[0, 1], [1, 0]]
    assert pores_unlabelled.data.tolist() == [[1, 0], [0, 1]]
    assert labels.tolist() == [[0, 1], [2, 0]]  # the layer's data is not modified


def test_plugin_and_cli_report_the_same_pores(tmp_path, capsys):
    """For the same scan and settings (Otsu's threshold, the same min persistence) the
    panel and `voxtopo pores` run the same pore job: the same counts, the same lines, one
    pore point and one region id per row of pores.csv (consistency of the two shells;
    common practice, no source)."""
    import json

    from voxtopo import cli
    from voxtopo.jobs.analyse import AnalysisOptions
    from voxtopo_napari._job import run_analysis, scan_from_layer_data

    rng = np.random.default_rng(5)
    z, y, x = np.indices((28, 28, 28))
    solid = np.zeros((28, 28, 28), bool)
    for centre in rng.uniform(0, 28, size=(30, 3)):
        solid |= ((z - centre[0]) ** 2 + (y - centre[1]) ** 2 + (x - centre[2]) ** 2) <= 25
    gray = np.where(solid, 180, 50) + rng.normal(0, 6, solid.shape)
    gray = np.clip(gray, 0, 255).astype(np.uint8)
    np.save(tmp_path / "gray.npy", gray)
    assert cli.main(["pores", str(tmp_path / "gray.npy"), "--threshold", "otsu", "--out",
                     str(tmp_path / "res"), "--spacing", "2", "--unit", "um",
                     "--min-persistence", "1", "--engine", "gudhi"]) == 0
    printed = [line.removeprefix("voxtopo: ") for line in capsys.readouterr().out.splitlines()
               if "results written" not in line and not line.endswith("...")]
    summary = json.loads((tmp_path / "res" / "summary.json").read_text())

    scan = scan_from_layer_data(gray, name="gray", spacing=(2.0, 2.0, 2.0), unit="um")
    options = AnalysisOptions(distance=True, threshold="otsu", min_persistence=1.0,
                              engine="gudhi")
    result = run_analysis(scan, options, name="gray", with_porosity=True)
    assert result.porosity["counts"] == summary["counts"]
    assert result.porosity["porosity"] == summary["porosity"]
    from voxtopo.jobs.pores import summary_lines
    assert [line for line in summary_lines(result.porosity)] == printed
    pores_layer = result.layers[0]
    assert len(pores_layer[0]) == summary["counts"]["pores"]
    table = pd.read_csv(tmp_path / "res" / "pores.csv")
    assert sorted(pores_layer[1]["features"]["pore_id"]) == sorted(table["id"])
    assert set(np.unique(result.regions)) - {0} == set(table["id"])
    # the panel's status is the command's lines, and its export is the command's folder:
    # the same files (report.html included), the same pore table and the same counts
    assert result.describe().splitlines() == printed
    result.export(tmp_path / "panel")
    assert sorted(p.name for p in (tmp_path / "panel").iterdir()) == \
        sorted(p.name for p in (tmp_path / "res").iterdir())
    assert "report.html" in {p.name for p in (tmp_path / "panel").iterdir()}
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "panel" / "pores.csv"), table)
    exported = json.loads((tmp_path / "panel" / "summary.json").read_text())
    assert exported["counts"] == summary["counts"]
    assert exported["robustness"] == summary["robustness"]
