"""`voxtopo analyse` end to end on the sample volumes, and its refusals."""

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import voxtopo
from voxtopo.cli import main

SAMPLES = Path(__file__).resolve().parents[1] / "sample_volumes"


def _run(*args):
    return subprocess.run([sys.executable, "-m", "voxtopo.cli", *map(str, args)],
                          capture_output=True, text=True)


def test_analyse_writes_a_complete_result_folder_for_the_film(tmp_path):
    out = tmp_path / "film"
    result = _run("analyse", SAMPLES / "film.tif", "--out", out, "--min-persistence", "50")
    assert result.returncode == 0, result.stderr
    assert {"pairs.csv", "summary.json", "diagram.png", "barcode.png", "betti_curves.png",
            "euler_curve.png"} <= {p.name for p in out.iterdir()}
    summary = json.loads((out / "summary.json").read_text())
    scan = voxtopo.load(SAMPLES / "film.tif")
    assert summary["scan"]["shape"] == list(scan.shape)
    assert summary["scan"]["spacing"] == pytest.approx(list(scan.spacing))
    assert summary["scan"]["unit"] == scan.unit
    # The folder must hold the same diagram the library computes on the same data.
    expected = voxtopo.persistence(scan, min_persistence=50)
    pairs = pd.read_csv(out / "pairs.csv")
    assert summary["counts"] == {str(d): n for d, n in expected.counts().items()}
    np.testing.assert_allclose(np.sort(pairs["persistence"].to_numpy()),
                               np.sort(expected.pairs["persistence"].to_numpy()))
    assert len(summary["most_persistent"]["0"]) <= 10
    assert any("not a medical diagnosis" in c for c in summary["cautions"])


def test_analyse_of_the_bead_volume_in_superlevel_with_downsampling(tmp_path):
    out = tmp_path / "beads"
    code = main(["analyse", str(SAMPLES / "beads.tif"), "--out", str(out), "--superlevel",
                 "--downsample", "2", "--neighbourhood", "6"])
    assert code == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["options"]["superlevel"] is True
    original = voxtopo.load(SAMPLES / "beads.tif")
    assert summary["analysed"]["spacing"] == pytest.approx([2 * s for s in original.spacing])
    pairs = pd.read_csv(out / "pairs.csv")
    finite = pairs[np.isfinite(pairs["death"])]
    assert (finite["birth"] > finite["death"]).all()


def test_existing_result_folder_is_not_overwritten_without_force(tmp_path):
    out = tmp_path / "r"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    np.save(tmp_path / "a.npy", np.zeros((4, 4)))
    result = _run("analyse", tmp_path / "a.npy", "--out", out)
    assert result.returncode == 2
    assert "--force" in result.stderr and "Traceback" not in result.stderr
    assert (out / "keep.txt").read_text() == "mine"
    # --force replaces only a folder voxtopo wrote: the user's own folder stays as it was
    result = _run("analyse", tmp_path / "a.npy", "--out", out, "--force")
    assert result.returncode == 2 and "voxtopo wrote" in result.stderr
    assert (out / "keep.txt").read_text() == "mine" and not (out / "pairs.csv").exists()
    ours = tmp_path / "ours"
    assert _run("analyse", tmp_path / "a.npy", "--out", ours).returncode == 0
    (ours / "pairs.csv").write_text("stale")
    result = _run("analyse", tmp_path / "a.npy", "--out", ours, "--force")
    assert result.returncode == 0, result.stderr
    assert (ours / "pairs.csv").read_text() != "stale"


@pytest.mark.parametrize("make, words", [
    (lambda d: d / "missing.tif", "No file or folder"),
    (lambda d: _nan_file(d), "NaN"),
    (lambda d: _four_d_file(d), "timepoint"),
])
def test_bad_input_gives_one_sentence_exit_2_and_no_folder(tmp_path, make, words):
    path = make(tmp_path)
    before = _digest(path)
    out = tmp_path / "out"
    result = _run("analyse", path, "--out", out)
    assert result.returncode == 2
    errors = [line for line in result.stderr.splitlines() if "error" in line]
    assert len(errors) == 1 and words in errors[0]
    assert "Traceback" not in result.stderr
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]
    assert _digest(path) == before


def test_memory_refusal_names_the_estimate_and_a_remedy(tmp_path, monkeypatch):
    np.save(tmp_path / "a.npy", np.zeros((20, 20, 20), np.float32))
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "50000")  # the scan (32 kB) fits, a run does not
    out = tmp_path / "out"
    code = main(["analyse", str(tmp_path / "a.npy"), "--out", str(out)])
    assert code == 2
    assert not out.exists()


def test_debug_shows_the_traceback(tmp_path):
    result = _run("--debug", "analyse", tmp_path / "missing.npy", "--out", tmp_path / "o")
    assert result.returncode != 0 and "Traceback" in result.stderr


def _nan_file(folder):
    data = np.ones((6, 6), np.float32)
    data[1, 1] = np.nan
    np.save(folder / "nan.npy", data)
    return folder / "nan.npy"


def _four_d_file(folder):
    import tifffile
    tifffile.imwrite(folder / "series.tif", np.zeros((3, 4, 8, 8), np.uint8), imagej=True,
                     metadata={"axes": "TZYX"})
    return folder / "series.tif"


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.exists() else None


def test_one_spacing_number_applies_to_every_axis(tmp_path):
    np.save(tmp_path / "v.npy", np.zeros((4, 5, 6), np.uint8))
    out = tmp_path / "r"
    assert main(["analyse", str(tmp_path / "v.npy"), "--out", str(out), "--spacing", "3",
                 "--unit", "um"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["scan"]["spacing"] == [3.0, 3.0, 3.0] and summary["scan"]["unit"] == "um"
