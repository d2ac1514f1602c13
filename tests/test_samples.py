"""The committed sample volumes: made deterministically by make_samples.py and readable with
the voxel size the script writes.

These data are invented for the demo (see sample_volumes/README.md); the checks here are
about the files, not about any physical value.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import tifffile

import voxtopo

SAMPLES = Path(__file__).resolve().parents[1] / "sample_volumes"


@pytest.fixture(scope="module")
def make_samples():
    spec = importlib.util.spec_from_file_location("make_samples", SAMPLES / "make_samples.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def arrays(make_samples):
    return make_samples.make_all()


def test_make_samples_is_deterministic(make_samples, arrays):
    again = make_samples.make_all()
    assert again.keys() == arrays.keys()
    for name in arrays:
        assert again[name].dtype == arrays[name].dtype
        np.testing.assert_array_equal(again[name], arrays[name])


def test_committed_files_are_what_the_script_makes(arrays):
    # Another NumPy/SciPy release may round a blurred gray value the other way, so gray
    # values may differ by one level in a few voxels; the masks must match exactly.
    for name, expected in arrays.items():
        path = SAMPLES / name
        stored = np.load(path, allow_pickle=False) if name.endswith(".npy") else \
            tifffile.imread(path)
        assert stored.shape == expected.shape and stored.dtype == expected.dtype, name
        if expected.dtype == np.bool_:
            np.testing.assert_array_equal(stored, expected, err_msg=name)
        else:
            diff = np.abs(stored.astype(np.int64) - expected.astype(np.int64))
            assert diff.max() <= (1 if expected.dtype == np.uint8 else 2), name
            assert np.mean(diff > 0) < 1e-3, name


def test_write_all_writes_only_into_the_folder_it_is_given(make_samples, tmp_path):
    written = make_samples.write_all(tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in written)
    for path in written:
        committed = SAMPLES / path.name
        a = voxtopo.load(path)
        b = voxtopo.load(committed)
        np.testing.assert_array_equal(a.data, b.data)
        assert a.spacing == b.spacing and a.unit == b.unit


@pytest.mark.parametrize("name, shape, dtype, spacing, unit, fmt", [
    ("beads.tif", (96, 96, 96), np.uint8, (2.5, 2.5, 2.5), "um", "imagej-tiff"),
    ("foam.tif", (80, 80, 80), np.uint8, (4.0, 4.0, 4.0), "um", "ome-tiff"),
    ("film.tif", (256, 256), np.uint16, (0.05, 0.05), "um", "tiff"),
])
def test_sample_volumes_load_with_their_voxel_size(name, shape, dtype, spacing, unit, fmt):
    scan = voxtopo.load(SAMPLES / name)
    assert scan.shape == shape
    assert scan.data.dtype == dtype
    assert scan.spacing == pytest.approx(spacing)
    assert scan.unit == unit
    assert scan.metadata["format"] == fmt


@pytest.mark.parametrize("volume, mask", [("beads.tif", "beads_mask.npy"),
                                          ("foam.tif", "foam_mask.npy")])
def test_masks_match_their_volumes(volume, mask):
    gray = voxtopo.load(SAMPLES / volume).data
    pore = np.load(SAMPLES / mask, allow_pickle=False)
    assert pore.dtype == np.bool_ and pore.shape == gray.shape
    # pores are dark in these micro-CT-like scans, solid is bright
    assert gray[pore].mean() + 50 < gray[~pore].mean()
    assert 0.05 < pore.mean() < 0.99


def test_sample_folder_stays_small():
    total = sum(p.stat().st_size for p in SAMPLES.iterdir() if p.is_file())
    assert total < 5e6


def test_beads_region_of_interest_holds_every_glass_voxel():
    # the disc's region of interest is the sample: no glass outside it, air around it
    # (common practice, no source)
    pore = np.load(SAMPLES / "beads_mask.npy", allow_pickle=False)
    roi = np.load(SAMPLES / "beads_roi.npy", allow_pickle=False)
    assert roi.dtype == np.bool_ and roi.shape == pore.shape
    assert pore[~roi].all() and (~roi).any()
