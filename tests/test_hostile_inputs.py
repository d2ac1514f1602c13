"""Hostile inputs met with one sentence (or an honest note), never a traceback or a wrong result.

Each case was once a traceback, a silent wrong result or a numpy/matplotlib message; the
checks hold voxtopo to the contract of the CLI: one sentence, exit code 2, no traceback,
nothing half-written, inputs byte-for-byte unchanged.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

import voxtopo
from voxtopo import filtration
from voxtopo.jobs import analyse as analyse_job
from voxtopo.cli import main
from voxtopo.errors import InputError, TooBigError


def _digest(path: Path) -> str:
    path = Path(path)
    files = sorted(p for p in path.rglob("*") if p.is_file()) if path.is_dir() else [path]
    sha = hashlib.sha256()
    for file in files:
        sha.update(str(file.relative_to(path.parent)).encode())
        sha.update(file.read_bytes())
    return sha.hexdigest()


def _refused(capsys, argv, out: Path, *words: str) -> str:
    """Run the CLI and hold it to the contract for bad input; return the one error line."""
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    assert "Traceback" not in captured.err
    errors = [line for line in captured.err.splitlines() if "error" in line]
    assert len(errors) == 1, captured.err
    for word in words:
        assert word in errors[0], errors[0]
    assert not out.exists()
    assert not [p for p in out.parent.iterdir() if p.name.startswith(f".{out.name}")]
    return errors[0]


# --- zarr with chunks that are not stored --------------------------------------------------
def _zarr_with_a_lost_chunk(path: Path) -> np.ndarray:
    """A 2x2-chunk zarr array in which no chunk holds only the fill value (so zarr writes
    all four), then one chunk file deleted, as a failed copy would leave it."""
    import zarr

    data = np.arange(1, 12 * 12 + 1, dtype=np.uint16).reshape(12, 12)
    array = zarr.create_array(str(path), shape=data.shape, chunks=(6, 6), dtype=data.dtype,
                              zarr_format=2, fill_value=0)
    array[:] = data
    # zarr format 2 stores chunk (i, j) under the key "i.j" (zarr v2 specification)
    (path / "1.1").unlink()
    return data


def test_zarr_with_a_missing_chunk_is_reported_by_load(tmp_path):
    path = tmp_path / "lost.zarr"
    _zarr_with_a_lost_chunk(path)
    scan = voxtopo.load(path)
    notes = " ".join(scan.metadata.get("notes", []))
    assert "1 of 4 chunks" in notes and "fill value 0" in notes
    assert scan.describe()["notes"] == scan.metadata["notes"]


def test_zarr_with_all_chunks_stored_has_no_note(tmp_path):
    import zarr

    path = tmp_path / "whole.zarr"
    array = zarr.create_array(str(path), shape=(8, 8), chunks=(4, 4), dtype=np.uint8,
                              zarr_format=2, fill_value=0)
    array[:] = np.arange(1, 65, dtype=np.uint8).reshape(8, 8)
    assert "notes" not in voxtopo.load(path).metadata


def test_analyse_says_on_the_cli_and_in_the_summary_that_chunks_were_missing(tmp_path,
                                                                             capsys):
    path = tmp_path / "lost.zarr"
    _zarr_with_a_lost_chunk(path)
    before = _digest(path)
    out = tmp_path / "out"
    assert main(["analyse", str(path), "--out", str(out), "--min-persistence", "0"]) == 0
    printed = capsys.readouterr().out
    assert "1 of 4 chunks" in printed
    summary = json.loads((out / "summary.json").read_text())
    assert any("1 of 4 chunks" in note for note in summary["scan"]["notes"])
    assert _digest(path) == before


def test_pores_says_that_chunks_were_missing(tmp_path, capsys):
    path = tmp_path / "lost.zarr"
    _zarr_with_a_lost_chunk(path)
    out = tmp_path / "out"
    assert main(["pores", str(path), "--threshold", "70", "--out", str(out)]) == 0
    assert "1 of 4 chunks" in capsys.readouterr().out
    notes = json.loads((out / "summary.json").read_text())["notes"]
    assert any("1 of 4 chunks" in note for note in notes)


def test_out_of_core_analyse_says_that_chunks_were_missing(tmp_path, capsys):
    path = tmp_path / "lost.zarr"
    _zarr_with_a_lost_chunk(path)
    out = tmp_path / "out"
    assert main(["analyse", str(path), "--out", str(out), "--out-of-core"]) == 0
    assert "1 of 4 chunks" in capsys.readouterr().out
    summary = json.loads((out / "summary.json").read_text())
    assert "1 of 4 chunks" in json.dumps(summary)


# --- .npy headers that do not match the data -------------------------------------------------
def _npy_with_header_shape(folder: Path, name: str, shape_text: bytes) -> Path:
    """An 8x8 uint8 .npy whose header's shape is replaced by ``shape_text``; the header
    keeps its length (NumPy format specification: the header dict is padded with spaces
    and ends in a newline)."""
    np.save(folder / "good.npy", np.arange(64, dtype=np.uint8).reshape(8, 8))
    raw = (folder / "good.npy").read_bytes()
    header_end = raw.index(b"\n") + 1
    header = raw[:header_end - 1].replace(b"(8, 8)", shape_text).rstrip(b" ")
    path = folder / name
    path.write_bytes(header.ljust(header_end - 1) + b"\n" + raw[header_end:])
    return path


def test_npy_with_more_data_than_its_header_shape_is_refused(tmp_path, capsys):
    path = _npy_with_header_shape(tmp_path, "short_header.npy", b"(4, 8)")
    before = _digest(path)
    with pytest.raises(InputError, match="64 bytes"):
        voxtopo.load(path)
    _refused(capsys, ["analyse", path, "--out", tmp_path / "out"], tmp_path / "out",
             "short_header.npy", "32")
    assert _digest(path) == before


@pytest.mark.parametrize("shape_text", [b"(-8, 8)", b"(8, -8)", b"(-99999999999999999999, 8)"])
def test_npy_with_a_negative_dimension_is_refused_in_one_sentence(tmp_path, capsys,
                                                                  shape_text):
    path = _npy_with_header_shape(tmp_path, "negative.npy", shape_text)
    with pytest.raises(InputError, match="negative"):
        voxtopo.io.read_header(path)
    _refused(capsys, ["analyse", path, "--out", tmp_path / "out"], tmp_path / "out",
             "negative.npy", "negative")


# --- 64-bit integers beyond what float64 holds exactly ---------------------------------------
def test_float64_cannot_tell_2_to_the_60_from_its_neighbour():
    # IEEE 754 binary64 has a 53-bit significand: whole numbers above 2^53 are not all
    # representable (IEEE 754-2008, section 3.6). This is the premise of the refusal below.
    assert float(2 ** 60 + 1) == float(2 ** 60)
    assert float(2 ** 53 - 1) != float(2 ** 53)


@pytest.mark.parametrize("dtype", [np.int64, np.uint64])
def test_64_bit_values_beyond_2_to_the_53_are_refused_not_rounded(dtype, tmp_path, capsys):
    # One dimension-0 pair (2^60, 2^60 + 1) lives in this image: a minimum of 2^60
    # surrounded by 2^60 + 1, beside the global minimum 2^60 - 5. Through float64 it would
    # vanish (persistence 0).
    image = np.full((5, 5), 2 ** 60 + 1, dtype=dtype)
    image[2, 2] = 2 ** 60
    image[0, 0] = 2 ** 60 - 5
    with pytest.raises(InputError, match="2\\^53"):
        voxtopo.persistence(image)
    path = tmp_path / "big.npy"
    np.save(path, image)
    _refused(capsys, ["analyse", path, "--out", tmp_path / "out"], tmp_path / "out",
             "2^53", f"subtract an offset such as the minimum {2 ** 60 - 5}")
    wide = image.copy()
    wide[0, 0] = 0
    with pytest.raises(InputError, match="rescale"):
        voxtopo.persistence(wide)


def test_64_bit_values_within_2_to_the_53_keep_their_pairs():
    # Whole numbers up to 2^53 are exact in binary64 (IEEE 754-2008), so a pair one apart
    # just below 2^53 survives: born at 2^53 - 2, dies at 2^53 - 1.
    image = np.full((5, 5), 2 ** 53 - 1, dtype=np.int64)
    image[2, 2] = 2 ** 53 - 2
    image[0, 0] = 0
    pairs = voxtopo.persistence(image).pairs
    finite = pairs[(pairs["dim"] == 0) & np.isfinite(pairs["death"])]
    assert finite[["birth", "death"]].to_numpy().tolist() == [[2 ** 53 - 2, 2 ** 53 - 1]]


# --- extreme float values in the plots -----------------------------------------------------
@pytest.mark.parametrize("sweep", [[], ["--superlevel"]])
def test_values_at_the_float64_extremes_are_plotted(tmp_path, capsys, sweep):
    largest = np.finfo(np.float64).max
    image = np.zeros((8, 8))
    image[7, 7] = -largest
    image[0, 0] = largest
    image[3, 3] = -1.0
    image[5, 1:4] = largest
    image[4:7, 1] = largest
    path = tmp_path / "extremes.npy"
    np.save(path, image)
    out = tmp_path / "out"
    assert main(["analyse", str(path), "--out", str(out), *sweep,
                 "--min-persistence", "0"]) == 0
    assert "Warning" not in capsys.readouterr().err
    for name in ("diagram.png", "barcode.png", "betti_curves.png", "euler_curve.png"):
        assert (out / name).stat().st_size > 0
    pairs = voxtopo.Diagram.load(out).pairs
    # the essential component is born at the first voxel of the sweep: the darkest in a
    # sublevel sweep, the brightest in a superlevel one (common practice, no source)
    essential = pairs[~np.isfinite(pairs["death"])]
    assert essential["birth"].tolist() == [largest if sweep else -largest]


# --- units with matplotlib's math syntax ---------------------------------------------------
def _two_pore_mask(folder: Path) -> Path:
    mask = np.zeros((16, 16), np.uint8)
    mask[3:7, 3:7] = 1
    mask[9:13, 8:13] = 1
    np.save(folder / "mask.npy", mask)
    return folder / "mask.npy"


@pytest.mark.parametrize("command", [["analyse", "--distance"], ["pores"]])
def test_a_unit_with_dollar_signs_is_shown_literally(tmp_path, capsys, command):
    path = _two_pore_mask(tmp_path)
    out = tmp_path / "out"
    unit = "$\\foo$"
    code = main([command[0], str(path), *command[1:], "--unit", unit, "--spacing", "2",
                 "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    summary = json.loads((out / "summary.json").read_text())
    assert summary.get("unit", summary.get("scan", {}).get("unit")) == unit
    assert list(out.glob("*.png"))


def test_plot_labels_show_the_unit_as_typed():
    from voxtopo.report.plots import plot_diagram

    mask = np.zeros((9, 9), bool)
    mask[2:7, 2:7] = True
    diagram = voxtopo.persistence(filtration.signed_distance(mask, unit="$\\foo$"))
    ax = plot_diagram(diagram)
    # an escaped dollar sign is drawn as a dollar sign and starts no math (matplotlib
    # documentation, "Writing mathematical expressions"); parsing \foo as math would raise
    assert ax.xaxis.label.get_text() == "birth: signed distance (\\$\\foo\\$)"
    ax.figure.canvas.draw()


def test_names_and_groups_with_dollar_signs_are_drawn_as_typed():
    from voxtopo.report.html import plot_distance_heatmap, plot_embedding

    names, groups = ["$\\alpha_1$ scan", "$\\foo$"], ["$\\bar$", ""]
    # parsing \foo as math would raise when the figure is drawn (matplotlib documentation,
    # "Writing mathematical expressions")
    heatmap = plot_distance_heatmap(np.array([[0.0, 1.0], [1.0, 0.0]]), names, groups)
    heatmap.canvas.draw()
    assert "\\$\\foo\\$" in [t.get_text() for t in heatmap.axes[0].get_xticklabels()]
    embedding = plot_embedding(np.array([[0.0, 0.0], [1.0, 1.0]]), names, groups)
    embedding.canvas.draw()
    assert "\\$\\foo\\$" in [t.get_text() for t in embedding.axes[0].texts]


# --- --min-persistence ---------------------------------------------------------------------
@pytest.mark.parametrize("value", ["nan", "inf", "-inf", "-1", "ten"])
def test_min_persistence_that_is_not_a_length_is_refused(tmp_path, capsys, value):
    np.save(tmp_path / "g.npy", np.random.default_rng(0).random((8, 8)))
    _refused(capsys, ["analyse", tmp_path / "g.npy", "--out", tmp_path / "out",
                      f"--min-persistence={value}"], tmp_path / "out", "--min-persistence",
             repr(value))


@pytest.mark.parametrize("value", [float("nan"), float("inf"), -0.5])
def test_min_persistence_that_is_not_a_length_is_refused_by_the_library(value):
    with pytest.raises(InputError, match="min_persistence"):
        voxtopo.persistence(np.random.default_rng(0).random((6, 6)), min_persistence=value)


# --- pores on an image one voxel thin --------------------------------------------------------
@pytest.mark.parametrize("shape", [(1, 20), (20, 1), (1, 1), (1, 9, 9)])
def test_pores_on_an_image_one_voxel_thin_is_refused(tmp_path, capsys, shape):
    mask = (np.arange(int(np.prod(shape))) % 3 == 0).astype(np.uint8).reshape(shape)
    mask.flat[0] = 1
    mask.flat[-1] = 0
    np.save(tmp_path / "thin.npy", mask)
    _refused(capsys, ["pores", tmp_path / "thin.npy", "--out", tmp_path / "out"],
             tmp_path / "out", "thin.npy", "2 voxels")


# --- VOXTOPO_MEMORY_LIMIT ------------------------------------------------------------------
@pytest.mark.parametrize("value", ["lots", "nan", "inf", "-5"])
def test_a_memory_limit_that_is_not_a_number_of_bytes_is_named(tmp_path, capsys,
                                                                monkeypatch, value):
    np.save(tmp_path / "g.npy", np.zeros((6, 6)))
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", value)
    _refused(capsys, ["analyse", tmp_path / "g.npy", "--out", tmp_path / "out"],
             tmp_path / "out", "VOXTOPO_MEMORY_LIMIT", value)


# --- memory of the steps between loading and persistence -------------------------------------
def test_a_smoothing_sigma_longer_than_the_scan_is_refused(tmp_path, capsys):
    np.save(tmp_path / "g.npy", np.random.default_rng(1).random((16, 16)).astype(np.float32))
    line = _refused(capsys, ["analyse", tmp_path / "g.npy", "--out", tmp_path / "out",
                             "--smooth", "1e9"], tmp_path / "out", "--smooth")
    assert "Unable to allocate" not in line


def test_smoothing_along_an_axis_of_one_voxel_changes_nothing_there():
    # With mode "nearest" an axis of one voxel is constant, so a normalised kernel leaves
    # it unchanged (common practice, no source): a 3D scan of one slice smooths like 2D.
    image = np.random.default_rng(2).random((1, 12, 12)).astype(np.float32)
    thick = filtration.smooth(voxtopo.Scan(image), 5.0)
    flat = filtration.smooth(voxtopo.Scan(image[0]), 5.0)
    np.testing.assert_allclose(thick.data[0], flat.data, rtol=1e-6)


@pytest.mark.parametrize("step, call", [
    ("Smoothing", lambda scan: filtration.smooth(scan, 2.0)),
    ("Downsampling", lambda scan: filtration.downsample(scan, 2)),
    ("distance transform", lambda scan: filtration.signed_distance(
        scan.with_data(scan.data > 0.5))),
])
def test_each_preparation_step_refuses_before_allocating(monkeypatch, step, call):
    scan = voxtopo.Scan(np.random.default_rng(3).random((40, 40, 40)).astype(np.float32))
    # the steps need at least 4 bytes per voxel beyond the scan: 256 kB for 64 000 voxels
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(100_000))
    with pytest.raises(TooBigError, match=step) as refusal:
        call(scan)
    assert "crop" in str(refusal.value)


def test_analyse_plans_the_preparation_before_loading_the_engine(tmp_path, capsys,
                                                                  monkeypatch):
    np.save(tmp_path / "g.npy", np.random.default_rng(4).random((30, 30, 30)) < 0.5)
    # the scan (27 kB) loads; its distance transform (about 1.5 MB) does not fit
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(400_000))
    _refused(capsys, ["analyse", tmp_path / "g.npy", "--out", tmp_path / "out",
                      "--distance"], tmp_path / "out", "distance transform", "MB")


def test_an_allocation_failure_after_the_plan_becomes_one_sentence(tmp_path, capsys,
                                                                   monkeypatch):
    np.save(tmp_path / "g.npy", np.random.default_rng(5).random((12, 12)))

    def fail(*args, **kwargs):
        # the text numpy gives when an allocation fails
        raise MemoryError("Unable to allocate 59.6 GiB for an array with shape "
                          "(8000000001,) and data type int64")

    monkeypatch.setattr(analyse_job, "persistence", fail)
    line = _refused(capsys, ["analyse", tmp_path / "g.npy", "--out", tmp_path / "out"],
                    tmp_path / "out", "ran out of memory", "planned", "crop")
    assert "Unable to allocate" not in line and "GiB" not in line


def test_an_allocation_failure_in_the_pore_analysis_becomes_one_sentence(tmp_path, capsys,
                                                                         monkeypatch):
    from voxtopo.porosity import _analysis

    path = _two_pore_mask(tmp_path)

    def fail(*args, **kwargs):
        # the text a numba kernel gives when an allocation fails
        raise MemoryError("Allocation failed (probably too large).")

    monkeypatch.setattr(_analysis, "persistence", fail)
    line = _refused(capsys, ["pores", path, "--out", tmp_path / "out"], tmp_path / "out",
                    "ran out of memory", "planned", "crop")
    assert "Allocation failed" not in line


def test_an_allocation_failure_outside_the_planned_jobs_is_one_sentence(tmp_path, capsys,
                                                                        monkeypatch):
    import voxtopo.jobs.patches

    np.save(tmp_path / "g.npy", np.random.default_rng(6).random((12, 12)))

    def fail(*args, **kwargs):
        raise MemoryError("Unable to allocate 59.6 GiB for an array with shape "
                          "(8000000001,) and data type int64")

    monkeypatch.setattr(voxtopo.jobs.patches, "run", fail)
    line = _refused(capsys, ["patches", tmp_path / "g.npy", "--out", tmp_path / "out"],
                    tmp_path / "out", "ran out of memory", "crop")
    assert "Unable to allocate" not in line
