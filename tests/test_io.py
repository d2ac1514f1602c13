"""Loaders: round trips through files written by other libraries, and every bad input.

External references: the files are written by tifffile (ImageJ and OME-TIFF metadata as
tifffile writes them), by scikit-image's ``io.imsave`` (PNG), by NumPy (``.npy``, raw
``tofile``) and by the zarr library (OME-Zarr, laid out by hand after the open OME-NGFF 0.4
specification, https://ngff.openmicroscopy.org/0.4/). voxtopo wrote none of them.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import tifffile

import voxtopo
from voxtopo.errors import InputError, TooBigError
from voxtopo.io import save_tiff
from voxtopo.memory import is_mapped, release_pages

RNG = np.random.default_rng(20261201)


def volume(shape=(6, 20, 24), dtype=np.uint16):
    info = np.iinfo(dtype) if np.dtype(dtype).kind in "iu" else None
    if info is None:
        return RNG.normal(size=shape).astype(dtype)
    return RNG.integers(info.min, info.max, size=shape, endpoint=True, dtype=dtype)


def digest(path: Path) -> str:
    """Hash of a file, or of every file under a folder (names and bytes)."""
    h = hashlib.sha256()
    paths = sorted(path.rglob("*")) if path.is_dir() else [path]
    for p in paths:
        h.update(str(p.relative_to(path.parent)).encode())
        if p.is_file():
            h.update(p.read_bytes())
    return h.hexdigest()


def listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


# --- TIFF --------------------------------------------------------------------------------
@pytest.mark.parametrize("unit", ["um", "micron", "\\u00B5m"])   # tifffile writes ASCII only
def test_imagej_stack_gives_spacing_and_unit(tmp_path, unit):
    data = volume()
    path = tmp_path / "stack.tif"
    # ImageJ stores z in the description and x/y as pixels per unit in the resolution tags
    tifffile.imwrite(path, data, imagej=True, resolution=(1 / 0.4, 1 / 0.5),
                     metadata={"axes": "ZYX", "spacing": 1.25, "unit": unit})
    scan = voxtopo.load(path)
    np.testing.assert_array_equal(scan.data, data)
    assert scan.spacing == pytest.approx((1.25, 0.5, 0.4))
    assert scan.unit == "um"
    assert scan.source == str(path)
    assert scan.metadata["format"] == "imagej-tiff"
    assert scan.metadata["axes"] == "ZYX"
    json.dumps(scan.metadata)


def test_ome_tiff_gives_physical_sizes_in_one_unit(tmp_path):
    data = volume((5, 16, 18), np.uint8)
    path = tmp_path / "cells.ome.tif"
    tifffile.imwrite(path, data, ome=True, metadata={
        "axes": "ZYX", "PhysicalSizeX": 0.2, "PhysicalSizeXUnit": "µm",
        "PhysicalSizeY": 0.25, "PhysicalSizeYUnit": "µm",
        "PhysicalSizeZ": 900.0, "PhysicalSizeZUnit": "nm"})
    scan = voxtopo.load(path)
    np.testing.assert_array_equal(scan.data, data)
    assert scan.spacing == pytest.approx((0.9, 0.25, 0.2))
    assert scan.unit == "um"
    assert scan.metadata["format"] == "ome-tiff"


def test_ome_tiff_without_units_is_in_micrometres(tmp_path):
    # The OME schema's default unit for PhysicalSize is the micrometre.
    path = tmp_path / "default.ome.tif"
    tifffile.imwrite(path, volume((3, 8, 8), np.uint8), ome=True,
                     metadata={"axes": "ZYX", "PhysicalSizeX": 2.0, "PhysicalSizeY": 2.0,
                               "PhysicalSizeZ": 3.0})
    scan = voxtopo.load(path)
    assert scan.spacing == pytest.approx((3.0, 2.0, 2.0)) and scan.unit == "um"


@pytest.mark.parametrize("resolution_unit, per_unit, expected_um",
                         [("CENTIMETER", 1e4 / 0.05, 0.05), ("INCH", 25400 / 0.5, 0.5)])
def test_single_page_tiff_resolution_tags_give_micrometres(tmp_path, resolution_unit,
                                                         per_unit, expected_um):
    data = volume((30, 40), np.uint16)
    path = tmp_path / "micrograph.tif"
    tifffile.imwrite(path, data, resolution=(per_unit, per_unit),
                     resolutionunit=resolution_unit)
    scan = voxtopo.load(path)
    np.testing.assert_array_equal(scan.data, data)
    assert scan.ndim == 2
    assert scan.spacing == pytest.approx((expected_um, expected_um))
    assert scan.unit == "um"


def test_screen_default_dpi_is_not_taken_for_a_pixel_size(tmp_path):
    path = tmp_path / "exported.tif"
    tifffile.imwrite(path, volume((10, 10), np.uint8), resolution=(72, 72),
                     resolutionunit="INCH")
    scan = voxtopo.load(path)
    assert scan.unit == "px" and scan.spacing == (1.0, 1.0)


def test_multi_page_tiff_without_metadata_is_in_pixels(tmp_path):
    data = volume((7, 12, 9), np.float32)
    path = tmp_path / "plain.tif"
    with tifffile.TiffWriter(path) as tw:        # one page per slice, no description
        for plane in data:
            tw.write(plane, contiguous=False, metadata=None)
    scan = voxtopo.load(path)
    np.testing.assert_array_equal(scan.data, data)
    assert scan.spacing == (1.0, 1.0, 1.0) and scan.unit == "px"


def test_multi_page_tiff_with_only_xy_resolution_takes_z_equal_to_x(tmp_path):
    data = volume((4, 10, 10), np.uint8)
    path = tmp_path / "xy_only.tif"
    tifffile.imwrite(path, data, photometric="minisblack", resolution=(1e4 / 3.0, 1e4 / 3.0),
                     resolutionunit="CENTIMETER")
    scan = voxtopo.load(path)
    assert scan.spacing == pytest.approx((3.0, 3.0, 3.0)) and scan.unit == "um"
    assert any("z" in note for note in scan.metadata["notes"])


def test_caller_spacing_and_unit_win_over_the_metadata(tmp_path):
    path = tmp_path / "stack.tif"
    tifffile.imwrite(path, volume(), imagej=True, resolution=(2.0, 2.0),
                     metadata={"axes": "ZYX", "spacing": 2.5, "unit": "um"})
    assert voxtopo.load(path, spacing=(1, 2, 3), unit="nm").spacing == (1.0, 2.0, 3.0)
    assert voxtopo.load(path, spacing=(1, 2, 3), unit="nm").unit == "nm"
    assert voxtopo.load(path, spacing=0.7).spacing == (0.7, 0.7, 0.7)
    assert voxtopo.load(path, spacing=0.7).unit == "um"
    # a unit alone converts the file's voxel size
    converted = voxtopo.load(path, unit="nm")
    assert converted.spacing == pytest.approx((2500.0, 500.0, 500.0)) and converted.unit == "nm"


def test_imagej_hyperstack_needs_and_accepts_timepoint_and_channel(tmp_path):
    data = volume((3, 4, 2, 10, 12))             # t, z, c, y, x
    path = tmp_path / "hyper.tif"
    tifffile.imwrite(path, data, imagej=True,
                     metadata={"axes": "TZCYX", "spacing": 1.0, "unit": "um"})
    with pytest.raises(InputError, match=r"timepoint=N.*channel=M") as info:
        voxtopo.load(path)
    assert "--timepoint N --channel M" in str(info.value)
    with pytest.raises(InputError, match="timepoint=N"):
        voxtopo.load(path, channel=1)
    with pytest.raises(InputError, match="channel=N"):
        voxtopo.load(path, timepoint=1)
    scan = voxtopo.load(path, timepoint=2, channel=1)
    np.testing.assert_array_equal(scan.data, data[2, :, 1])
    assert scan.metadata["selected"] == {"timepoint": 2, "channel": 1}
    with pytest.raises(InputError, match="out of range"):
        voxtopo.load(path, timepoint=3, channel=0)


def test_rgb_tiff_names_the_channel_option_and_it_selects(tmp_path):
    data = volume((16, 20, 3), np.uint8)
    path = tmp_path / "colour.tif"
    tifffile.imwrite(path, data, photometric="rgb")
    with pytest.raises(InputError, match="RGB") as info:
        voxtopo.load(path)
    assert "channel=N" in str(info.value) and "--channel N" in str(info.value)
    for c in range(3):
        np.testing.assert_array_equal(voxtopo.load(path, channel=c).data, data[..., c])


def test_ome_tiff_channels_need_the_channel_option(tmp_path):
    data = volume((2, 5, 8, 9), np.uint16)       # c, z, y, x
    path = tmp_path / "two_colours.ome.tif"
    tifffile.imwrite(path, data, ome=True, metadata={"axes": "CZYX", "PhysicalSizeX": 0.5,
                                                     "PhysicalSizeY": 0.5,
                                                     "PhysicalSizeZ": 1.0})
    with pytest.raises(InputError, match="channel=N"):
        voxtopo.load(path)
    scan = voxtopo.load(path, channel=1)
    np.testing.assert_array_equal(scan.data, data[1])
    assert scan.spacing == pytest.approx((1.0, 0.5, 0.5))


def test_a_time_series_names_the_timepoint_option(tmp_path):
    data = volume((4, 3, 8, 8), np.uint8)
    path = tmp_path / "movie.tif"
    tifffile.imwrite(path, data, imagej=True, metadata={"axes": "TZYX"})
    with pytest.raises(InputError, match="timepoint=N") as info:
        voxtopo.load(path)
    assert "--timepoint N" in str(info.value)
    np.testing.assert_array_equal(voxtopo.load(path, timepoint=3).data, data[3])


def test_channel_option_on_a_gray_file_is_refused(tmp_path):
    path = tmp_path / "gray.tif"
    tifffile.imwrite(path, volume((8, 8), np.uint8))
    with pytest.raises(InputError, match="no channel axis"):
        voxtopo.load(path, channel=0)


def test_tifffile_warnings_do_not_reach_stderr(tmp_path, capfd):
    path = tmp_path / "cut.tif"
    tifffile.imwrite(path, volume((10, 32, 32), np.uint8), compression="zlib")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError):
        voxtopo.load(path)
    assert capfd.readouterr().err == ""


def test_pyramidal_ome_tiff_level_scales_the_spacing(tmp_path):
    data = volume((4, 32, 32), np.uint8)
    path = tmp_path / "pyramid.ome.tif"
    with tifffile.TiffWriter(path, ome=True) as tw:     # a tifffile-written OME pyramid
        tw.write(data, subifds=1, metadata={"axes": "ZYX", "PhysicalSizeX": 0.5,
                                            "PhysicalSizeY": 0.5, "PhysicalSizeZ": 2.0})
        tw.write(data[:, ::2, ::2], subfiletype=1)
    coarse = voxtopo.load(path, level=1)
    np.testing.assert_array_equal(coarse.data, data[:, ::2, ::2])
    assert coarse.spacing == pytest.approx((2.0, 1.0, 1.0))
    with pytest.raises(InputError, match="level=2 is out of range"):
        voxtopo.load(path, level=2)


# --- save_tiff -----------------------------------------------------------------------------
@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.float32, np.bool_, np.int16,
                                   np.float64])
@pytest.mark.parametrize("shape, spacing", [((5, 9, 11), (2.0, 0.5, 0.25)),
                                            ((9, 11), (0.125, 0.25))])
def test_save_tiff_round_trip_keeps_values_spacing_and_unit(tmp_path, dtype, shape, spacing):
    data = volume(shape, np.uint8) > 128 if dtype is np.bool_ else volume(shape, dtype)
    scan = voxtopo.Scan(data, spacing=spacing, unit="um", source="test")
    path = save_tiff(scan, tmp_path / "out.tif")
    back = voxtopo.load(path)
    assert back.data.dtype == data.dtype
    np.testing.assert_array_equal(back.data, data)
    assert back.spacing == pytest.approx(spacing) and back.unit == "um"
    assert [p.name for p in tmp_path.iterdir()] == ["out.tif"]


def test_save_tiff_writes_what_imagej_reads(tmp_path):
    scan = voxtopo.Scan(volume((4, 6, 8), np.uint16), spacing=(3.0, 1.5, 1.5), unit="um")
    path = save_tiff(scan, tmp_path / "written.tif")
    with tifffile.TiffFile(path) as tif:           # tifffile as the reference reader
        assert tif.is_imagej
        assert tif.imagej_metadata["spacing"] == pytest.approx(3.0)
        assert tif.imagej_metadata["unit"] == "um"
        x_pixels_per_unit = tif.pages[0].tags["XResolution"].value
        assert x_pixels_per_unit[0] / x_pixels_per_unit[1] == pytest.approx(1 / 1.5)


# --- slices ------------------------------------------------------------------------------------
def test_tiff_slice_folder_stacks_in_natural_order(tmp_path):
    data = volume((12, 10, 14), np.uint16)
    folder = tmp_path / "slices"
    folder.mkdir()
    for z in RNG.permutation(12):                  # written out of order
        tifffile.imwrite(folder / f"s{z + 1}.tif", data[z],
                         resolution=(1e4 / 0.8, 1e4 / 0.8), resolutionunit="CENTIMETER")
    (folder / "notes.txt").write_text("scanner log, not a slice")
    scan = voxtopo.load(folder)
    np.testing.assert_array_equal(scan.data, data)     # s2 after s1, s10 after s9
    assert scan.spacing == pytest.approx((0.8, 0.8, 0.8)) and scan.unit == "um"
    assert scan.metadata["files"] == 12 and scan.metadata["last"] == "s12.tif"


def test_png_slices_written_by_scikit_image_load_by_glob(tmp_path):
    from skimage import io as skio

    data = volume((11, 9, 13), np.uint16)
    for z in RNG.permutation(11):
        skio.imsave(tmp_path / f"slice_{z}.png", data[z], check_contrast=False)
    tifffile.imwrite(tmp_path / "other_3.tif", data[0])      # not matched by the pattern
    scan = voxtopo.load(str(tmp_path / "slice_*.png"))
    np.testing.assert_array_equal(scan.data, data)
    assert scan.data.dtype == np.uint16
    assert scan.source == str(tmp_path / "slice_*.png")


def test_rgb_png_slices_need_a_channel(tmp_path):
    from skimage import io as skio

    data = volume((3, 8, 8, 3), np.uint8)
    for z in range(3):
        skio.imsave(tmp_path / f"c{z}.png", data[z], check_contrast=False)
    with pytest.raises(InputError, match="channel=N"):
        voxtopo.load(tmp_path)
    np.testing.assert_array_equal(voxtopo.load(tmp_path, channel=2).data, data[..., 2])


def test_single_png_is_a_2d_image(tmp_path):
    from skimage import io as skio

    data = volume((17, 19), np.uint8)
    skio.imsave(tmp_path / "one.png", data, check_contrast=False)
    np.testing.assert_array_equal(voxtopo.load(tmp_path / "one.png").data, data)


@pytest.mark.parametrize("second", [np.zeros((10, 15), np.uint16), np.zeros((10, 14), np.uint8)])
def test_slices_of_different_shape_or_type_are_refused(tmp_path, second):
    tifffile.imwrite(tmp_path / "a1.tif", np.zeros((10, 14), np.uint16))
    tifffile.imwrite(tmp_path / "a2.tif", second)
    before = digest(tmp_path)
    with pytest.raises(InputError, match="same shape and type"):
        voxtopo.load(tmp_path)
    assert digest(tmp_path) == before


# --- npy and raw ------------------------------------------------------------------------------
@pytest.mark.parametrize("dtype", [np.uint8, np.int8, np.uint16, np.int16, np.float32,
                                   np.float64, np.bool_])
def test_npy_round_trip(tmp_path, dtype):
    data = volume((4, 5, 6), np.uint8) > 100 if dtype is np.bool_ else volume((4, 5, 6), dtype)
    np.save(tmp_path / "v.npy", data)
    scan = voxtopo.load(tmp_path / "v.npy", spacing=(2, 1, 1), unit="mm")
    np.testing.assert_array_equal(scan.data, data)
    assert scan.data.dtype == data.dtype
    assert scan.spacing == (2.0, 1.0, 1.0) and scan.unit == "mm"


def test_big_endian_npy_is_returned_in_native_order(tmp_path):
    data = volume((3, 4, 5), np.uint16)
    np.save(tmp_path / "be.npy", data.astype(">u2"))
    scan = voxtopo.load(tmp_path / "be.npy")
    np.testing.assert_array_equal(scan.data, data)
    assert scan.data.dtype.isnative


def test_4d_npy_names_both_options_and_each_selects(tmp_path):
    data = volume((3, 4, 5, 6), np.uint8)
    np.save(tmp_path / "four.npy", data)
    with pytest.raises(InputError, match="timepoint=N") as info:
        voxtopo.load(tmp_path / "four.npy")
    assert "channel=N" in str(info.value)
    np.testing.assert_array_equal(voxtopo.load(tmp_path / "four.npy", timepoint=2).data,
                                  data[2])
    np.testing.assert_array_equal(voxtopo.load(tmp_path / "four.npy", channel=1).data,
                                  data[..., 1])


@pytest.mark.parametrize("byte_order", ["little", "big"])
def test_raw_with_either_byte_order_and_a_header(tmp_path, byte_order):
    data = volume((5, 6, 7), np.uint16)
    path = tmp_path / "scan.raw"
    header = b"H" * 64
    path.write_bytes(header + data.astype("<u2" if byte_order == "little" else ">u2").tobytes())
    scan = voxtopo.load(path, shape=(5, 6, 7), dtype="uint16", byte_order=byte_order,
                        offset=64, spacing=(1.5, 1.5, 1.5), unit="um")
    np.testing.assert_array_equal(scan.data, data)
    assert scan.data.dtype == np.uint16 and scan.data.dtype.isnative
    assert scan.metadata["byte_order"] == byte_order


def test_raw_float32_with_any_suffix_given_a_shape(tmp_path):
    data = volume((4, 4, 4), np.float32)
    data.tofile(tmp_path / "volume.data")
    scan = voxtopo.load(tmp_path / "volume.data", shape="4x4x4", dtype="float32")
    np.testing.assert_array_equal(scan.data, data)


# --- zarr ---------------------------------------------------------------------------------------
def _write_ome_zarr(path: Path, levels, axes, scales):
    """An OME-Zarr image as the OME-NGFF 0.4 specification lays it out: a zarr v2 group
    whose .zattrs hold "multiscales" with "axes" and one dataset per level, each with a
    "scale" coordinate transformation."""
    import zarr

    group = zarr.open_group(str(path), mode="w", zarr_format=2)
    for i, data in enumerate(levels):
        array = group.create_array(str(i), shape=data.shape, dtype=data.dtype,
                                   chunks=tuple(max(1, n // 2) for n in data.shape))
        array[...] = data
    group.attrs["multiscales"] = [{
        "version": "0.4", "name": "image", "axes": axes,
        "datasets": [{"path": str(i), "coordinateTransformations": [
            {"type": "scale", "scale": scale}]} for i, scale in enumerate(scales)],
    }]


def test_ome_zarr_levels_spacing_and_units(tmp_path):
    full = volume((8, 12, 16), np.uint16)
    half = full[::2, ::2, ::2].copy()
    path = tmp_path / "image.zarr"
    axes = [{"name": "z", "type": "space", "unit": "micrometer"},
            {"name": "y", "type": "space", "unit": "micrometer"},
            {"name": "x", "type": "space", "unit": "micrometer"}]
    _write_ome_zarr(path, [full, half], axes, [[2.0, 0.5, 0.5], [4.0, 1.0, 1.0]])
    before = digest(path)
    scan = voxtopo.load(path)
    np.testing.assert_array_equal(scan.data, full)
    assert scan.spacing == pytest.approx((2.0, 0.5, 0.5)) and scan.unit == "um"
    assert scan.metadata["format"] == "ome-zarr" and scan.metadata["levels"] == 2
    coarse = voxtopo.load(path, level=1)
    np.testing.assert_array_equal(coarse.data, half)
    assert coarse.spacing == pytest.approx((4.0, 1.0, 1.0))
    with pytest.raises(InputError, match="level=2 is out of range"):
        voxtopo.load(path, level=2)
    assert digest(path) == before


def test_ome_zarr_with_time_and_channel_axes(tmp_path):
    data = volume((2, 3, 4, 6, 6), np.uint8)
    path = tmp_path / "tc.zarr"
    axes = [{"name": "t", "type": "time", "unit": "second"},
            {"name": "c", "type": "channel"},
            {"name": "z", "type": "space", "unit": "nanometer"},
            {"name": "y", "type": "space", "unit": "nanometer"},
            {"name": "x", "type": "space", "unit": "nanometer"}]
    _write_ome_zarr(path, [data], axes, [[1.0, 1.0, 300.0, 100.0, 100.0]])
    with pytest.raises(InputError, match=r"timepoint=N and channel=M"):
        voxtopo.load(path)
    scan = voxtopo.load(path, timepoint=1, channel=2)
    np.testing.assert_array_equal(scan.data, data[1, 2])
    assert scan.spacing == pytest.approx((300.0, 100.0, 100.0)) and scan.unit == "nm"


def test_ome_zarr_0_5_keeps_its_metadata_under_ome(tmp_path):
    # OME-NGFF 0.5 (https://ngff.openmicroscopy.org/0.5/): zarr v3, attributes under "ome"
    import zarr

    data = volume((4, 6, 6), np.uint16)
    group = zarr.open_group(str(tmp_path / "v05.zarr"), mode="w", zarr_format=3)
    group.create_array("s0", shape=data.shape, dtype=data.dtype, chunks=(2, 6, 6))[...] = data
    group.attrs["ome"] = {"version": "0.5", "multiscales": [{
        "axes": [{"name": n, "type": "space", "unit": "millimeter"} for n in "zyx"],
        "datasets": [{"path": "s0", "coordinateTransformations": [
            {"type": "scale", "scale": [0.1, 0.02, 0.02]}]}]}]}
    scan = voxtopo.load(tmp_path / "v05.zarr")
    np.testing.assert_array_equal(scan.data, data)
    assert scan.spacing == pytest.approx((0.1, 0.02, 0.02)) and scan.unit == "mm"


def test_plain_zarr_array(tmp_path):
    import zarr

    data = volume((3, 5, 7), np.float32)
    array = zarr.open_array(str(tmp_path / "plain.zarr"), mode="w", shape=data.shape,
                            dtype=data.dtype, chunks=(1, 5, 7))
    array[...] = data
    scan = voxtopo.load(tmp_path / "plain.zarr", spacing=2.0, unit="um")
    np.testing.assert_array_equal(scan.data, data)
    assert scan.spacing == (2.0, 2.0, 2.0)


# --- bad input: one sentence, the right word, the input untouched --------------------------------
def _truncated_tiff(tmp_path, compression):
    path = tmp_path / f"cut_{compression}.tif"
    tifffile.imwrite(path, volume((10, 32, 32), np.uint8), compression=compression)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    return path


def _rgb(tmp_path):
    path = tmp_path / "rgb.tif"
    tifffile.imwrite(path, volume((8, 8, 3), np.uint8), photometric="rgb")
    return path


def _four_d(tmp_path):
    path = tmp_path / "t.tif"
    tifffile.imwrite(path, volume((2, 3, 8, 8), np.uint8), imagej=True,
                     metadata={"axes": "TZYX"})
    return path


def _garbage(tmp_path):
    path = tmp_path / "garbage.tif"
    path.write_bytes(b"this is not a TIFF file at all\n" * 20)
    return path


def _empty_folder(tmp_path):
    folder = tmp_path / "empty"
    folder.mkdir()
    return folder


def _unknown_suffix(tmp_path):
    path = tmp_path / "scan.xyz"
    path.write_bytes(b"\x00" * 64)
    return path


def _pickled(tmp_path):
    path = tmp_path / "objects.npy"
    np.save(path, np.array([{"a": 1}, None], dtype=object), allow_pickle=True)
    return path


def _truncated_npy(tmp_path):
    path = tmp_path / "short.npy"
    np.save(path, volume((10, 10, 10), np.uint16))
    path.write_bytes(path.read_bytes()[:-100])
    return path


def _raw(tmp_path):
    path = tmp_path / "scan.raw"
    path.write_bytes(b"\x01" * 1000)
    return path


BAD_INPUTS = {
    # name: (make the input, load keyword arguments, words that must appear)
    "missing path": (lambda d: d / "nowhere.tif", {}, ["No file or folder"]),
    "glob without matches": (lambda d: str(d / "nothing_*.tif"), {}, ["No files match"]),
    "garbage TIFF": (_garbage, {}, ["not a readable TIFF"]),
    "truncated TIFF": (lambda d: _truncated_tiff(d, None), {}, ["truncated"]),
    "truncated zlib TIFF": (lambda d: _truncated_tiff(d, "zlib"), {}, ["truncated"]),
    "empty folder": (_empty_folder, {}, ["holds no .tif"]),
    "unknown suffix": (_unknown_suffix, {}, ["Cannot read", ".npy"]),
    "RGB": (_rgb, {}, ["RGB", "channel=N", "--channel N"]),
    "4D": (_four_d, {}, ["timepoint=N", "--timepoint N"]),
    "pickled npy": (_pickled, {}, ["pickles"]),
    "truncated npy": (_truncated_npy, {}, ["truncated", "2000 bytes", "1900"]),
    "raw without shape": (_raw, {}, ["shape", "--raw-shape"]),
    "raw size mismatch": (_raw, {"shape": (10, 10, 10), "dtype": "uint16"},
                          ["1000 bytes", "2000 bytes"]),
    "raw negative offset": (_raw, {"shape": (10, 10), "dtype": "uint8", "offset": -1},
                            ["offset"]),
    "channel out of range": (_rgb, {"channel": 3}, ["out of range", "0 to 2"]),
}


@pytest.mark.parametrize("name", list(BAD_INPUTS))
def test_bad_input_gets_one_clear_sentence_and_is_left_unchanged(tmp_path, name):
    make, options, words = BAD_INPUTS[name]
    target = make(tmp_path)
    before = digest(tmp_path)
    files_before = listing(tmp_path)
    with pytest.raises(InputError) as info:
        voxtopo.load(target, **options)
    message = str(info.value)
    for word in words:
        assert word in message
    assert "\n" not in message and message.endswith(".")
    assert digest(tmp_path) == before and listing(tmp_path) == files_before


def test_too_big_for_memory_is_refused_before_reading(tmp_path, monkeypatch):
    path = tmp_path / "big.tif"
    tifffile.imwrite(path, np.zeros((20, 100, 100), np.uint16))     # 400 kB of pixels
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(100_000))
    before = digest(path)
    with pytest.raises(TooBigError, match="400.0 kB"):
        voxtopo.load(path)
    # picking one time point or channel is only estimated for what is read
    np.save(tmp_path / "four.npy", np.zeros((10, 50, 50, 2), np.uint8))     # 50 kB
    monkeypatch.setenv("VOXTOPO_MEMORY_LIMIT", str(20_000))
    assert voxtopo.load(tmp_path / "four.npy", timepoint=0).shape == (50, 50, 2)
    with pytest.raises(TooBigError, match="memory"):
        voxtopo.load(tmp_path / "four.npy", channel=0)
    assert digest(path) == before


def test_constant_and_one_voxel_thick_inputs_load(tmp_path):
    np.save(tmp_path / "flat.npy", np.zeros((1, 8, 8), np.uint8))
    assert voxtopo.load(tmp_path / "flat.npy").shape == (1, 8, 8)
    tifffile.imwrite(tmp_path / "const.tif", np.full((3, 4, 4), 7, np.uint8),
                     photometric="minisblack")
    assert (voxtopo.load(tmp_path / "const.tif").data == 7).all()


# --- through the command line -----------------------------------------------------------------
CLI_BAD = {
    "missing path": (lambda d: [str(d / "nowhere.tif")], "No file or folder"),
    "garbage TIFF": (lambda d: [str(_garbage(d))], "not a readable TIFF"),
    "truncated TIFF": (lambda d: [str(_truncated_tiff(d, "zlib"))], "truncated"),
    "RGB": (lambda d: [str(_rgb(d))], "--channel N"),
    "4D": (lambda d: [str(_four_d(d))], "--timepoint N"),
    "raw size mismatch": (lambda d: [str(_raw(d)), "--raw-shape", "10,10,10",
                                     "--raw-dtype", "uint16"], "2000 bytes"),
    "empty folder": (lambda d: [str(_empty_folder(d))], "holds no .tif"),
}


@pytest.mark.parametrize("name", list(CLI_BAD))
def test_cli_bad_input_exits_2_with_one_line_and_no_output_folder(tmp_path, name, capsys):
    from voxtopo.cli import main

    make, word = CLI_BAD[name]
    work = tmp_path / "in"
    work.mkdir()
    args = make(work)
    before = digest(work)
    out = tmp_path / "result"
    code = main(["analyse", *args, "--out", str(out)])
    captured = capsys.readouterr()
    assert code == 2, captured.err
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and word in lines[0], captured.err
    assert "Traceback" not in captured.err and captured.out == ""
    assert not out.exists()
    assert listing(tmp_path) == sorted(["in"] + [f"in/{p}" for p in listing(work)])
    assert digest(work) == before


def test_cli_in_a_fresh_process_prints_no_traceback_nor_tifffile_log(tmp_path):
    path = _truncated_tiff(tmp_path, "zlib")
    out = tmp_path / "result"
    proc = subprocess.run([sys.executable, "-m", "voxtopo.cli", "analyse", str(path),
                           "--out", str(out)], capture_output=True, text=True,
                          env=dict(os.environ, PYTHONWARNINGS="ignore"))
    assert proc.returncode == 2
    assert len(proc.stderr.strip().splitlines()) == 1 and "truncated" in proc.stderr
    assert not out.exists()


def test_cli_channel_option_reaches_the_loader(tmp_path):
    from voxtopo.cli import main

    path = _rgb(tmp_path)
    out = tmp_path / "result"
    assert main(["analyse", str(path), "--channel", "1", "--out", str(out)]) == 0
    summary = json.loads((out / "summary.json").read_text())
    assert summary["scan"]["shape"] == [8, 8]


def test_read_header_gives_the_shape_and_dtype_without_reading_voxels(tmp_path):
    """The header's shape and dtype match what tifffile and numpy write (tifffile, Gohlke;
    numpy's .npy format), and a raw file's given shape; bad paths get one sentence."""
    from voxtopo.io import read_header

    stack = np.zeros((3, 8, 9), dtype=np.uint16)
    tifffile.imwrite(tmp_path / "stack.tif", stack, imagej=True, metadata={"axes": "ZYX"})
    np.save(tmp_path / "volume.npy", np.zeros((4, 5, 6), dtype=np.float32))
    np.zeros((2, 3, 4), dtype=">i2").tofile(tmp_path / "volume.raw")
    with tifffile.TiffFile(tmp_path / "stack.tif") as tif:
        tiff_shape = tif.series[0].shape
    assert read_header(tmp_path / "stack.tif") == (tiff_shape, np.dtype(np.uint16))
    assert read_header(tmp_path / "volume.npy") == ((4, 5, 6), np.dtype(np.float32))
    shape, dtype = read_header(tmp_path / "volume.raw", shape=(2, 3, 4), dtype="int16",
                               byte_order="big")
    assert shape == (2, 3, 4) and dtype.kind == "i" and dtype.itemsize == 2
    with pytest.raises(InputError, match="No file or folder"):
        read_header(tmp_path / "missing.tif")


# ----------------------------------------------------------------------------- mapped reads
def _resident_kb() -> int:
    with open("/proc/self/status") as fh:
        return int(fh.read().split("VmRSS:")[1].split()[0])


def _plain_files(tmp_path, data):
    """The same volume as .npy (NumPy), raw (NumPy tofile) and uncompressed TIFF
    (tifffile): all three hold the bytes as they are."""
    np.save(tmp_path / "v.npy", data)
    data.tofile(tmp_path / "v.raw")
    tifffile.imwrite(tmp_path / "v.tif", data, imagej=True, metadata={"axes": "ZYX"})
    raw = {"shape": data.shape, "dtype": str(data.dtype)}
    return [(tmp_path / "v.npy", {}), (tmp_path / "v.raw", raw), (tmp_path / "v.tif", {})]


def test_mapped_reads_equal_reads_and_never_write(tmp_path):
    data = volume((5, 17, 23), np.uint16)
    for path, options in _plain_files(tmp_path, data):
        before = digest(path)
        scan = voxtopo.load(path, mapped=True, **options)
        assert is_mapped(scan.data), path
        assert not scan.data.flags.writeable
        np.testing.assert_array_equal(scan.data, data)
        np.testing.assert_array_equal(scan.data, voxtopo.load(path, **options).data)
        with pytest.raises(ValueError):
            scan.data[0, 0, 0] = 1
        assert digest(path) == before


def test_files_that_cannot_be_mapped_are_read(tmp_path):
    # a compressed TIFF, a big-endian raw file, a Fortran-order .npy: not the bytes of a
    # C-ordered array in this machine's order, so they are read (and converted) as before
    data = volume((4, 9, 11), np.uint16)
    tifffile.imwrite(tmp_path / "z.tif", data, compression="zlib", photometric="minisblack")
    data.astype(">u2").tofile(tmp_path / "big.raw")
    np.save(tmp_path / "f.npy", np.asfortranarray(data))
    cases = [(tmp_path / "z.tif", {}),
             (tmp_path / "big.raw", {"shape": data.shape, "dtype": "uint16",
                                     "byte_order": "big"}),
             (tmp_path / "f.npy", {})]
    for path, options in cases:
        scan = voxtopo.load(path, mapped=True, **options)
        assert not is_mapped(scan.data), path
        np.testing.assert_array_equal(scan.data, data)


def test_released_pages_leave_memory_and_read_back_the_same(tmp_path):
    # Linux man-pages, madvise(2), MADV_DONTNEED: later accesses of a file mapping read
    # the pages again from the file; the resident set shrinks meanwhile
    data = RNG.integers(0, 65535, size=(64, 512, 512), dtype=np.uint16)   # 32 MiB
    np.save(tmp_path / "big.npy", data)
    scan = voxtopo.load(tmp_path / "big.npy", mapped=True)
    total = int(scan.data.sum(dtype=np.int64))            # every page read once
    resident = _resident_kb()
    assert release_pages(scan.data)
    assert resident - _resident_kb() > 24 * 1024          # most of the 32 MiB given back
    assert int(scan.data.sum(dtype=np.int64)) == total == int(data.sum(dtype=np.int64))
    assert not release_pages(data)         # an array in memory: nothing
