"""The job layer: every shell runs the same job and gets the same numbers."""

import io

import numpy as np
import pandas as pd
import pytest
import tifffile

from voxtopo import batch, cli, jobs
from voxtopo.errors import InputError


def test_the_registry_refuses_an_unknown_job_in_one_sentence():
    with pytest.raises(InputError, match="not a voxtopo job"):
        jobs.get("everything")


def test_a_mask_column_pairs_each_scan_with_its_mask_as_the_cli_does(tmp_path, capsys,
                                                                      cluster_address):
    """The same scan and mask through `voxtopo pores --mask` and a batch manifest's mask
    column give the same porosity, the pore volume fraction of the mask (common practice,
    no source)."""
    rng = np.random.default_rng(3)
    gray = rng.random((24, 24)).astype(np.float32)
    yy, xx = np.indices((24, 24))
    mask = (np.hypot(yy - 12, xx - 12) < 7) | (yy == 12)
    np.save(tmp_path / "gray.npy", gray)
    np.save(tmp_path / "mask.npy", mask)
    assert cli.main(["pores", str(tmp_path / "gray.npy"), "--mask", str(tmp_path / "mask.npy"),
                     "--out", str(tmp_path / "alone")]) == 0
    alone = pd.read_json(tmp_path / "alone" / "summary.json", typ="series")
    (tmp_path / "m.csv").write_text("path,mask\ngray.npy,mask.npy\n")
    (tmp_path / "s.toml").write_text('job = "pores"\n')
    table = batch.run_batch(tmp_path / "m.csv", tmp_path / "study",
                            settings_path=tmp_path / "s.toml", scheduler=cluster_address,
                            stream=io.StringIO())
    assert table.loc[0, "status"] == "done"
    assert table.loc[0, "porosity"] == pytest.approx(mask.mean(), abs=1e-12)
    assert alone["porosity"] == pytest.approx(mask.mean(), abs=1e-12)


def test_a_mask_column_for_a_job_that_reads_no_mask_is_refused(tmp_path):
    np.save(tmp_path / "a.npy", np.eye(6))
    (tmp_path / "m.csv").write_text("path,mask\na.npy,a.npy\n")
    with pytest.raises(InputError, match="only the pores job reads it"):
        batch.run_batch(tmp_path / "m.csv", tmp_path / "out", stream=io.StringIO())
    assert not (tmp_path / "out").exists()


def test_batch_runs_the_periodicity_job_with_the_frame_interval_of_the_settings(
        tmp_path, cluster_address):
    """A cosine of period 12 frames at 0.5 s per frame has a period of 6 s (by
    construction); the spectral period of a pure cosine lies within a few percent of it
    (Perea & Harer 2015 for the sliding-window view of periodic signals)."""
    t = np.arange(120)
    stack = (100 + 50 * np.cos(2 * np.pi * t / 12.0))[:, None, None] * np.ones((1, 8, 8))
    tifffile.imwrite(tmp_path / "beat.tif", stack.astype(np.float32))
    settings = tmp_path / "s.toml"
    settings.write_text('job = "periodicity"\n[load]\naxes = "TYX"\nframe_interval = 0.5\n'
                        '[periodicity]\ntiles = 2\nsurrogates = 19\n')
    table = batch.run_batch(str(tmp_path / "beat.tif"), tmp_path / "out",
                            settings_path=settings, scheduler=cluster_address,
                            stream=io.StringIO())
    assert table.loc[0, "status"] == "done", table.loc[0].to_dict()
    regions = pd.read_csv(tmp_path / "out" / "scans" / "beat" / "regions.csv")
    assert np.allclose(regions["period"], 6.0, rtol=0.05)


def test_time_keys_for_another_job_are_refused(tmp_path):
    settings = tmp_path / "s.toml"
    settings.write_text('[load]\nframe_interval = 0.5\n')
    with pytest.raises(InputError, match="only matter to the periodicity job"):
        batch.read_settings(settings)


def test_infinity_is_written_one_way_in_every_summary(tmp_path):
    """JSON has no infinity (RFC 8259, section 6: Infinity and NaN are not permitted); every
    summary writes a class that never dies as "inf" and reads it back as a number."""
    import json

    from voxtopo.io.results import read_summary

    yy, xx = np.indices((20, 20))
    ring = (np.abs(np.hypot(yy - 10, xx - 10) - 6) < 1.5).astype(np.float32)
    np.save(tmp_path / "ring.npy", 1 - ring)
    np.save(tmp_path / "mask.npy", ring.astype(bool))
    assert cli.main(["analyse", str(tmp_path / "ring.npy"), "--out", str(tmp_path / "a"),
                     "--min-persistence", "0"]) == 0
    assert cli.main(["pores", str(tmp_path / "mask.npy"), "--out", str(tmp_path / "p")]) == 0
    for folder in ("a", "p"):
        text = (tmp_path / folder / "summary.json").read_text()
        json.loads(text, parse_constant=lambda token: pytest.fail(f"{token} in {folder}"))
    text = (tmp_path / "a" / "summary.json").read_text()
    assert '"death": "inf"' in text
    essential = [row for row in read_summary(tmp_path / "a")["most_persistent"]["0"]
                 if row["death"] == float("inf")]
    assert len(essential) == 1


@pytest.mark.parametrize("shape, spacing", [((22, 26), "0.5,2"), ((10, 12, 14), "2,0.5,1")])
def test_every_table_a_job_writes_gives_the_unit_of_every_column(tmp_path, shape, spacing):
    """Every CSV of an analyse and a pores folder has a unit for each of its columns in
    summary.json, positions in the scan's unit are the voxel indices times the voxel
    size of their axis, and a 2D size is an area (common practice, no source)."""
    import json

    rng = np.random.default_rng(8)
    gray = rng.random(shape).astype(np.float32)
    np.save(tmp_path / "gray.npy", gray)
    np.save(tmp_path / "mask.npy", gray > 0.55)
    assert cli.main(["analyse", str(tmp_path / "gray.npy"), "--out", str(tmp_path / "a"),
                     "--min-persistence", "0", "--spacing", spacing, "--unit", "um"]) == 0
    assert cli.main(["pores", str(tmp_path / "mask.npy"), "--out", str(tmp_path / "p"),
                     "--spacing", spacing, "--unit", "um"]) == 0
    step = np.array([float(v) for v in spacing.split(",")])
    axes = "zyx"[3 - len(shape):]
    for folder in ("a", "p"):
        units = json.loads((tmp_path / folder / "summary.json").read_text())["columns"]
        tables = sorted(p.name for p in (tmp_path / folder).glob("*.csv"))
        assert sorted(units) == tables, folder
        for name in tables:
            table = pd.read_csv(tmp_path / folder / name)
            assert list(units[name]) == list(table.columns), (folder, name)
        pairs = pd.read_csv(tmp_path / folder / "pairs.csv")
        for which in ("birth", "death"):
            index = pairs[[f"{which}_voxel_{a}" for a in axes]].to_numpy(dtype=float)
            np.testing.assert_allclose(pairs[[f"{which}_{a}" for a in axes]], index * step)
            assert {units["pairs.csv"][f"{which}_{a}"] for a in axes} == {"um"}
            assert {units["pairs.csv"][f"{which}_voxel_{a}"] for a in axes} == {"voxel index"}
    pores = units["pores.csv"]
    if len(shape) == 2:
        assert pores["body_area"] == "um^2" and "body_volume" not in pores
    else:
        assert pores["body_volume"] == "um^3"
    analysed = json.loads((tmp_path / "a" / "summary.json").read_text())["columns"]
    assert analysed["pairs.csv"]["birth"] == "gray value"
    assert units["pairs.csv"]["birth"] == "um"      # a distance sweep is in the scan's unit


# --- a region of interest for analyse ---------------------------------------------------------
def _disk_and_ring(shape=(30, 30)):
    """A dark disk in the left half and a dark ring in the right half of a bright field."""
    yy, xx = np.indices(shape)
    image = np.ones(shape)
    image[np.hypot(yy - 15, xx - 7) <= 4] = 0.0
    radius = np.hypot(yy - 15, xx - 22)
    image[(radius >= 4) & (radius <= 6)] = 0.0
    left = np.zeros(shape, bool)
    left[:, :15] = True
    return image, left


def test_analyse_with_a_region_sweeps_only_the_region(tmp_path, capsys):
    """In the left half alone there is one dark disk: one component that never dies and no
    loop (Hatcher 2002: a disk has Betti numbers (1, 0)); the whole field also has the ring
    of the right half, a second component and a loop (an annulus: (1, 1))."""
    import json

    image, left = _disk_and_ring()
    np.save(tmp_path / "field.npy", image)
    np.save(tmp_path / "left.npy", left.astype(np.uint8))
    common = ["--min-persistence", "0", "--spacing", "0.5,2", "--unit", "um"]
    assert cli.main(["analyse", str(tmp_path / "field.npy"), "--out", str(tmp_path / "all"),
                     *common]) == 0
    assert cli.main(["analyse", str(tmp_path / "field.npy"), "--out", str(tmp_path / "left"),
                     "--roi", str(tmp_path / "left.npy"), *common]) == 0
    line = capsys.readouterr().out
    assert "within the region of interest (450 voxels, area 450 um^2)" in line
    whole = pd.read_csv(tmp_path / "all" / "pairs.csv")
    assert sorted(whole["dim"]) == [0, 0, 1]
    pairs = pd.read_csv(tmp_path / "left" / "pairs.csv")
    assert list(pairs["dim"]) == [0] and pairs["death"].iloc[0] == np.inf
    assert pairs["birth_voxel_x"].iloc[0] < 15
    assert pairs["birth_x"].iloc[0] == pairs["birth_voxel_x"].iloc[0] * 2.0
    summary = json.loads((tmp_path / "left" / "summary.json").read_text())
    region = summary["region_of_interest"]
    assert (region["voxels"], region["area"], region["unit"]) == (450, 450.0, "um^2")
    assert "within the region of interest" in summary["counted"]
    report = (tmp_path / "left" / "report.html").read_text()
    assert "Region of interest" in report and "450" in report
    assert "Columns of pairs.csv and their units" in report


def test_invalid_voxels_outside_the_region_are_never_swept(tmp_path):
    """A scan masked with NaN outside its region gives the region's diagram, the same as
    the scan with any finite values there (outside voxels are not part of the complex);
    one NaN inside is still refused in one sentence."""
    image, left = _disk_and_ring()
    masked = np.where(left, image, np.nan)
    np.save(tmp_path / "masked.npy", masked)
    np.save(tmp_path / "field.npy", image)
    np.save(tmp_path / "left.npy", left)
    for name in ("masked", "field"):
        assert cli.main(["analyse", str(tmp_path / f"{name}.npy"), "--out",
                         str(tmp_path / f"out-{name}"), "--roi", str(tmp_path / "left.npy"),
                         "--min-persistence", "0"]) == 0
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "out-masked" / "pairs.csv"),
                                  pd.read_csv(tmp_path / "out-field" / "pairs.csv"))
    masked[3, 3] = np.nan
    np.save(tmp_path / "masked.npy", masked)
    assert cli.main(["analyse", str(tmp_path / "masked.npy"), "--out", str(tmp_path / "bad"),
                     "--roi", str(tmp_path / "left.npy"), "--min-persistence", "0"]) == 2
    assert not (tmp_path / "bad").exists()


def test_significance_within_a_region_ignores_the_noise_outside_it(tmp_path):
    """Noise of level 1 inside the region and 30 outside: the noise is read off the region
    (Donoho & Johnstone 1994: the MAD of differences; level 1 by construction), so a dark
    disk 8 levels deep inside is significant and nothing outside is reported."""
    import json

    rng = np.random.default_rng(4)
    shape = (40, 40)
    yy, xx = np.indices(shape)
    left = xx < 20
    image = rng.normal(0, 1.0, shape) * np.where(left, 1.0, 30.0)
    image[np.hypot(yy - 20, xx - 9) <= 4] -= 8.0
    np.save(tmp_path / "noisy.npy", image.astype(np.float32))
    np.save(tmp_path / "left.npy", left)
    assert cli.main(["analyse", str(tmp_path / "noisy.npy"), "--out", str(tmp_path / "r"),
                     "--roi", str(tmp_path / "left.npy")]) == 0
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert summary["significance"]["noise"]["level"] == pytest.approx(1.0, rel=0.15)
    pairs = pd.read_csv(tmp_path / "r" / "pairs.csv")
    assert (pairs["birth_voxel_x"] < 20).all()
    births = pairs[["birth_voxel_y", "birth_voxel_x"]].to_numpy(dtype=float)
    assert (np.hypot(births[:, 0] - 20, births[:, 1] - 9) <= 4).sum() == 1


@pytest.mark.parametrize("roi, words", [
    (np.ones((5, 5), bool), "has shape (5, 5) but the scan"),
    (np.arange(36).reshape(6, 6) % 3, "is not a binary mask"),
    (np.zeros((6, 6), np.uint8), "holds no voxel of the sample"),
])
def test_a_bad_region_of_interest_is_refused_in_one_sentence(tmp_path, capsys, roi, words):
    np.save(tmp_path / "scan.npy", np.random.default_rng(1).random((6, 6)))
    np.save(tmp_path / "roi.npy", roi)
    assert cli.main(["analyse", str(tmp_path / "scan.npy"), "--out", str(tmp_path / "out"),
                     "--roi", str(tmp_path / "roi.npy"), "--min-persistence", "0"]) == 2
    error = capsys.readouterr().err
    assert words in error and "Traceback" not in error and error.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_a_region_of_interest_with_a_distance_sweep_points_to_pores(tmp_path, capsys):
    np.save(tmp_path / "mask.npy", np.eye(6, dtype=bool))
    assert cli.main(["analyse", str(tmp_path / "mask.npy"), "--out", str(tmp_path / "out"),
                     "--distance", "--roi", str(tmp_path / "mask.npy")]) == 2
    assert "voxtopo pores --roi" in capsys.readouterr().err


def test_a_roi_column_pairs_each_scan_with_its_region_for_analyse(tmp_path, capsys,
                                                                  cluster_address):
    """A manifest's roi column gives the analyse job of each scan its own region, as
    `voxtopo analyse --roi` does: the same pairs (the left half holds one disk: one
    component that never dies, Hatcher 2002), and a roi for the patches job is refused."""
    image, left = _disk_and_ring()
    np.save(tmp_path / "field.npy", image)
    np.save(tmp_path / "left.npy", left)
    assert cli.main(["analyse", str(tmp_path / "field.npy"), "--out", str(tmp_path / "alone"),
                     "--roi", str(tmp_path / "left.npy"), "--min-persistence", "0"]) == 0
    (tmp_path / "m.csv").write_text("path,roi,name\nfield.npy,left.npy,left\n"
                                    "field.npy,,whole\n")
    (tmp_path / "s.toml").write_text('job = "analyse"\n[analyse]\nmin_persistence = 0\n')
    table = batch.run_batch(tmp_path / "m.csv", tmp_path / "study",
                            settings_path=tmp_path / "s.toml", scheduler=cluster_address,
                            stream=io.StringIO())
    assert list(table["status"]) == ["done", "done"]
    assert table.loc[0, "region_of_interest_voxels"] == left.sum()
    assert not any(c.startswith("columns") for c in table.columns)   # units stay in the json
    alone = pd.read_csv(tmp_path / "alone" / "pairs.csv")
    in_batch = pd.read_csv(tmp_path / "study" / "scans" / "left" / "pairs.csv")
    pd.testing.assert_frame_equal(in_batch, alone)
    assert list(in_batch["dim"]) == [0]
    whole = pd.read_csv(tmp_path / "study" / "scans" / "whole" / "pairs.csv")
    assert sorted(whole["dim"]) == [0, 0, 1]
    (tmp_path / "p.toml").write_text('job = "patches"\n')
    with pytest.raises(InputError, match="only the analyse and pores jobs read it"):
        batch.run_batch(tmp_path / "m.csv", tmp_path / "patches", stream=io.StringIO(),
                        settings_path=tmp_path / "p.toml")


def test_a_significance_level_for_a_distance_sweep_is_refused_in_every_shell(tmp_path):
    """RULES: an option that would be ignored is refused in one sentence (common practice,
    no source); the job's options refuse it, so a batch settings file is refused as the
    command line is."""
    with pytest.raises(InputError, match="would be ignored with --distance"):
        jobs.get("analyse").Options(distance=True, significance=0.01)
    settings = tmp_path / "settings.toml"
    settings.write_text('job = "analyse"\n[analyse]\ndistance = true\nsignificance = 0.01\n')
    with pytest.raises(InputError, match="would be ignored with --distance"):
        batch.read_settings(settings)


def test_analysis_packages_load_no_matplotlib():
    """DESIGN.md layering (project rule, no source): figures live in report/; every module
    of the analysis packages imports without matplotlib."""
    import subprocess
    import sys

    code = ("import importlib, pkgutil, sys\n"
            "import voxtopo.patches, voxtopo.periodicity, voxtopo.porosity\n"
            "for package in (voxtopo.patches, voxtopo.periodicity, voxtopo.porosity):\n"
            "    for module in pkgutil.iter_modules(package.__path__):\n"
            "        importlib.import_module(f'{package.__name__}.{module.name}')\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))")
    found = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           check=True)
    assert found.stdout.strip() == "[]"


def test_a_time_point_for_the_periodicity_job_is_refused_not_dropped(tmp_path):
    """RULES: an option that would be ignored is refused in one sentence (common practice,
    no source): the periodicity job reads every frame, so a batch's timepoint cannot apply;
    the other jobs read the frame it names."""
    stack = np.arange(3 * 4 * 5, dtype=np.float32).reshape(3, 4, 5)
    path = tmp_path / "lapse.tif"
    tifffile.imwrite(path, stack, imagej=True, metadata={"axes": "TYX"})
    with pytest.raises(InputError, match="leave the timepoint out"):
        jobs.read_input("periodicity", path, {"timepoint": 1})
    assert jobs.read_input("periodicity", path).frames == 3
    np.testing.assert_array_equal(jobs.read_input("analyse", path, {"timepoint": 1}).data,
                                  stack[1])
