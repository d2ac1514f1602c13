"""The Diagram type: columns, selections, files."""

import numpy as np
import pandas as pd

import voxtopo
from voxtopo.diagram import columns


def _diagram(ndim=3):
    rng = np.random.default_rng(5)
    shape = (9, 10, 11) if ndim == 3 else (20, 21)
    return voxtopo.persistence(rng.random(shape), spacing=(2.0,) * ndim, unit="um")


def test_pairs_have_the_design_columns_in_order():
    assert list(_diagram(3).pairs.columns) == [
        "dim", "birth", "death", "persistence", "birth_z", "birth_y", "birth_x",
        "death_z", "death_y", "death_x"]
    assert list(_diagram(2).pairs.columns) == [
        "dim", "birth", "death", "persistence", "birth_y", "birth_x", "death_y", "death_x"]


def test_save_and_load_give_back_the_same_diagram(tmp_path):
    diagram = _diagram()
    diagram.save(tmp_path)
    back = voxtopo.Diagram.load(tmp_path)
    pd.testing.assert_frame_equal(back.pairs, diagram.pairs)
    assert back.spacing == diagram.spacing and back.unit == "um"
    assert back.neighbourhood == diagram.neighbourhood


def test_filters_select_what_they_say():
    diagram = _diagram()
    assert set(diagram.dimension(1).pairs["dim"]) == {1}
    assert (diagram.above(0.3).pairs["persistence"] > 0.3).all()
    assert np.isfinite(diagram.finite().pairs["death"]).all()
    counts = diagram.counts()
    assert sum(counts.values()) == len(diagram)


def test_positions_are_voxel_indices_times_spacing():
    diagram = _diagram()
    pos = diagram.positions("birth")
    idx = diagram.pairs[["birth_z", "birth_y", "birth_x"]].to_numpy(dtype=float)
    np.testing.assert_allclose(pos, idx * 2.0)


def test_euler_curve_is_the_alternating_sum_of_betti_curves():
    diagram = _diagram()
    levels = np.linspace(0, 1, 11)
    betti = diagram.betti_curve(levels)
    chi = diagram.euler_curve(levels)["euler_characteristic"]
    np.testing.assert_array_equal(chi, betti["betti_0"] - betti["betti_1"] + betti["betti_2"])
    assert columns(2) == ["dim", "birth", "death", "persistence", "birth_y", "birth_x",
                          "death_y", "death_x"]
