"""Rhythms in time-lapse stacks: sliding-window persistence, time axes, the periodicity job.

Every check names the outside source of its expected value.
"""

import json
import subprocess
import sys

import gudhi
import numpy as np
import pandas as pd
import pytest
import tifffile
from scipy import signal as scipy_signal
from scipy import stats

from voxtopo import InputError
from voxtopo.periodicity import (Method, measure, pixel_signals, region_signals, rips_bars,
                                 sliding_windows, tile_signals)
from voxtopo.periodicity._field import field_rhythm

SQRT3 = np.sqrt(3.0)


def _cosine(frames, period, phase=0.0):
    return np.cos(2 * np.pi * np.arange(frames) / period + phase)


# --- the score of a pure cosine and of white noise --------------------------------------
def test_evenly_spaced_circle_loses_its_loop_at_the_inscribed_triangle():
    """Adamaszek & Adams 2017 (Pacific J. Math. 290): the H1 bar of the Rips complex of a
    circle of radius r dies at r sqrt(3), the side of the inscribed equilateral triangle;
    for n evenly spaced points (n divisible by 3) that is exactly the chord over n/3
    steps, and the bar is born at the chord of one step."""
    radius = 2.5
    angle = np.linspace(0, 2 * np.pi, 60, endpoint=False)
    circle = radius * np.column_stack([np.cos(angle), np.sin(angle)])
    for p in (2, 3):
        bars = rips_bars(circle, fields=(p,))[(p, 1)]
        assert len(bars) == 1
        assert bars[0, 1] == pytest.approx(radius * SQRT3, rel=1e-9)
        assert bars[0, 0] == pytest.approx(2 * radius * np.sin(np.pi / 60), rel=1e-9)


def test_pure_cosine_scores_close_to_one():
    """Adamaszek & Adams 2017: the normalised sliding-window cloud of a cosine lies on a
    circle of radius 1 (Perea & Harer 2015), whose H1 bar dies at sqrt(3), so the score
    (longest bar / sqrt(3), Perea, Deckard, Haase & Harer 2015) is 1 minus the birth over
    sqrt(3). The birth is at most the widest gap between neighbouring cloud points; for 150
    max-min points on a circle of circumference 2 pi that gap is at most twice the even
    spacing, 2 * 2 pi / 150 = 0.084, so the score is at least 1 - 0.084 / sqrt(3) = 0.95.
    Periods of 12 frames or more, where cubic interpolation between frames keeps the loop
    round (with 7 frames per period it scores 0.94)."""
    traces = np.stack([_cosine(240, period) for period in (12.0, 20.0, 31.7)])
    table = measure(traces, method=Method(points=150, surrogates=0))
    assert (table["score"] >= 1 - 2 * 2 * np.pi / 150 / SQRT3).all(), table["score"]
    assert (table["score"] <= 1 + 1e-9).all()
    assert (table["score_z3"] == table["score"]).all()   # no torsion on a circle


def test_white_noise_has_low_scores_and_uniform_p_values():
    """Theiler et al. 1992 and Besag & Clifford 1989: under the null the Monte Carlo
    p-value (1 + #{surrogate >= observed}) / (1 + N) is uniform; surrogates of white noise
    are white noise, so the p-values of white noise must pass a Kolmogorov-Smirnov test
    against the uniform law (scipy.stats.kstest, level 0.01). Low scores: white noise has
    no loop; its scores stay below half of the cosine's (from memory, Perea et al. 2015
    show noise scores well below those of rhythmic signals; tolerance generous)."""
    rng = np.random.default_rng(7)
    noise = rng.standard_normal((80, 160))
    table = measure(noise, method=Method(points=30, surrogates=49, seed=3))
    assert table["score"].median() < 0.3
    assert stats.kstest(table["p_value"], "uniform").pvalue > 0.01
    assert table["significant"].mean() < 0.15


def test_damped_cosine_is_still_significant():
    """Perea et al. 2015 (SW1PerS): centring and normalising each window removes a slowly
    changing amplitude, so a damped oscillation still traces a loop. A cosine with an
    e-folding time of two periods over 5 periods, plus 1 % noise, is significant at 0.05
    against 99 random-phase surrogates of its smoothed spectrum (Theiler et al. 1992)."""
    rng = np.random.default_rng(1)
    period, frames = 24.0, 120
    time = np.arange(frames)
    trace = np.exp(-time / (2 * period)) * np.cos(2 * np.pi * time / period)
    trace = trace + 0.01 * rng.standard_normal(frames)
    table = measure(trace[None], method=Method(points=60, surrogates=99, seed=2))
    assert table["p_value"][0] <= 0.05
    assert table["significant"][0]
    assert table["period"][0] == pytest.approx(period, rel=0.05)
    # the envelope's decay rate is 1 / (2 period) (closed form of the damped cosine)
    assert table["damping"][0] == pytest.approx(1 / (2 * period), rel=0.25)


@pytest.mark.parametrize("waveform", ["square", "sawtooth"])
def test_square_and_sawtooth_waves_are_still_periodic(waveform):
    """Perea & Harer 2015: any periodic signal traces a closed loop in its sliding-window
    embedding, not only a sinusoid; with M >= 2N the first N harmonics keep their shape.
    scipy.signal's square and sawtooth waves with 5 % noise must be significant and keep
    their period within 5 %."""
    rng = np.random.default_rng(4)
    period, frames = 18.0, 180
    phase = 2 * np.pi * np.arange(frames) / period
    trace = getattr(scipy_signal, waveform)(phase) + 0.05 * rng.standard_normal(frames)
    table = measure(trace[None], method=Method(points=60, surrogates=99, seed=5))
    assert table["significant"][0], table
    assert table["period"][0] == pytest.approx(period, rel=0.05)
    assert table["score"][0] > 0.5


def test_period_error_is_at_most_five_percent_on_noisy_sinusoids():
    """The period of a sinusoid is the reciprocal of its frequency (definition, common
    practice, no source); with noise of half the amplitude the estimate stays within 5 %."""
    rng = np.random.default_rng(11)
    periods = np.array([4.5, 9.0, 13.7, 22.0, 37.5, 60.0])
    frames = 300
    traces = np.stack([_cosine(frames, p, rng.uniform(0, 2 * np.pi)) for p in periods])
    traces += 0.5 * rng.standard_normal(traces.shape)
    table = measure(traces, frame_interval=0.2, method=Method(points=30, surrogates=0))
    np.testing.assert_allclose(table["period"], periods * 0.2, rtol=0.05)


def test_amplitude_of_a_sinusoid_in_the_signals_own_units():
    """A sinusoid a cos(w t) has standard deviation a / sqrt(2) (closed form)."""
    trace = 40.0 + 7.0 * _cosine(400, 16.0)
    table = measure(trace[None], method=Method(points=30, surrogates=0))
    assert table["amplitude"][0] == pytest.approx(7.0, rel=0.01)


# --- Rips bars against gudhi ------------------------------------------------------------
def test_rips_bars_equal_gudhi_rips_complex():
    """gudhi's RipsComplex (Maria et al. 2014) on the same sliding-window clouds: the H1
    bars of our kernel over Z/2 and Z/3 must be the same multiset."""
    rng = np.random.default_rng(5)
    traces = np.stack([_cosine(150, 13.0) + 0.3 * rng.standard_normal(150),
                       rng.standard_normal(150),
                       scipy_signal.sawtooth(2 * np.pi * np.arange(150) / 21.0)])
    clouds = sliding_windows(traces, np.array([13.0, 9.0, 21.0]), points=40)
    for cloud in clouds:
        ours = rips_bars(cloud, fields=(2, 3))
        for p in (2, 3):
            tree = gudhi.RipsComplex(points=cloud).create_simplex_tree(max_dimension=2)
            tree.compute_persistence(homology_coeff_field=p)
            theirs = np.array([bar for bar in tree.persistence_intervals_in_dimension(1)
                               if bar[1] > bar[0]]).reshape(-1, 2)
            key = np.lexsort
            np.testing.assert_allclose(ours[(p, 1)][key(ours[(p, 1)].T[::-1])],
                                       theirs[key(theirs.T[::-1])], rtol=1e-12)


def test_the_plain_python_twin_of_the_kernel_gives_the_same_bars():
    """The kernel's pure-Python twin (numba's py_func) on tiny clouds, tied distances
    included, against gudhi's RipsComplex (Maria et al. 2014)."""
    from voxtopo.periodicity._rips_kernel import h1_bars

    rng = np.random.default_rng(8)
    for n in (4, 7, 11):
        cloud = np.round(rng.standard_normal((n, 3)), 1)
        for p in (2, 3):
            twin = h1_bars.py_func(cloud, p)
            np.testing.assert_allclose(np.sort(twin, axis=0), np.sort(h1_bars(cloud, p), axis=0))
            tree = gudhi.RipsComplex(points=cloud).create_simplex_tree(max_dimension=2)
            tree.compute_persistence(homology_coeff_field=p)
            theirs = np.array([b for b in tree.persistence_intervals_in_dimension(1)
                               if b[1] > b[0]]).reshape(-1, 2)
            np.testing.assert_allclose(np.sort(twin, axis=0), np.sort(theirs, axis=0))


def test_projective_plane_has_a_loop_over_z2_and_none_over_z3():
    """Hatcher 2002: the real projective plane has H1 = Z/2 over Z/2 and 0 over Z/3. A
    sample of the Veronese embedding of the sphere (antipodal points identified) must give
    the Rips complex a long H1 bar over Z/2 only, as in gudhi (Maria et al. 2014). 120
    points: the kernel itself, beyond the size at which rips_bars hands over to gudhi."""
    rng = np.random.default_rng(2)
    sphere = rng.standard_normal((2000, 3))
    sphere /= np.linalg.norm(sphere, axis=1, keepdims=True)
    x, y, z = sphere.T
    veronese = np.column_stack([x * x, y * y, z * z, np.sqrt(2) * x * y, np.sqrt(2) * x * z,
                                np.sqrt(2) * y * z])
    from voxtopo.periodicity._embedding import maxmin_batch
    from voxtopo.periodicity._rips_kernel import h1_bars
    cloud = veronese[maxmin_batch(veronese[None], 120)[0]]
    bars = {(p, 1): h1_bars(cloud, p) for p in (2, 3)}     # the kernel, at any size
    longest = {p: float(np.max(bars[(p, 1)][:, 1] - bars[(p, 1)][:, 0])) for p in (2, 3)}
    assert longest[2] > 3 * longest[3], longest
    for p in (2, 3):
        tree = gudhi.RipsComplex(points=cloud).create_simplex_tree(max_dimension=2)
        tree.compute_persistence(homology_coeff_field=p)
        theirs = np.array([b for b in tree.persistence_intervals_in_dimension(1)
                           if b[1] > b[0]]).reshape(-1, 2)
        np.testing.assert_allclose(np.sort(bars[(p, 1)], axis=0), np.sort(theirs, axis=0),
                                   rtol=1e-12)


# --- whole-field rhythm: loop and torus -------------------------------------------------
def _travelling_waves(frames, periods):
    """A 16 x 16 field whose top half carries a wave of the first period and bottom half
    one of the second, each travelling along x."""
    time = np.arange(frames)[:, None, None]
    yy, xx = np.mgrid[0:16, 0:16]
    field = np.zeros((frames, 16, 16))
    for k, period in enumerate(periods):
        rows = (yy >= 8 * k) & (yy < 8 * (k + 1)) if len(periods) > 1 else np.ones_like(yy, bool)
        field += np.cos(2 * np.pi * (time / period - xx / 8.0)) * rows
    return field


def test_two_incommensurate_rhythms_give_a_torus_over_both_fields():
    """Tralie & Perea 2018 and Hatcher 2002: the sliding windows of a video with two
    incommensurate frequencies fill a 2-torus, whose Betti numbers are (1, 2, 1) over
    Z/2 and over Z/3. The two longest H1 bars and the longest H2 bar must each be more
    than three times longer than the next bar of their dimension (common practice, no
    source: a gap between long and short bars separates features from noise)."""
    golden = (1 + np.sqrt(5)) / 2
    rhythm = field_rhythm(_travelling_waves(600, (20.0, 20.0 * golden * 1.3)), points=200)
    for p in (2, 3):
        h1, h2 = rhythm.longest[p]["h1"], rhythm.longest[p]["h2"]
        assert min(h1[:2]) > 3 * h1[2], rhythm.longest
        assert h2[0] > 3 * h2[1], rhythm.longest


def test_one_rhythm_gives_a_loop_without_h2():
    """Perea & Harer 2015 / Tralie & Perea 2018: a periodic video traces one loop: one long
    H1 bar, and no H2 bar longer than a tenth of it (a circle has Betti numbers (1, 1, 0),
    Hatcher 2002)."""
    rhythm = field_rhythm(_travelling_waves(300, (20.0,)), points=150)
    for p in (2, 3):
        h1, h2 = rhythm.longest[p]["h1_full_scale"], rhythm.longest[p]["h2"]
        assert h1[0] > 3 * h1[1]
        assert h2[0] < 0.1 * h1[0]
    assert rhythm.period == pytest.approx(20.0, rel=0.05)
    assert rhythm.score > 0.85   # Adamaszek & Adams 2017, sampling gap as above


# --- signals ----------------------------------------------------------------------------
def test_binned_tiled_and_region_signals_are_means_of_their_pixels():
    """The mean over a set of pixels (definition; numpy.mean is the reference)."""
    rng = np.random.default_rng(0)
    stack = rng.random((5, 7, 9))
    binned = pixel_signals(stack, bin=3)
    np.testing.assert_allclose(binned.traces[0], stack[:, :3, :3].mean(axis=(1, 2)))
    np.testing.assert_allclose(binned.traces[-1], stack[:, 6:, 6:].mean(axis=(1, 2)))
    tiles = tile_signals(stack, tiles=2)
    np.testing.assert_allclose(tiles.traces[3], stack[:, 4:, 5:].mean(axis=(1, 2)))
    labels = np.zeros((7, 9), dtype=np.int32)
    labels[1:3, 2:6] = 4
    labels[5, :] = 9
    regions = region_signals(stack, labels)
    assert regions.labels.tolist() == [4, 9]
    np.testing.assert_allclose(regions.traces[1], stack[:, 5, :].mean(axis=1))
    painted = regions.paint([0.5, 0.25])
    assert painted[2, 3] == 0.5 and painted[5, 0] == 0.25 and np.isnan(painted[0, 0])


# --- bad input (library) ----------------------------------------------------------------
def test_measure_refuses_one_frame_nan_frames_and_too_few_frames():
    """Bad input gets one sentence naming what is wrong (house rule, no source)."""
    with pytest.raises(InputError, match="1 frame"):
        measure(np.zeros((2, 1)))
    trace = _cosine(50, 10.0)
    trace[7] = np.nan
    with pytest.raises(InputError, match="frame 7"):
        measure(trace[None])
    with pytest.raises(InputError, match="two periods must fit"):
        measure(_cosine(50, 10.0)[None], frame_interval=0.5,
                method=Method(periods=(2.0, 20.0)))
    with pytest.raises(InputError, match="shape"):
        region_signals(np.zeros((4, 5, 5)), np.ones((5, 6), dtype=int))


# --- time axes in the loaders -----------------------------------------------------------
def test_time_axis_and_interval_from_an_imagej_hyperstack(tmp_path):
    """ImageJ hyperstack written by tifffile (Gohlke's reference writer of the ImageJ
    format): axes TZYX, ``finterval`` in ``tunit``; 1.5 min is 90 s."""
    from voxtopo.io import load_timelapse

    data = np.arange(5 * 3 * 6 * 7, dtype=np.uint16).reshape(5, 3, 6, 7)
    path = tmp_path / "beats.tif"
    tifffile.imwrite(path, data, imagej=True, resolution=(2.0, 2.0),
                     metadata={"axes": "TZYX", "finterval": 1.5, "tunit": "min",
                               "spacing": 0.8, "unit": "um"})
    lapse = load_timelapse(path)
    np.testing.assert_array_equal(lapse.data, data)
    assert lapse.frame_interval == pytest.approx(90.0)
    assert lapse.time_unit == "s"
    assert lapse.spacing == pytest.approx((0.8, 0.5, 0.5)) and lapse.unit == "um"


def test_time_axis_and_interval_from_an_ome_tiff(tmp_path):
    """OME-TIFF written by tifffile: Pixels TimeIncrement 250 with TimeIncrementUnit ms
    (OME schema) is 0.25 s; DimensionOrder puts T first in tifffile's TYX series."""
    from voxtopo.io import load_timelapse

    data = np.arange(6 * 5 * 7, dtype=np.uint8).reshape(6, 5, 7)
    path = tmp_path / "beats.ome.tif"
    tifffile.imwrite(path, data, ome=True,
                     metadata={"axes": "TYX", "TimeIncrement": 250,
                               "TimeIncrementUnit": "ms", "PhysicalSizeX": 0.4,
                               "PhysicalSizeY": 0.4})
    lapse = load_timelapse(path)
    np.testing.assert_array_equal(lapse.data, data)
    assert lapse.frame_interval == pytest.approx(0.25)
    assert lapse.spacing == pytest.approx((0.4, 0.4))


def test_time_axis_from_an_ome_zarr_and_a_folder_of_frames(tmp_path):
    """OME-Zarr (NGFF 0.4): an axis of type "time" with unit "millisecond" and scale 40
    is 0.04 s between frames. A folder of frames gets its time axis from axes="TYX" and
    its interval from frame_interval (nothing in the files says either)."""
    import zarr

    from voxtopo.io import load_timelapse

    data = np.arange(4 * 5 * 6, dtype=np.uint16).reshape(4, 5, 6)
    store = tmp_path / "beats.zarr"
    group = zarr.open_group(str(store), mode="w", zarr_format=2)
    group.create_array("0", shape=data.shape, dtype=data.dtype, chunks=(2, 5, 6))[...] = data
    group.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": "t", "type": "time", "unit": "millisecond"},
                 {"name": "y", "type": "space", "unit": "micrometer"},
                 {"name": "x", "type": "space", "unit": "micrometer"}],
        "datasets": [{"path": "0", "coordinateTransformations": [
            {"type": "scale", "scale": [40.0, 0.3, 0.3]}]}]}]
    lapse = load_timelapse(store)
    np.testing.assert_array_equal(lapse.data, data)
    assert lapse.frame_interval == pytest.approx(0.04)
    assert lapse.spacing == pytest.approx((0.3, 0.3)) and lapse.unit == "um"

    folder = tmp_path / "frames"
    folder.mkdir()
    for i, frame in enumerate(data):
        tifffile.imwrite(folder / f"frame_{i}.tif", frame)
    with pytest.raises(InputError, match="no time axis"):
        load_timelapse(folder)
    lapse = load_timelapse(folder, axes="TYX", frame_interval=0.5)
    np.testing.assert_array_equal(lapse.data, data)
    assert lapse.frame_interval == 0.5 and lapse.time_unit == "s"


def test_a_stack_without_interval_counts_time_in_frames(tmp_path):
    """House rule (no source): no interval in the file and none given means the unit is
    written down as frames, never silently seconds."""
    from voxtopo.io import load_timelapse

    path = tmp_path / "plain.npy"
    np.save(path, np.zeros((6, 4, 4), dtype=np.float32))
    lapse = load_timelapse(path, axes="TYX")
    assert lapse.time_unit == "frame" and lapse.frame_interval == 1.0
    with pytest.raises(InputError, match="axes='TZYX'"):
        load_timelapse(path, axes="TZYX")


def test_analyse_refuses_a_time_lapse_and_points_to_periodicity(tmp_path):
    """House rule (no source): a T stack is not a volume; `voxtopo analyse` says so in one
    sentence, exits 2, writes nothing, and works with --timepoint."""
    path = tmp_path / "beats.tif"
    data = (100 + 50 * np.cos(2 * np.pi * np.arange(6) / 3))[:, None, None] * np.ones((6, 8, 8))
    tifffile.imwrite(path, data.astype(np.uint16), imagej=True,
                     metadata={"axes": "TYX", "finterval": 0.1})
    result = _run("analyse", path, "--out", tmp_path / "out")
    assert result.returncode == 2
    assert "--timepoint" in result.stderr and "voxtopo periodicity" in result.stderr
    assert "Traceback" not in result.stderr and len(result.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()
    result = _run("analyse", path, "--out", tmp_path / "one", "--timepoint", "2",
                  "--min-persistence", "0")
    assert result.returncode == 0, result.stderr


def _run(*args):
    return subprocess.run([sys.executable, "-m", "voxtopo.cli", *map(str, args)],
                          capture_output=True, text=True)


# --- the job and `voxtopo periodicity` ----------------------------------------------------
def _beating_stack(frames=120, interval=0.1, shape=(24, 24), seed=0):
    """Noise around 100 with a disc beating at period 1.5 s (our own scenario)."""
    rng = np.random.default_rng(seed)
    time = np.arange(frames) * interval
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    disc = (yy - 8) ** 2 + (xx - 8) ** 2 < 30
    stack = 100 + 4 * rng.standard_normal((frames,) + shape)
    stack += 20 * np.cos(2 * np.pi * time / 1.5)[:, None, None] * disc
    return stack.astype(np.float32), disc


def test_periodicity_command_writes_a_complete_result_folder(tmp_path):
    """The disc's period is the one it was made with, 1.5 s, read back within 5 % (the
    definition of the period; common practice, no source); score.tif keeps the pixel size
    of the ImageJ file (resolution 2 pixels per um is 0.5 um, TIFF 6.0 / ImageJ)."""
    stack, disc = _beating_stack()
    path = tmp_path / "beats.tif"
    tifffile.imwrite(path, stack, imagej=True, resolution=(2.0, 2.0),
                     metadata={"axes": "TYX", "finterval": 0.1, "unit": "um"})
    labels = np.zeros(disc.shape, dtype=np.uint16)
    labels[disc] = 1
    labels[18:, 18:] = 2
    tifffile.imwrite(tmp_path / "labels.tif", labels)
    out = tmp_path / "rhythm"
    result = _run("periodicity", path, "--out", out, "--regions", tmp_path / "labels.tif",
                  "--surrogates", "49", "--no-whole-field")
    assert result.returncode == 0, result.stderr
    assert {"score.tif", "period.tif", "regions.csv", "summary.json", "score_map.png",
            "period_histogram.png", "top_regions.png", "report.html"} <= \
        {p.name for p in out.iterdir()}
    table = pd.read_csv(out / "regions.csv")
    assert table["region"].tolist() == [1, 2]
    assert table["period"][0] == pytest.approx(1.5, rel=0.05)
    assert bool(table["significant"][0]) and not bool(table["significant"][1])
    # position in the scan's unit: the disc is centred on pixel (8, 8), 0.5 um each
    assert table["centre_y"][0] == pytest.approx(4.0, abs=0.05)
    assert table["centre_x"][0] == pytest.approx(4.0, abs=0.05)
    assert table["centre_voxel_y"][0] == pytest.approx(8.0, abs=0.1)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["counts"]["statement"].startswith("1 significant of 2 regions at alpha 0.05")
    units = summary["columns"]["regions.csv"]
    assert list(units) == list(table.columns)
    assert units["period"] == "s" and units["damping"] == "1/s"
    assert units["centre_y"] == "um" and units["centre_voxel_y"] == "voxel index"
    with tifffile.TiffFile(out / "period.tif") as tif:
        period_map = tif.asarray()
        assert tif.pages[0].tags["XResolution"].value[0] / tif.pages[0].tags["XResolution"].value[1] \
            == pytest.approx(2.0)
    assert period_map[8, 8] == pytest.approx(table["period"][0], rel=1e-6)
    assert np.isnan(period_map[0, 23])
    html = (out / "report.html").read_text()
    assert "not a medical diagnosis" in html and "1 significant of 2 regions" in html


def test_per_pixel_maps_find_the_beating_disc(tmp_path):
    """Per-pixel maps with a pooled surrogate null (Theiler et al. 1992; Besag & Clifford
    1989): the disc's pixels are significant; of the noise pixels, about alpha are (a valid
    test; tolerance three binomial standard deviations)."""
    from voxtopo.io import load_timelapse
    from voxtopo.jobs.periodicity import PeriodicityOptions, run, write

    stack, disc = _beating_stack(seed=3)
    np.save(tmp_path / "beats.npy", stack)
    lapse = load_timelapse(tmp_path / "beats.npy", axes="TYX", frame_interval=0.1)
    result = run(lapse, PeriodicityOptions(surrogates=99, whole_field=False, top=2))
    significant = result.signals.paint(result.table["significant"].to_numpy()) > 0
    assert significant[disc].mean() > 0.95
    noise = ~disc
    rate, n = significant[noise].mean(), noise.sum()
    assert rate < 0.05 + 3 * np.sqrt(0.05 * 0.95 / n)
    write(result, tmp_path / "maps")
    score = tifffile.imread(tmp_path / "maps" / "score.tif")
    assert score.shape == disc.shape and score[disc].min() > score[noise].mean()


@pytest.mark.parametrize("case", ["one frame", "too few frames", "nan frame", "regions shape",
                                  "bin and tiles"])
def test_periodicity_refuses_bad_input_with_one_sentence(tmp_path, case):
    """House rules (no source): one sentence, exit code 2, no traceback, nothing written,
    the input untouched."""
    stack, _ = _beating_stack(frames=40)
    path = tmp_path / "beats.tif"
    extra = []
    if case == "one frame":
        stack = stack[:1]
    if case == "too few frames":
        extra = ["--periods", "0.5:3"]      # 40 frames of 0.1 s hold one 3 s period only
    if case == "nan frame":
        stack[7, 3, 3] = np.nan
    if case == "regions shape":
        tifffile.imwrite(tmp_path / "labels.tif", np.ones((10, 12), dtype=np.uint8))
        extra = ["--regions", tmp_path / "labels.tif"]
    if case == "bin and tiles":
        extra = ["--bin", "2", "--tiles", "3"]
    tifffile.imwrite(path, stack, imagej=True, metadata={"axes": "TYX", "finterval": 0.1})
    before = path.read_bytes()
    out = tmp_path / "rhythm"
    result = _run("periodicity", path, "--out", out, "--surrogates", "9", *extra)
    assert result.returncode == 2, result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.stderr, result.stderr
    expected = {"one frame": "single image", "too few frames": "two periods must fit",
                "nan frame": "frame 7", "regions shape": "shape (10, 12)",
                "bin and tiles": "only one of"}[case]
    assert expected in lines[0]
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".rhythm")]
    assert path.read_bytes() == before


def test_a_time_series_of_volumes_gives_volume_maps_in_the_scans_unit(tmp_path):
    """TZYX ImageJ hyperstack (tifffile): a ball beating at 1 s; its region's centre is the
    ball's centre times the voxel size (z spacing 2 um from the ImageJ description, x and y
    0.5 um from the resolution tags) and its period 1 s within 5 % (definition of the
    period; common practice, no source)."""
    from voxtopo.io import load_timelapse
    from voxtopo.jobs.periodicity import PeriodicityOptions, run

    rng = np.random.default_rng(6)
    time = np.arange(80) * 0.1
    zz, yy, xx = np.mgrid[0:7, 0:12, 0:12]
    ball = (zz - 3) ** 2 + (yy - 5) ** 2 + (xx - 6) ** 2 < 8
    stack = 100 + 3 * rng.standard_normal((80, 7, 12, 12))
    stack += 20 * np.cos(2 * np.pi * time)[:, None, None, None] * ball
    path = tmp_path / "volumes.tif"
    tifffile.imwrite(path, stack.astype(np.float32), imagej=True, resolution=(2.0, 2.0),
                     metadata={"axes": "TZYX", "finterval": 0.1, "spacing": 2.0,
                               "unit": "um"})
    lapse = load_timelapse(path)
    result = run(lapse, PeriodicityOptions(regions=ball.astype(np.uint8), surrogates=19,
                                           whole_field=False))
    row = result.table.iloc[0]
    assert (row["centre_z"], row["centre_y"], row["centre_x"]) == pytest.approx((6.0, 2.5, 3.0))
    assert row["period"] == pytest.approx(1.0, rel=0.05) and row["significant"]
    assert result.signals.paint(result.table["score"]).shape == (7, 12, 12)
    assert "of 1 regions at alpha 0.05" in result.counts["statement"]
