"""The Diagram type: columns, selections, files."""

import json

import numpy as np
import pandas as pd
import pytest

import voxtopo
from voxtopo.diagram import columns


#: an anisotropic voxel: every axis has its own step, so a swapped axis shows
SPACING = {3: (2.0, 0.5, 3.0), 2: (0.25, 1.5)}


def _diagram(ndim=3):
    rng = np.random.default_rng(5)
    shape = (9, 10, 11) if ndim == 3 else (20, 21)
    return voxtopo.persistence(rng.random(shape), spacing=SPACING[ndim], unit="um")


def test_pairs_have_the_design_columns_in_order():
    assert list(_diagram(3).pairs.columns) == [
        "dim", "birth", "death", "persistence", "birth_z", "birth_y", "birth_x",
        "death_z", "death_y", "death_x", "birth_voxel_z", "birth_voxel_y", "birth_voxel_x",
        "death_voxel_z", "death_voxel_y", "death_voxel_x"]
    assert list(_diagram(2).pairs.columns) == [
        "dim", "birth", "death", "persistence", "birth_y", "birth_x", "death_y", "death_x",
        "birth_voxel_y", "birth_voxel_x", "death_voxel_y", "death_voxel_x"]


@pytest.mark.parametrize("ndim", [2, 3])
def test_save_and_load_give_back_the_same_diagram(tmp_path, ndim):
    diagram = _diagram(ndim)
    diagram.save(tmp_path)
    back = voxtopo.Diagram.load(tmp_path)
    pd.testing.assert_frame_equal(back.pairs, diagram.pairs)
    assert back.spacing == diagram.spacing and back.unit == "um"
    assert back.neighbourhood == diagram.neighbourhood


def test_saved_pairs_give_the_unit_of_every_column(tmp_path):
    # common practice, no source: a table a person reads says the unit of each column
    diagram = _diagram(3)
    diagram.save(tmp_path)
    written = pd.read_csv(tmp_path / "pairs.csv").columns
    units = json.loads((tmp_path / "summary.json").read_text())["columns"]["pairs.csv"]
    assert list(units) == list(written)
    assert units["birth_z"] == units["death_x"] == "um"
    assert units["birth_voxel_z"] == units["death_voxel_x"] == "voxel index"
    assert units["birth"] == units["persistence"] == "gray value"


def test_a_pairs_table_from_before_positions_were_written_still_loads(tmp_path):
    # older folders held the voxel indices under birth_z ... death_x: they are read as
    # indices and the positions worked out from the stored voxel size
    diagram = _diagram(3)
    diagram.save(tmp_path)
    older = diagram.pairs[["dim", "birth", "death", "persistence"]
                          + [c for c in diagram.pairs.columns if "_voxel_" in c]]
    older.columns = [c.replace("_voxel", "") for c in older.columns]
    older.to_csv(tmp_path / "pairs.csv", index=False)
    back = voxtopo.Diagram.load(tmp_path)
    pd.testing.assert_frame_equal(back.pairs, diagram.pairs)


def test_filters_select_what_they_say():
    diagram = _diagram()
    assert set(diagram.dimension(1).pairs["dim"]) == {1}
    assert (diagram.above(0.3).pairs["persistence"] > 0.3).all()
    assert np.isfinite(diagram.finite().pairs["death"]).all()
    counts = diagram.counts()
    assert sum(counts.values()) == len(diagram)


@pytest.mark.parametrize("ndim", [2, 3])
def test_positions_are_voxel_indices_times_spacing(ndim):
    # common practice, no source: the centre of voxel i along an axis of step h lies at
    # i * h from the centre of the first voxel (as numpy, scikit-image and napari place it)
    diagram = _diagram(ndim)
    for which in ("birth", "death"):
        index = diagram.voxels(which).astype(float)
        index[index < 0] = np.nan
        np.testing.assert_allclose(diagram.positions(which), index * SPACING[ndim])
    # one hand-checked pair: the global minimum of the scan is the essential birth
    rng = np.random.default_rng(5)
    image = rng.random((9, 10, 11) if ndim == 3 else (20, 21))
    lowest = np.unravel_index(np.argmin(image), image.shape)
    essential = diagram.pairs[(diagram.pairs["dim"] == 0)
                              & ~np.isfinite(diagram.pairs["death"])].iloc[0]
    axes = "zyx"[3 - ndim:]
    assert [essential[f"birth_{a}"] for a in axes] == pytest.approx(
        [i * h for i, h in zip(lowest, SPACING[ndim])])


def test_euler_curve_is_the_alternating_sum_of_betti_curves():
    diagram = _diagram()
    levels = np.linspace(0, 1, 11)
    betti = diagram.betti_curve(levels)
    chi = diagram.euler_curve(levels)["euler_characteristic"]
    np.testing.assert_array_equal(chi, betti["betti_0"] - betti["betti_1"] + betti["betti_2"])
    assert columns(2)[:8] == ["dim", "birth", "death", "persistence", "birth_y", "birth_x",
                              "death_y", "death_x"]


def test_placing_on_the_scan_grid_copies_nothing_and_changes_no_other_diagram():
    # A large table must never be held twice: with no crop and no downsampling the
    # places are already the scan's, and the same table is kept; otherwise only the place
    # columns are new, and the diagram placed from stays as it was.
    rng = np.random.default_rng(4)
    diagram = voxtopo.persistence(rng.integers(0, 50, (6, 7, 8)).astype(np.uint8),
                                  spacing=(2.0, 1.0, 0.5), unit="um")
    before = diagram.pairs.copy()
    same = diagram.placed_in_scan((0, 0, 0), (1, 1, 1))
    assert same.pairs is diagram.pairs
    assert same.first_voxel == (0, 0, 0) and same.block == (1, 1, 1)
    moved = diagram.placed_in_scan((3, 0, 2), (1, 2, 1))
    pd.testing.assert_frame_equal(diagram.pairs, before)
    born = before["birth_voxel_y"].to_numpy(dtype=np.int64)
    # swept voxel i is the block of scan voxels 2i, 2i+1: its centre 2i + 0.5 voxels
    assert np.array_equal(moved.pairs["birth_voxel_y"].to_numpy(dtype=np.int64), 2 * born)
    assert np.allclose(moved.pairs["birth_y"], (2 * born + 0.5) * 0.5)
    assert np.array_equal(moved.pairs["birth_voxel_z"].to_numpy(dtype=np.int64),
                          before["birth_voxel_z"].to_numpy(dtype=np.int64) + 3)
    pd.testing.assert_series_equal(moved.pairs["persistence"], before["persistence"])
