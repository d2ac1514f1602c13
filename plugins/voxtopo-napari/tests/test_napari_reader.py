"""The reader on damaged result folders: one clear sentence, nothing opened."""

import shutil
from pathlib import Path

import numpy as np
import pytest

from voxtopo import cli
from voxtopo.errors import InputError
from voxtopo_napari._reader import napari_get_reader, read_result_folder


@pytest.fixture(scope="module")
def written_by_the_cli(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    np.save(folder / "speckle.npy", np.random.default_rng(1).random((6, 7)))
    out = folder / "result"
    assert cli.main(["analyse", str(folder / "speckle.npy"), "--out", str(out)]) == 0
    return out


@pytest.fixture
def result_folder(written_by_the_cli, tmp_path):
    """A fresh copy for each test to damage."""
    return Path(shutil.copytree(written_by_the_cli, tmp_path / "result"))


def test_pairs_cut_at_a_line_break_are_refused(result_folder):
    pairs = result_folder / "pairs.csv"
    lines = pairs.read_text().splitlines(keepends=True)
    pairs.write_text("".join(lines[:len(lines) // 2]))
    with pytest.raises(InputError, match=r"pairs\.csv holds \d+ pairs but summary\.json lists "
                                         r"\d+; the folder is incomplete"):
        read_result_folder(str(result_folder))


def test_pairs_cut_inside_a_line_are_refused(result_folder):
    pairs = result_folder / "pairs.csv"
    text = pairs.read_text()
    pairs.write_text(text[:len(text) // 2 + 3])
    with pytest.raises(InputError):
        read_result_folder(str(result_folder))


def test_broken_summary_is_refused_in_one_sentence(result_folder):
    summary = result_folder / "summary.json"
    summary.write_text(summary.read_text()[:40])
    with pytest.raises(InputError, match=r"summary\.json is not valid JSON \(.*truncated or "
                                         r"edited\?\); write the folder again with "
                                         r"voxtopo\.$"):
        read_result_folder(str(result_folder))


def test_a_folder_without_results_is_left_to_other_readers(tmp_path):
    (tmp_path / "notes.txt").write_text("not a result")
    assert napari_get_reader(str(tmp_path)) is None
    assert napari_get_reader(str(tmp_path / "notes.txt")) is None


def test_a_pores_folder_opens_with_its_pores_where_the_table_puts_them(tmp_path):
    """A folder of `voxtopo pores` opens (it crashed on its counts): one Points layer per
    table, as many pores as pores.csv has rows (read with pandas alone), each at its
    body position in the scan's unit (common practice, no source)."""
    import json

    import pandas as pd

    z, y, x = np.meshgrid(*[np.arange(24) - 11.5] * 3, indexing="ij")
    np.save(tmp_path / "cavity.npy", np.sqrt(z * z + y * y + x * x) <= 7)
    out = tmp_path / "pores-result"
    assert cli.main(["pores", str(tmp_path / "cavity.npy"), "--out", str(out), "--spacing",
                     "1.5", "--unit", "um", "--engine", "gudhi"]) == 0
    assert napari_get_reader(str(out)) is read_result_folder
    layers = {kwargs["name"].split(" · ")[0]: (data, kwargs)
              for data, kwargs, kind in read_result_folder(str(out))}
    table = pd.read_csv(out / "pores.csv")
    summary = json.loads((out / "summary.json").read_text())
    data, kwargs = layers["pores"]
    assert len(data) == len(table) == summary["counts"]["pores"]
    np.testing.assert_allclose(data * np.asarray(kwargs["scale"]),
                               table[["body_z", "body_y", "body_x"]].to_numpy())
    assert list(kwargs["features"]["id"]) == list(table["id"])
