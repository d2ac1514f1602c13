"""A user's data is never lost: outputs that would touch inputs are refused, manifest names
never leave the batch folder, --force replaces only voxtopo's own folders, and runs that
stop early leave nothing half-written.

Every data-loss case checks that the inputs and unrelated files are byte-for-byte intact.
"""

import errno
import hashlib
import io
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import zarr
from hypothesis import given, settings
from hypothesis import strategies as st

from voxtopo import batch, cli
from voxtopo.errors import InputError
from voxtopo.io.results import (MARKER, result_folder, safe_folder_name, unique_folder_names,
                                write_atomically)


def _tree(folder: Path) -> dict:
    """Every file under ``folder`` with the SHA-256 of its bytes."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _run(*args, cwd=None, **kwargs):
    return subprocess.run([sys.executable, "-m", "voxtopo.cli", *map(str, args)],
                          capture_output=True, text=True, cwd=cwd, **kwargs)


def _one_sentence(stderr: str) -> bool:
    return stderr.count("\n") == 1 and "Traceback" not in stderr and "error:" in stderr


@pytest.fixture
def study(tmp_path):
    """The reproduction of the issue: three scans, a protocol and a manifest whose last
    row is named '..'."""
    folder = tmp_path / "study"
    folder.mkdir()
    rng = np.random.default_rng(0)
    for name in "abc":
        np.save(folder / f"{name}.npy", rng.random((12, 12)))
    (folder / "protocol.docx").write_bytes(b"PK\x03\x04 the lab's protocol")
    (folder / "manifest.csv").write_text("path,name\na.npy,\nb.npy,\nc.npy,..\n")
    return folder


def test_batch_out_set_to_the_study_folder_is_refused_and_nothing_changes(study):
    before = _tree(study)
    result = _run("batch", study / "manifest.csv", "--out", study)
    assert result.returncode == 2 and _one_sentence(result.stderr), result.stderr
    assert "holds the input" in result.stderr
    assert _tree(study) == before


def test_batch_names_dot_and_dotdot_stay_inside_scans(study, tmp_path, cluster_address):
    (study / "manifest.csv").write_text("path,name\na.npy,.\nb.npy,\nc.npy,..\n")
    before = _tree(study)
    out = tmp_path / "results" / "study"
    table = batch.run_batch(study / "manifest.csv", out, scheduler=cluster_address,
                            stream=io.StringIO())
    assert (table["status"] == "done").all()
    folders = sorted(p.name for p in (out / "scans").iterdir() if not p.name.startswith("."))
    assert folders == ["a", "b", "c"]          # a bad name falls back to the file's name
    assert _tree(study) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results", "study"]


@pytest.mark.parametrize("kind", ["npy", "slices", "zarr"])
def test_force_with_out_set_to_the_input_is_refused(tmp_path, kind):
    data = tmp_path / "data"
    data.mkdir()
    image = np.arange(64, dtype=np.float32).reshape(8, 8)
    if kind == "npy":
        np.save(data / "scan.npy", image)
        source = data / "scan.npy"
    elif kind == "slices":
        import tifffile
        for i in range(3):
            tifffile.imwrite(data / f"s{i}.tif", image + i)
        source = data
    else:
        zarr.save_array(str(data / "scan.zarr"), np.stack([image] * 3))
        source = data / "scan.zarr"
    (data / "notes.txt").write_text("unrelated")
    before = _tree(data)
    for out in {data, source, source / "inner"}:
        result = _run("analyse", source, "--out", out, "--force")
        assert result.returncode == 2 and _one_sentence(result.stderr), (out, result.stderr)
        assert _tree(data) == before


def test_force_replaces_only_a_folder_voxtopo_wrote(tmp_path):
    np.save(tmp_path / "a.npy", np.random.default_rng(4).random((24, 24)))
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.tex").write_text("years of work")
    result = _run("analyse", tmp_path / "a.npy", "--out", mine, "--force")
    assert result.returncode == 2 and "voxtopo wrote" in result.stderr
    assert (mine / "thesis.tex").read_text() == "years of work"
    ours = tmp_path / "ours"
    assert _run("analyse", tmp_path / "a.npy", "--out", ours).returncode == 0
    assert (ours / MARKER).is_file()
    assert _run("analyse", tmp_path / "a.npy", "--out", ours, "--force").returncode == 0


def test_batch_into_an_existing_folder_of_the_users_is_refused(study, tmp_path):
    user = tmp_path / "reports"
    user.mkdir()
    (user / "report.html").write_text("<p>my own report</p>")
    (user / "failures.csv").write_text("my,notes\n")
    (user / "manifest.csv").write_text("path\nelsewhere.npy\n")
    before = _tree(user)
    for extra in ([], ["--force"]):
        result = _run("batch", study / "manifest.csv", "--out", user, *extra)
        assert result.returncode == 2 and _one_sentence(result.stderr), result.stderr
        assert _tree(user) == before


def test_batch_out_holding_the_manifest_is_refused(tmp_path):
    scans = tmp_path / "scans"
    scans.mkdir()
    np.save(scans / "a.npy", np.eye(6))
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    manifest = elsewhere / "manifest.csv"
    manifest.write_text(f"path\n{scans / 'a.npy'}\n")
    before = _tree(tmp_path)
    result = _run("batch", manifest, "--out", elsewhere)
    assert result.returncode == 2 and "manifest.csv" in result.stderr
    assert _tree(tmp_path) == before


@pytest.mark.parametrize("out", [".", "x/..", "..", "sub/../.."])
def test_out_that_is_the_working_folder_or_above_is_refused(tmp_path, out):
    work = tmp_path / "work"
    (work / "x").mkdir(parents=True)
    (work / "sub").mkdir()
    np.save(work / "a.npy", np.eye(5))
    before = _tree(tmp_path)
    result = _run("analyse", "a.npy", "--out", out, "--force", cwd=work)
    assert result.returncode == 2 and _one_sentence(result.stderr), result.stderr
    assert _tree(tmp_path) == before


def test_dangling_symlink_as_out_is_refused(tmp_path):
    np.save(tmp_path / "a.npy", np.eye(5))
    link = tmp_path / "link"
    link.symlink_to(tmp_path / "nowhere")
    result = _run("analyse", tmp_path / "a.npy", "--out", link)
    assert result.returncode == 2 and "symbolic link" in result.stderr
    assert link.is_symlink() and not (tmp_path / "nowhere").exists()


def test_unwritable_output_is_refused_before_any_computation(tmp_path, monkeypatch, capsys):
    np.save(tmp_path / "a.npy", np.eye(5))
    locked = tmp_path / "locked"
    locked.mkdir()
    if os.geteuid() == 0:
        # root writes through permission bits; a refusing file system is simulated where
        # the check makes its probe
        import voxtopo.io.results as results

        def refuse(*args, **kwargs):
            raise PermissionError(errno.EACCES, "Permission denied")

        monkeypatch.setattr(results.tempfile, "mkdtemp", refuse)
    else:
        locked.chmod(0o555)
    import voxtopo.jobs.analyse

    def must_not_run(*args, **kwargs):
        raise AssertionError("persistence ran before the output was checked")

    monkeypatch.setattr(voxtopo.jobs.analyse, "persistence", must_not_run)
    code = cli.main(["analyse", str(tmp_path / "a.npy"), "--out", str(locked / "r")])
    err = capsys.readouterr().err
    assert code == 2 and "Cannot write into" in err and err.count("\n") == 1


def test_a_run_that_finished_first_is_never_replaced(tmp_path):
    """Two runs on one --out: the check passes for both, the first renames its folder into
    place, the second must refuse instead of replacing it."""
    out = tmp_path / "r"
    with pytest.raises(InputError, match="another run"):
        with result_folder(out) as tmp:
            (tmp / "summary.json").write_text('{"run": 2}')
            # meanwhile the other run finishes
            with result_folder(out) as other:
                (other / "summary.json").write_text('{"run": 1}')
    assert (out / "summary.json").read_text() == '{"run": 1}'
    assert [p.name for p in tmp_path.iterdir()] == ["r"]      # no temporary folder left


def test_result_folders_get_the_users_usual_permissions(tmp_path):
    old = os.umask(0o022)
    try:
        with result_folder(tmp_path / "deep" / "r") as tmp:
            (tmp / "summary.json").write_text("{}")
    finally:
        os.umask(old)
    assert (tmp_path / "deep" / "r").stat().st_mode & 0o777 == 0o755


def test_a_full_disk_leaves_the_previous_table_readable(tmp_path):
    table = tmp_path / "summary.csv"
    table.write_text("name,status\na,done\n")

    def fill_the_disk(path):
        path.write_text("name,sta")
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    with pytest.raises(OSError):
        write_atomically(table, fill_the_disk)
    assert pd.read_csv(table).to_dict("list") == {"name": ["a"], "status": ["done"]}
    assert [p.name for p in tmp_path.iterdir()] == ["summary.csv"]


def test_a_system_failure_is_one_sentence(tmp_path, monkeypatch, capsys):
    np.save(tmp_path / "a.npy", np.eye(5))
    import voxtopo.jobs.analyse

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device", str(tmp_path / "r"))

    monkeypatch.setattr(voxtopo.jobs.analyse, "write_result", no_space)
    code = cli.main(["analyse", str(tmp_path / "a.npy"), "--out", str(tmp_path / "r"),
                     "--min-persistence", "0"])
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if "error" in line]
    assert code == 1 and len(errors) == 1 and "No space left" in errors[0]
    assert "Traceback" not in err and not (tmp_path / "r").exists()


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(
    st.sampled_from([".", "..", "...", "/", "a/b", "../x", "x/..", "", " ", "a", "A", "a-2",
                     "scan", "é", "e\u0301", "..\\..", "~", "$HOME", "CON", ".hidden"]),
    st.text(min_size=0, max_size=12)), min_size=1, max_size=12))
def test_any_manifest_names_stay_in_scans_and_never_share_a_folder(tmp_path_factory, names):
    """Property: whatever the names, each row gets its own direct child of out/scans."""
    scans = tmp_path_factory.getbasetemp() / "property" / "scans"
    folders = unique_folder_names(names)
    assert len({f.casefold() for f in folders}) == len(folders)
    for folder in folders:
        assert folder == safe_folder_name(folder)
        assert folder not in ("", ".", "..") and not folder.startswith(".")
        assert "/" not in folder and "\\" not in folder and "\x00" not in folder
        assert (scans / folder).resolve().parent == scans.resolve()


def test_manifest_names_through_read_manifest(tmp_path):
    (tmp_path / "m.csv").write_text(
        "path,name\na.npy,..\nb.npy,.\nc.npy,../../etc\nd.npy,a\ne.npy,A\nf.npy,a/b\n")
    names = [e.name for e in batch.read_manifest(tmp_path / "m.csv")]
    assert names == ["a", "b", "etc", "a-2", "A-3", "a_b"]


def test_ragged_manifest_rows_name_the_line(tmp_path):
    manifest = tmp_path / "m.csv"
    manifest.write_text("path,group\na.npy,x\nb.npy\nc.npy,y,extra\n")
    with pytest.raises(InputError, match=r"Line 3 .* 1 fields but the header has 2"):
        batch.read_manifest(manifest)


@pytest.mark.parametrize("text, key", [
    ('[analyse]\nsuperlevel = "false"\n', "superlevel"),
    ("[analyse]\ndownsample = 0\n", "downsample"),
    ('[analyse]\nsigma = "2"\n', "sigma"),
    ('[analyse]\nthreshold = "otsu"\n', "distance"),
    ("[pores]\nneighbourhood = 5\n", "neighbourhood"),
    ('[load]\nspacing = "2.5"\n', "spacing"),
    ("[patches]\nk = 4\n", "k"),
    ("[batch]\nworkers = 1.5\n", "workers"),
    ('[batch]\nmemory_per_worker = "lots"\n', "memory_per_worker"),
])
def test_settings_of_the_wrong_type_are_refused_up_front(tmp_path, capsys, text, key):
    np.save(tmp_path / "a.npy", np.eye(5))
    path = tmp_path / "settings.toml"
    path.write_text(text)
    code = cli.main(["batch", str(tmp_path / "a.npy"), "--out", str(tmp_path / "out"),
                     "--settings", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and key in err and err.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_unreachable_scheduler_leaves_no_folder(tmp_path, capsys):
    np.save(tmp_path / "a.npy", np.eye(5))
    code = cli.main(["batch", str(tmp_path / "a.npy"), "--out", str(tmp_path / "out"),
                     "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err
    assert code == 2 and "Could not reach" in err
    assert not (tmp_path / "out").exists()


def test_a_batch_without_workers_stops_with_one_sentence_and_resumes(tmp_path):
    """The scheduler's only worker is gone: the batch stops after the timeout instead of
    waiting forever, keeps what finished, and a rerun with a worker completes."""
    for i in range(2):
        np.save(tmp_path / f"s{i}.npy", np.eye(6) * (i + 1))
    settings_file = tmp_path / "settings.toml"
    settings_file.write_text("[batch]\nworker_timeout = 2\n[analyse]\nmin_persistence = 0\n")
    out = tmp_path / "out"
    client, cluster = batch.local_cluster(0, 2 * 2**30, tmp_path / "dask")
    client.close()
    try:
        started = time.monotonic()
        with pytest.raises(batch.WorkersLost, match="No dask worker .* for 2 s"):
            batch.run_batch(str(tmp_path / "s*.npy"), out, settings_path=settings_file,
                            scheduler=cluster.scheduler_address, stream=io.StringIO())
        assert time.monotonic() - started < 60
        assert pd.read_csv(out / "summary.csv")["status"].tolist() == ["failed", "failed"]
        cluster.scale(1)
        cluster.wait_for_workers(1, timeout=60)
        table = batch.run_batch(str(tmp_path / "s*.npy"), out, settings_path=settings_file,
                                scheduler=cluster.scheduler_address, stream=io.StringIO())
        assert (table["status"] == "done").all()
    finally:
        cluster.close()


def test_local_cluster_scratch_stays_inside_the_batch_folder(tmp_path, monkeypatch):
    import tempfile

    system_temp = tmp_path / "system-temp"
    system_temp.mkdir()
    monkeypatch.setenv("TMPDIR", str(system_temp))
    monkeypatch.setattr(tempfile, "tempdir", None)
    np.save(tmp_path / "a.npy", np.random.default_rng(2).random((24, 24)))
    out = tmp_path / "out"
    table = batch.run_batch(str(tmp_path / "a.npy"), out, workers=1, stream=io.StringIO())
    assert (table["status"] == "done").all()
    assert list(system_temp.iterdir()) == []
    assert not (out / ".dask-scratch").exists()


def test_ctrl_c_during_a_batch_keeps_finished_scans_and_says_so(tmp_path):
    rng = np.random.default_rng(1)
    for i in range(8):
        np.save(tmp_path / f"s{i}.npy", rng.random((40, 40, 40)))
    out = tmp_path / "out"
    process = subprocess.Popen([sys.executable, "-m", "voxtopo.cli", "batch",
                                str(tmp_path / "s*.npy"), "--out", str(out), "--workers", "1"],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not (out / "scans" / "s0" / "summary.json").is_file():
        assert time.monotonic() < deadline and process.poll() is None
        time.sleep(0.05)
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=120)
    assert process.returncode == 130, err
    last = err.strip().splitlines()[-1]
    assert "were kept" in last and "nothing was written" not in err and "Traceback" not in err
    table = pd.read_csv(out / "summary.csv")
    done = set(table.loc[table["status"] == "done", "name"])
    assert "s0" in done and done == {p.name for p in (out / "scans").iterdir()
                                     if (p / "summary.json").is_file()}


def test_ctrl_c_that_breaks_a_library_import_is_still_one_line(monkeypatch, capsys):
    # common practice, no source: Ctrl-C while numpy's compiled part imports surfaces as
    # numpy's ImportError ("PyCapsule_Import could not import module datetime"), seen on
    # this machine about once in eight presses; it is still an interruption, exit 130
    def interrupted_import():
        try:
            cli._interrupt(signal.SIGINT, None)
        except KeyboardInterrupt:
            raise ImportError("PyCapsule_Import could not import module \"datetime\"")

    monkeypatch.setattr(cli, "build_parser", interrupted_import)
    assert cli.main(["analyse", "a.npy"]) == 130
    err = capsys.readouterr().err
    assert err == "voxtopo: interrupted; no result folder was written.\n"
    # without a press, an ImportError is a real fault and is not hidden
    monkeypatch.setattr(cli, "build_parser", lambda: (_ for _ in ()).throw(ImportError("x")))
    with pytest.raises(ImportError):
        cli.main(["analyse", "a.npy"])


def test_ctrl_c_during_start_up_is_one_line(tmp_path):
    np.save(tmp_path / "a.npy", np.eye(5))
    process = subprocess.Popen([sys.executable, "-m", "voxtopo.cli", "analyse",
                                str(tmp_path / "a.npy"), "--out", str(tmp_path / "r")],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # the command's module imports no numpy: once numpy is mapped, main() is loading the
    # libraries of its subcommands, which is the start-up a user would interrupt
    maps = Path(f"/proc/{process.pid}/maps")
    deadline = time.monotonic() + 60
    while "numpy" not in maps.read_text() and time.monotonic() < deadline:
        time.sleep(0.01)
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=60)
    assert process.returncode == 130 and err.count("\n") == 1 and "Traceback" not in err
    assert not (tmp_path / "r").exists()
