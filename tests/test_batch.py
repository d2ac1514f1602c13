"""Batch runs on a real dask.distributed LocalCluster (processes, loopback, 2 workers)."""

import io
import json
import shutil

import gudhi
import numpy as np
import pandas as pd
import pytest
import zarr
from reference import gudhi_intervals
from scipy import ndimage

from voxtopo import batch, cli
from voxtopo.errors import InputError
from voxtopo.io.results import read_summary
from voxtopo.jobs.analyse import AnalysisOptions, analyse
from voxtopo.scan import Scan


def _textures(folder, count=4, shape=(28, 28)):
    """Generated scans: smoothed noise of two correlation lengths."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(42)
    paths = []
    for i in range(count):
        image = ndimage.gaussian_filter(rng.standard_normal(shape), 1.0 + 2.0 * (i % 2))
        path = folder / f"scan_{i}.npy"
        np.save(path, image.astype(np.float32))
        paths.append(path)
    return paths


def _manifest(path, rows):
    pd.DataFrame(rows).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def finished_batch(tmp_path_factory, cluster_address):
    """A batch of four good scans, one truncated file and one missing file."""
    root = tmp_path_factory.mktemp("batch")
    paths = _textures(root / "in")
    truncated = root / "in" / "truncated.npy"
    truncated.write_bytes(paths[0].read_bytes()[:100])
    rows = [{"path": f"in/{p.name}", "spacing": "0.5,0.5" if i == 0 else "", "unit": "um",
             "group": "fine" if i % 2 == 0 else "coarse", "operator": f"op{i}"}
            for i, p in enumerate(paths)]
    rows.insert(2, {"path": "in/truncated.npy", "spacing": "", "unit": "", "group": "fine",
                    "operator": "op9"})
    rows.append({"path": "in/missing.npy", "spacing": "", "unit": "", "group": "coarse",
                 "operator": "op8"})
    manifest = _manifest(root / "manifest.csv", rows)
    stream = io.StringIO()
    table = batch.run_batch(manifest, root / "out", scheduler=cluster_address, stream=stream)
    return root, paths, table, stream.getvalue()


def test_summary_table_equals_analysing_each_scan_alone(finished_batch, tmp_path):
    root, paths, table, _ = finished_batch
    summary = pd.read_csv(root / "out" / "summary.csv")
    done = summary[summary["status"] == "done"].set_index("name")
    assert sorted(done.index) == [f"scan_{i}" for i in range(4)]
    for i, path in enumerate(paths):
        name = f"scan_{i}"
        alone = tmp_path / name
        load = {"spacing": (0.5, 0.5)} if i == 0 else {}
        load["unit"] = "um"
        diagram = analyse(path, alone, AnalysisOptions(), load_options=load)
        mine = json.loads((alone / "summary.json").read_text())
        for d in (0, 1):
            # the default counts significant features, and its column says so
            assert done.loc[name, f"significant_dim{d}"] == mine["counts"][str(d)]
            assert done.loc[name, f"essential_dim{d}"] == mine["essential"][str(d)]
            # and all pairs computed equal gudhi's own count on the same array (external
            # reference, Maria et al. 2014)
            assert (done.loc[name, f"pairs_computed_dim{d}"] == mine["pairs_computed"][str(d)]
                    == len(gudhi_intervals(np.load(path), d)))
        assert done.loc[name, "counted"] == mine["counted"]
        assert done.loc[name, "counted"].startswith("significant features (family-wise, "
                                                    "alpha 0.05")
        assert done.loc[name, "scan_spacing"] == ("0.5,0.5" if i == 0 else "1.0,1.0")
        pd.testing.assert_frame_equal(pd.read_csv(root / "out" / "scans" / name / "pairs.csv"),
                                      pd.read_csv(alone / "pairs.csv"))
        assert len(diagram) == len(pd.read_csv(alone / "pairs.csv"))
    # manifest columns are kept, in manifest order, and the Parquet copy holds the same
    assert summary["operator"].tolist() == ["op0", "op1", "op9", "op2", "op3", "op8"]
    parquet = pd.read_parquet(root / "out" / "summary.parquet")
    assert parquet["name"].tolist() == summary["name"].tolist()
    assert parquet["significant_dim0"].tolist()[:2] == summary["significant_dim0"].tolist()[:2]
    assert not any(c.startswith("pairs_dim") for c in summary.columns)
    # the batch report says what the counts count: the method and the level
    report = (root / "out" / "report.html").read_text()
    assert "significant features (family-wise, alpha 0.05" in report


def test_summary_columns_say_all_pairs_only_when_all_pairs_were_listed(tmp_path):
    """Every count says what it counts (common practice, no source): a scan analysed with
    --min-persistence 0 lists every pair, so its counts are pairs_dimN and equal the pairs
    gudhi (Maria et al. 2014) finds; the default counts significant_dimN; a distance sweep
    robust_dimN."""
    image = np.random.default_rng(3).random((12, 14))
    analyse(Scan(image), tmp_path / "all", AnalysisOptions(min_persistence=0))
    analyse(Scan(image), tmp_path / "auto", AnalysisOptions())
    analyse(Scan((image > 0.5).astype(np.uint8)), tmp_path / "distance",
            AnalysisOptions(distance=True))
    listed = batch._key_numbers(read_summary(tmp_path / "all"))
    assert [listed[f"pairs_dim{d}"] for d in (0, 1)] == [
        len(gudhi_intervals(image, d)) for d in (0, 1)]
    assert listed["pairs_computed_dim1"] == listed["pairs_dim1"]
    tested = batch._key_numbers(read_summary(tmp_path / "auto"))
    assert "pairs_dim0" not in tested and tested["significant_dim0"] >= 1
    robust = batch._key_numbers(read_summary(tmp_path / "distance"))
    assert "pairs_dim0" not in robust and "robust_dim0" in robust
    assert robust["robust_dim0"] <= robust["pairs_computed_dim0"]


def test_failing_scans_are_recorded_and_the_rest_complete(finished_batch):
    root, _, table, log = finished_batch
    failures = pd.read_csv(root / "out" / "failures.csv").set_index("name")
    assert sorted(failures.index) == ["missing", "truncated"]
    assert "truncated.npy" in failures.loc["truncated", "message"]
    assert "missing.npy" in failures.loc["missing", "message"]
    assert "Traceback" not in failures.to_string()
    for name in ("missing", "truncated"):
        assert not (root / "out" / "scans" / name).exists()
        assert not list((root / "out" / "scans").glob(f".{name}.*"))
    assert all((root / "out" / "scans" / f"scan_{i}" / "report.html").is_file()
               for i in range(4))
    assert "4 done, 2 failed, 0 left" in log
    assert "dashboard at" in log
    page = (root / "out" / "report.html").read_text()
    assert "Scans that failed" in page and "not a medical diagnosis" in page
    assert 'href="scans/scan_0/report.html"' in page


def test_rerun_after_an_interruption_redoes_only_what_was_missing(finished_batch,
                                                                   cluster_address):
    root, _, _, _ = finished_batch
    out = root / "out"
    scans = out / "scans"
    kept = {n: (scans / n / "summary.json").stat().st_mtime_ns for n in ("scan_0", "scan_3")}
    shutil.rmtree(scans / "scan_1")                              # never finished
    (scans / ".scan_1.partial-x1y2z3").mkdir()                   # its half-made temp folder
    (scans / ".scan_1.partial-x1y2z3" / "pairs.csv").write_text("dim,birth\n0,")
    (scans / "scan_2" / "summary.json").unlink()                 # a half-made folder
    stream = io.StringIO()
    table = batch.run_batch(root / "manifest.csv", out, scheduler=cluster_address,
                            stream=stream)
    log = stream.getvalue()
    assert "6 scans, 2 already complete, 4 to run" in log
    assert "scan_2 was left half-made; redoing it" in log
    assert "scan_1 was left half-made; redoing it" in log
    for name, stamp in kept.items():
        assert (scans / name / "summary.json").stat().st_mtime_ns == stamp
    for name in ("scan_1", "scan_2"):
        assert (scans / name / "summary.json").is_file()
    assert not list(scans.glob(".*"))
    assert (table["status"] == "done").sum() == 4
    # the two broken inputs are tried again and still fail
    assert "2 done, 2 failed, 0 left (+2 done earlier)" in log


def test_settings_file_chooses_the_job_and_is_saved(tmp_path, cluster_address):
    paths = _textures(tmp_path / "in", count=2)
    settings = tmp_path / "upward.yaml"
    settings.write_text("job: analyse\nanalyse:\n  superlevel: true\n  neighbourhood: 4\n"
                        "load:\n  unit: mm\n")
    out = tmp_path / "out"
    batch.run_batch(str(tmp_path / "in" / "*.npy"), out, settings_path=settings,
                    scheduler=cluster_address, stream=io.StringIO())
    assert (out / "settings.yaml").read_text() == settings.read_text()
    for path in paths:
        summary = json.loads((out / "scans" / path.stem / "summary.json").read_text())
        assert summary["diagram"]["superlevel"] is True
        assert summary["diagram"]["neighbourhood"] == 4
        assert summary["scan"]["unit"] == "mm"
    other = tmp_path / "other.toml"
    other.write_text('job = "analyse"\n[analyse]\nsuperlevel = false\n')
    with pytest.raises(InputError, match="differ from these"):
        batch.run_batch(str(tmp_path / "in" / "*.npy"), out, settings_path=other,
                        scheduler=cluster_address, stream=io.StringIO())


def test_out_of_core_scans_run_their_chunks_on_the_cluster(tmp_path, cluster_address):
    rng = np.random.default_rng(7)
    volume = np.round(ndimage.gaussian_filter(rng.standard_normal((20, 20, 20)), 1.5), 2)
    store = zarr.create_array(str(tmp_path / "disc.zarr"), shape=volume.shape,
                              chunks=(8, 8, 8), dtype="f8")
    store[...] = volume
    settings = tmp_path / "settings.toml"
    settings.write_text('[batch]\nout_of_core = true\nchunks = [7, 10, 20]\n')
    manifest = _manifest(tmp_path / "m.csv", [{"path": "disc.zarr", "group": "g"}])
    batch.run_batch(manifest, tmp_path / "out", settings_path=settings,
                    scheduler=cluster_address, stream=io.StringIO())
    pairs = pd.read_csv(tmp_path / "out" / "scans" / "disc" / "pairs.csv")
    # gudhi (Maria et al. 2014) reference diagrams of dimensions 0 and 2
    for dim in (0, 2):
        expected = sorted(map(tuple, np.round(gudhi_intervals(volume, dim), 9)))
        got = pairs[pairs["dim"] == dim][["birth", "death"]].to_numpy()
        assert sorted(map(tuple, np.round(got, 9))) == expected
    summary = json.loads((tmp_path / "out" / "scans" / "disc" / "summary.json").read_text())
    assert any("out of core" in note for note in summary["diagram"]["notes"])
    table = pd.read_csv(tmp_path / "out" / "summary.csv")
    assert table.loc[0, "pairs_dim0"] == len(pairs[pairs["dim"] == 0])
    assert pd.isna(table.loc[0, "pairs_dim1"])     # not computed, so not reported as zero


def test_cli_batch_then_compare_by_group(finished_batch, tmp_path, capsys, cluster_address):
    root, paths, _, _ = finished_batch
    code = cli.main(["batch", str(root / "manifest.csv"), "--out", str(root / "out"),
                     "--scheduler", cluster_address])
    assert code == 1            # two scans of the manifest cannot be read
    assert "4 scans complete, 2 failed" in capsys.readouterr().out
    code = cli.main(["compare", str(root / "out"), "--out", str(tmp_path / "cmp"),
                     "--dims", "0", "--permutations", "99"])
    assert code == 0
    summary = json.loads((tmp_path / "cmp" / "summary.json").read_text())
    assert sorted(d["group"] for d in summary["diagrams"]) == ["coarse", "coarse", "fine",
                                                               "fine"]
    distances = pd.read_csv(tmp_path / "cmp" / "distances.csv")
    row = distances[(distances["first"] == "scan_0") & (distances["second"] == "scan_1")]
    # gudhi.bottleneck_distance (Maria et al. 2014) on gudhi's own dimension-0 diagrams
    reference = [gudhi_intervals(np.load(path), 0) for path in paths[:2]]
    assert row["bottleneck_dim0"].iloc[0] == pytest.approx(
        gudhi.bottleneck_distance(*reference), rel=1e-6)


def test_plan_gives_each_worker_room_for_the_largest_scan():
    gib = 2**30
    # small scans: every core gets a worker with the 2 GiB floor
    assert batch.plan_workers([1 * gib], available=40 * gib, cores=4) == (4, 2 * gib)
    # a 10 GiB scan: 12.5 GiB per worker, and 80 % of 30 GiB holds only one of them
    count, limit = batch.plan_workers([10 * gib], available=30 * gib, cores=4)
    assert (count, limit) == (1, int(12.5 * gib))
    assert batch.plan_workers([gib], workers=3, memory_per_worker=4 * gib,
                              available=100 * gib, cores=8) == (3, 4 * gib)


def test_bad_manifests_and_settings_are_refused_in_one_sentence(tmp_path, capsys):
    with pytest.raises(InputError, match="no scans match"):
        batch.read_manifest(tmp_path / "nothing-*.tif")
    bad = tmp_path / "bad.csv"
    bad.write_text("file,group\na.npy,x\n")
    with pytest.raises(InputError, match="no 'path' column"):
        batch.read_manifest(bad)
    spacing = tmp_path / "spacing.csv"
    spacing.write_text('path,spacing\na.npy,"2,x,2"\n')
    with pytest.raises(InputError, match="spacing"):
        batch.read_manifest(spacing)
    broken = tmp_path / "broken.toml"
    broken.write_text("job = \n")
    with pytest.raises(InputError, match="not valid TOML"):
        batch.read_settings(broken)
    unknown = tmp_path / "unknown.toml"
    unknown.write_text("[analyse]\nsmoothness = 2\n")
    with pytest.raises(InputError, match="smoothness"):
        batch.read_settings(unknown)
    job = tmp_path / "job.toml"
    job.write_text('job = "everything"\n')
    with pytest.raises(InputError, match="everything"):
        batch.read_settings(job)
    assert cli.main(["batch", str(bad), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert not (tmp_path / "out").exists()


def test_settings_choose_the_pores_job(tmp_path, cluster_address):
    folder = tmp_path / "in"
    folder.mkdir()
    masks = []
    for i, radius in enumerate((4, 7)):
        yy, xx = np.indices((30, 30))
        mask = np.hypot(yy - 15, xx - 15) < radius
        mask[15, :] = True                       # a channel across the disc
        np.save(folder / f"disc_{i}.npy", mask)
        masks.append(mask)
    settings = tmp_path / "pores.toml"
    settings.write_text('job = "pores"\n[load]\nspacing = [2.0, 2.0]\nunit = "um"\n')
    table = batch.run_batch(str(folder / "*.npy"), tmp_path / "out", settings_path=settings,
                            scheduler=cluster_address, stream=io.StringIO())
    assert (table["status"] == "done").all()
    for i, mask in enumerate(masks):
        # porosity is the pore volume fraction of the scan (common practice, no source)
        assert table.loc[i, "porosity"] == pytest.approx(mask.mean(), abs=1e-9)
        assert (tmp_path / "out" / "scans" / f"disc_{i}" / "pores.csv").is_file()
    assert "counts_pores" in table.columns and "pairs_dimpores" not in table.columns
    page = (tmp_path / "out" / "scans" / "disc_0" / "report.html").read_text()
    assert "<h2>Counts</h2>" in page and "not a medical diagnosis" in page


def test_each_scan_is_planned_with_its_job_s_own_plan():
    # The batch sizes its workers from the plans the jobs check themselves before they
    # start (porosity.estimate, analyse's preparation plan), which bench_pores.py and
    # bench_memory.py hold within 25 % of measured peaks; a cruder plan would give a
    # 512^3 pores study one worker where two fit.
    from voxtopo import porosity
    from voxtopo.engine.chunked import WORKER_BASELINE_BYTES
    from voxtopo.jobs.analyse import AnalysisOptions, preparation_plan
    from voxtopo.jobs.pores import PoresOptions
    from voxtopo.scan import Scan

    shape = (512, 512, 512)
    pores = batch.scan_bytes(shape, "uint8", "pores", PoresOptions(neighbourhood=6))
    assert pores == porosity.estimate(shape, np.uint8, neighbourhood=6)
    assert batch.scan_bytes(shape, "uint8", "pores", roi=True) == porosity.estimate(
        shape, np.uint8, roi=True) > porosity.estimate(shape, np.uint8)
    options = AnalysisOptions(sigma=1.0)
    probe = Scan(np.broadcast_to(np.zeros((), np.uint16), shape))
    assert batch.scan_bytes(shape, "uint16", "analyse", options) == (
        WORKER_BASELINE_BYTES + 2 * 512 ** 3 + max(n for _, n in preparation_plan(probe,
                                                                                 options)))
    # measured: a 512^3 uint8 pores run peaks at 2.8 GB (bench_pores.py): two such
    # workers fit in 80 % of 22 GB
    count, limit = batch.plan_workers([pores], available=22 * 10**9, cores=2)
    assert count == 2 and limit >= 2.8e9


def test_a_local_cluster_leaves_numba_of_the_calling_process_working(tmp_path):
    # numba re-reads NUMBA_NUM_THREADS at each compilation and refuses to go on ("Cannot
    # set NUMBA_NUM_THREADS to a different value once the threads have been launched")
    # when it differs from the threads its parallel loops already launched (numba's
    # config module, from memory). The workers' one thread must not be set in this
    # process's environment, or a notebook that ran an in-memory analysis and then a
    # local out-of-core one could no longer compile a kernel.
    import os

    import numba

    @numba.njit(parallel=True)
    def total(values):
        out = 0.0
        for i in numba.prange(values.shape[0]):
            out += values[i]
        return out

    assert total(np.ones(1000)) == 1000.0   # numba's threads are launched here
    before = dict(os.environ)
    client, cluster = batch.local_cluster(1, 2_000_000_000, tmp_path / "scratch",
                                          dashboard=False)
    try:
        assert dict(os.environ) == before
        assert numba.njit(lambda x: x + 1)(1) == 2   # a new compilation still works
        assert client.run(lambda: __import__("numba").config.NUMBA_NUM_THREADS) \
            == {address: 1 for address in client.scheduler_info()["workers"]}
    finally:
        client.close()
        cluster.close()


def test_local_cluster_workers_take_one_numba_thread_and_keep_glibc_s_memory_reuse(
        tmp_path, monkeypatch):
    # The settings a local cluster's workers start with (batch runs and local out-of-core
    # runs alike). glibc's mallopt(3) manual: setting M_TRIM_THRESHOLD (the environment
    # variable MALLOC_TRIM_THRESHOLD_) turns off the dynamic mmap threshold, so freed
    # large blocks are no longer reused, and MALLOC_ARENA_MAX caps the arenas that
    # threads allocate from (from memory); numba's documentation of
    # NUMBA_NUM_THREADS: the threads its parallel loops use (from memory).
    import os

    # what a cluster started before with dask's defaults leaves in this process (its
    # nanny writes its pre-spawn settings here), and a setting of the user's own
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    monkeypatch.setenv("MALLOC_ARENA_MAX", "8")
    client, cluster = batch.local_cluster(1, 2_000_000_000, tmp_path / "scratch",
                                          dashboard=False)
    try:
        def settings():
            import numba
            return (os.environ.get("MALLOC_TRIM_THRESHOLD_"), os.environ.get("MALLOC_ARENA_MAX"),
                    numba.config.NUMBA_NUM_THREADS)

        assert list(client.run(settings).values()) == [(None, "2", 1)]
    finally:
        client.close()
        cluster.close()
