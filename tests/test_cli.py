"""`voxtopo analyse` end to end on the sample volumes, and its refusals."""

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from reference import gudhi_intervals

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
    # a constant image has no noise to test against: every pair is listed instead
    assert _run("analyse", tmp_path / "a.npy", "--out", ours,
                "--min-persistence", "0").returncode == 0
    (ours / "pairs.csv").write_text("stale")
    result = _run("analyse", tmp_path / "a.npy", "--out", ours, "--force",
                  "--min-persistence", "0")
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


def test_memory_refusal_names_the_estimate_and_a_remedy(tmp_path, monkeypatch, capsys):
    """The refusal says what it would need and every way out, the out-of-core path with
    what that path computes (dimensions 0 and d-1) included."""
    np.save(tmp_path / "a.npy", np.zeros((20, 20, 20), np.float32))
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", "50000")  # the scan (32 kB) fits, a run does not
    out = tmp_path / "out"
    code = main(["analyse", str(tmp_path / "a.npy"), "--out", str(out)])
    assert code == 2
    assert not out.exists()
    said = capsys.readouterr().err
    assert "would need about" in said and "kB" in said
    for remedy in ("--crop", "--downsample", "dimensions 0 and 2 out of core", "OME-Zarr",
                   "voxtopo analyse --out-of-core", "voxtopo batch"):
        assert remedy in said, remedy


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
                 "--unit", "um", "--min-persistence", "0"]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["scan"]["spacing"] == [3.0, 3.0, 3.0] and summary["scan"]["unit"] == "um"


# --- which features are real ------------------------------------------------------------
def _disks_in_noise(folder):
    """Two dark disks 10 sigma deep in white noise: about twice the largest persistence
    white noise reaches on 64 x 64 pixels (see tests/test_significance.py)."""
    from skimage.draw import disk
    image = np.random.default_rng(2).normal(100, 3.0, (64, 64))
    for centre in ((20, 20), (44, 40)):
        image[disk(centre, 6)] -= 30.0
    np.save(folder / "disks.npy", image.astype(np.float32))
    return folder / "disks.npy"


def test_default_keeps_the_significant_pairs_and_says_so(tmp_path):
    # Besag & Clifford 1989 Monte Carlo test; the disks are far above the noise maxima.
    out = tmp_path / "r"
    result = _run("analyse", _disks_in_noise(tmp_path), "--out", out)
    assert result.returncode == 0, result.stderr
    line = result.stdout.splitlines()[0]
    summary = json.loads((out / "summary.json").read_text())
    pairs = pd.read_csv(out / "pairs.csv")
    total = sum(summary["pairs_computed"].values())
    assert f"{len(pairs)} significant of {total} pairs" in line
    assert "family-wise, alpha 0.05" in line and "simulations" in line
    assert pairs["significant"].all()
    assert summary["counts"]["0"] >= 2                  # the component and a disk at least
    assert summary["significance"]["alpha"] == 0.05
    assert summary["significance"]["noise"]["level"] == pytest.approx(3.0, rel=0.1)
    assert set(summary["significance"]["threshold"]) == {"0", "1"}
    assert "lifetimes.png" in summary["plots"]
    assert "Which features are significant" in (out / "report.html").read_text()


def test_min_persistence_zero_lists_every_pair_with_p_values(tmp_path):
    out = tmp_path / "all"
    path = _disks_in_noise(tmp_path)
    assert main(["analyse", str(path), "--out", str(out), "--min-persistence", "0"]) == 0
    pairs = pd.read_csv(out / "pairs.csv")
    # gudhi's cubical complex (Maria et al. 2014) gives the number of all pairs
    image = np.load(path)
    assert len(pairs) == sum(len(gudhi_intervals(image, dim)) for dim in range(image.ndim))
    finite = np.isfinite(pairs["death"])
    assert pairs.loc[finite, "p_value"].between(0, 1).all()
    assert pairs.loc[~finite, "p_value"].isna().all() and pairs.loc[~finite, "significant"].all()
    assert (pairs["p_value"] <= 0.05).sum() == (pairs["significant"] & finite).sum()


def test_distance_sweep_keeps_robust_pairs(tmp_path):
    # Stability theorem (Cohen-Steiner, Edelsbrunner & Harer 2007): robust = persistence
    # above 2 (delta + voxel diagonal); "auto" keeps exactly the pairs of the full list
    # that pass, and the full list marks them.
    from skimage.draw import disk
    rng = np.random.default_rng(4)
    mask = np.zeros((80, 80), np.uint8)
    for _ in range(12):
        mask[disk(tuple(rng.integers(5, 75, 2)), rng.uniform(1.0, 8.0), shape=mask.shape)] = 1
    np.save(tmp_path / "mask.npy", mask)
    kept, every = tmp_path / "kept", tmp_path / "every"
    result = _run("analyse", tmp_path / "mask.npy", "--out", kept, "--distance",
                  "--boundary-tolerance", "1")
    assert result.returncode == 0, result.stderr
    assert "robust of" in result.stdout
    assert main(["analyse", str(tmp_path / "mask.npy"), "--out", str(every), "--distance",
                 "--boundary-tolerance", "1", "--min-persistence", "0"]) == 0
    robust = pd.read_csv(kept / "pairs.csv")
    listed = pd.read_csv(every / "pairs.csv")
    bound = 2 * (1 + np.sqrt(2))
    assert robust["robust"].all()
    assert len(robust) == int((listed["persistence"] > bound).sum()) < len(listed)
    assert (listed["robust"] == (listed["persistence"] > bound)).all()
    summary = json.loads((kept / "summary.json").read_text())
    assert summary["robustness"]["boundary_tolerance"] == 1.0


@pytest.mark.parametrize("options, words", [
    (["--significance", "1.5"], "between 0 and 1"),
    (["--significance", "0"], "between 0 and 1"),
    (["--noise", "-2"], "positive number"),
    (["--noise-model", "poisson"], "counts of at least 0"),
    (["--boundary-tolerance", "1"], "only applies to distance sweeps"),
    (["--distance", "--noise", "2"], "would be ignored"),
    (["--distance", "--significance", "0.01"], "would be ignored"),
])
def test_bad_significance_options_give_one_sentence(tmp_path, options, words):
    image = np.random.default_rng(0).normal(0, 1, (16, 16)).astype(np.float32)
    image[0, 0] = -5
    np.save(tmp_path / "a.npy", image)
    out = tmp_path / "out"
    result = _run("analyse", tmp_path / "a.npy", "--out", out, *options)
    assert result.returncode == 2
    errors = [line for line in result.stderr.splitlines() if "error" in line]
    assert len(errors) == 1 and words in errors[0], result.stderr
    assert "Traceback" not in result.stderr
    assert not out.exists() and not [p for p in tmp_path.iterdir() if p.name.startswith(".out")]


def test_constant_image_is_refused_with_what_to_do(tmp_path):
    np.save(tmp_path / "flat.npy", np.full((16, 16), 3.0))
    out = tmp_path / "out"
    result = _run("analyse", tmp_path / "flat.npy", "--out", out)
    assert result.returncode == 2
    assert "no noise to estimate" in result.stderr and "--min-persistence 0" in result.stderr
    assert not out.exists()


def test_a_missing_voxel_size_is_said_on_the_line_and_in_the_summary(tmp_path, capsys):
    """Without a voxel size every length is in voxels; the user must be told where they
    read the numbers (common practice, no source)."""
    np.save(tmp_path / "noise.npy", np.random.default_rng(8).random((32, 32)))
    assert main(["analyse", str(tmp_path / "noise.npy"), "--out", str(tmp_path / "r")]) == 0
    assert "No voxel size was given" in capsys.readouterr().out
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert summary["voxel_size_known"] is False
    assert any("No voxel size" in caution for caution in summary["cautions"])
    np.save(tmp_path / "film.npy", np.random.default_rng(8).random((32, 32)))
    assert main(["analyse", str(tmp_path / "film.npy"), "--out", str(tmp_path / "s"),
                 "--spacing", "0.5", "--unit", "um"]) == 0
    assert "No voxel size" not in capsys.readouterr().out
    assert json.loads((tmp_path / "s" / "summary.json").read_text())["voxel_size_known"]


def test_the_remedies_of_a_refusal_name_only_options_of_their_command():
    # a refusal that tells the user to add an option the command does not have sends
    # them nowhere (common practice, no source)
    import re
    from voxtopo.cli import build_parser
    from voxtopo.engine import out_of_core_remedy
    from voxtopo.filtration import PREPARATION_REMEDY
    from voxtopo.porosity._analysis import REMEDY as PORES_REMEDY

    commands = {action.dest: action for action in build_parser()._actions
                if action.dest == "command"}
    sub = next(iter(commands.values())).choices

    def options(name):
        return {o for a in sub[name]._actions for o in a.option_strings}

    for command, remedy in (("pores", PORES_REMEDY), ("analyse", PREPARATION_REMEDY),
                            ("analyse", out_of_core_remedy(3))):
        named = set(re.findall(r"--[a-z][a-z-]*", remedy))
        assert named <= options(command), (command, named - options(command))
    assert "--out-of-core" in PORES_REMEDY
