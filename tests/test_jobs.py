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
    with pytest.raises(InputError, match="only the pores job reads masks"):
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
