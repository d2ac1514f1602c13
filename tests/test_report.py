"""HTML reports: complete, offline, and rendered by a real browser (headless Chromium)."""

import base64
import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from matplotlib import image as mpimg

import voxtopo
from voxtopo import compare
from voxtopo.errors import InputError
from voxtopo.jobs.analyse import analyse
from voxtopo.report.html import write_comparison, write_report

DOCS_SCREENSHOT = Path(__file__).resolve().parents[1] / "docs" / "images" / "report.png"


def _chromium(page: Path, tmp_path: Path, *, screenshot: Path | None = None,
              dump_dom: bool = False, size=(1200, 1800)) -> subprocess.CompletedProcess:
    """Open ``page`` in headless Chromium with networking features off and a fresh profile."""
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    assert browser, "headless Chromium is needed (Debian package chromium; .ci/run installs it)"
    profile = tmp_path / f"profile-{page.stem}-{'dom' if dump_dom else 'shot'}"
    command = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
               "--no-first-run", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
               f"--window-size={size[0]},{size[1]}"]
    command += ["--dump-dom"] if dump_dom else [f"--screenshot={screenshot}"]
    return subprocess.run(command + [page.as_uri()], capture_output=True, text=True,
                          timeout=120)


def _ring_result(tmp_path) -> Path:
    # An annulus: Betti numbers (1, 1) (Hatcher 2002, "Algebraic Topology"). It has no
    # noise to test against, so every pair is listed (min_persistence 0).
    yy, xx = np.indices((48, 48))
    ring = (np.abs(np.hypot(yy - 24, xx - 24) - 14) < 3).astype(float)
    out = tmp_path / "ring"
    analyse(voxtopo.Scan(ring, spacing=(0.5, 0.5), unit="um", source="ring.npy"),
            out, voxtopo.jobs.analyse.AnalysisOptions(superlevel=True, engine="gudhi",
                                                      min_persistence=0))
    return out


def _external_urls(html: str) -> list[str]:
    return re.findall(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:)?//[^"' >]+""", html)


def test_result_report_is_complete_and_offline(tmp_path):
    out = _ring_result(tmp_path)
    html = (out / "report.html").read_text()
    assert _external_urls(html) == []
    assert "Result folder ring " in html   # its final name, not the temporary one
    assert "not a medical diagnosis" in html and "licensed practice" in html
    # the count table shows one loop and one component, as for an annulus (Hatcher 2002)
    rows = re.findall(r"<tr><td>(components|loops) \(dimension \d\)</td><td class=\"num\">"
                      r"(\d+)</td>", html)
    assert dict(rows) == {"components": "1", "loops": "1"}
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', html)
    assert len(images) == 4
    assert all(base64.b64decode(data)[:8] == b"\x89PNG\r\n\x1a\n" for data in images)
    for version in ("gudhi", "numpy"):
        assert f"<th>{version}</th>" in html


def test_result_report_renders_in_headless_chromium(tmp_path):
    out = _ring_result(tmp_path)
    page = out / "report.html"
    dom = _chromium(page, tmp_path, dump_dom=True)
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert "Features per dimension" in dom.stdout and "Software" in dom.stdout
    shot = tmp_path / "report.png"
    run = _chromium(page, tmp_path, screenshot=shot)
    assert run.returncode == 0, run.stderr[-2000:]
    pixels = mpimg.imread(shot)
    assert pixels.shape[:2] == (1800, 1200)
    # The header band is drawn in the page's own ink colour #2b2d42, so the style sheet was
    # applied; below it the page has content (not a blank white screenshot).
    header = pixels[10, 600, :3]
    np.testing.assert_allclose(header, np.array([0x2b, 0x2d, 0x42]) / 255, atol=0.02)
    assert pixels[200:, :, :3].std() > 0.05
    if os.environ.get("VOXTOPO_UPDATE_SCREENSHOTS"):
        DOCS_SCREENSHOT.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(shot, DOCS_SCREENSHOT)


def test_comparison_report_renders_and_holds_the_test(tmp_path):
    rng = np.random.default_rng(5)
    from scipy import ndimage
    images = [ndimage.gaussian_filter(rng.standard_normal((24, 24)), 1 + 2 * (i % 2))
              for i in range(6)]
    diagrams = [voxtopo.persistence(im, engine="gudhi") for im in images]
    comparison = compare.compare_diagrams(diagrams, names=[f"s{i}" for i in range(6)],
                                          groups=["fine", "coarse"] * 3, n_permutations=99)
    out = write_comparison(comparison, tmp_path / "cmp")
    for name in ("distances.csv", "distance_matrix.csv", "heatmap.png", "mds.png",
                 "betti_curves.png", "persistence_images.png", "summary.json", "report.html",
                 "persistence_images.npz", "betti_curves.csv"):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    assert summary["permutation_test"]["permutations"] == 99
    assert 1 / 100 <= summary["permutation_test"]["p_value"] <= 1
    # two groups of three: 6! / (3! 3! 2!) = 10 groupings (itertools enumeration in
    # tests/test_compare.py), so p cannot go much below 1/10
    assert summary["permutation_test"]["distinct_groupings"] == 10
    html = (out / "report.html").read_text()
    assert _external_urls(html) == []
    assert "not a medical diagnosis" in html
    shown = re.findall(r'src="data:image/png;base64,([^"]+)"', html)
    assert len(shown) == 4            # distances, embedding, Betti curves, persistence images
    assert all(base64.b64decode(data)[:8] == b"\x89PNG\r\n\x1a\n" for data in shown)
    run = _chromium(out / "report.html", tmp_path, dump_dom=True)
    assert run.returncode == 0, run.stderr[-2000:]
    assert "Do the groups differ?" in run.stdout
    assert "mean between-group distance minus mean within-group distance" in run.stdout
    assert "10 distinct groupings" in run.stdout
    assert "all pairs" in run.stdout and "dimensions compared" in run.stdout


def test_betti_curve_plot_draws_every_diagram_coloured_by_group():
    # scipy.ndimage.label with generate_binary_structure(2, 2) counts the components of the
    # sublevel set (Betti 0, 8-neighbourhood) at every level the plot draws.
    from scipy import ndimage

    from voxtopo.report.html import plot_betti_curves

    rng = np.random.default_rng(8)
    images = [ndimage.gaussian_filter(rng.standard_normal((20, 20)), 1 + i) for i in range(3)]
    diagrams = [voxtopo.persistence(im, engine="gudhi") for im in images]
    comparison = compare.compare_diagrams(diagrams, names=list("pqr"), groups=list("aab"),
                                          dims=(0, 1), levels=16)
    figure = plot_betti_curves(comparison)
    panels = [ax for ax in figure.axes if ax.lines]
    assert len(panels) == 2
    structure = ndimage.generate_binary_structure(2, 2)
    for image, line in zip(images, panels[0].lines):
        counts = [ndimage.label(image <= level, structure)[1] for level in line.get_xdata()]
        np.testing.assert_array_equal(line.get_ydata(), counts)
    colours = [line.get_color() for line in panels[0].lines]
    assert colours[0] == colours[1] != colours[2]


def test_persistence_image_plot_shows_each_group_mean_on_the_real_births():
    # Mean of the members' images per group and dimension (common practice, no source);
    # a superlevel run of positive values has positive births (Adams et al. 2017 place each
    # pair at its birth).
    from voxtopo.report.html import plot_persistence_images

    rows = [np.array([[9.0, 0.0, 5.0, 0.0, 8.0]]), np.array([[9.0, 1.0, 6.0, 0.0, 7.0]]),
            np.array([[9.0, 0.0, 3.0, 2.0, 8.0]])]
    diagrams = [voxtopo.persistence(r, superlevel=True, engine="gudhi") for r in rows]
    comparison = compare.compare_diagrams(diagrams, names=list("pqr"), groups=list("aab"),
                                          dims=(0,), resolution=8, sigma=0.5)
    figure = plot_persistence_images(comparison)
    shown = [ax for ax in figure.axes if ax.images]
    assert len(shown) == 2            # groups a and b, one dimension
    np.testing.assert_allclose(shown[0].images[0].get_array(),
                               comparison.images[0][:2].mean(axis=0))
    np.testing.assert_allclose(shown[1].images[0].get_array(), comparison.images[0][2])
    left, right, _, _ = shown[0].images[0].get_extent()
    assert left > 0 and right > left


def test_report_of_a_folder_without_results_is_refused(tmp_path):
    with pytest.raises(InputError, match="no summary.json"):
        write_report(tmp_path)
    (tmp_path / "summary.json").write_text("{ truncated")
    with pytest.raises(InputError, match="not valid JSON"):
        write_report(tmp_path)
    assert not (tmp_path / "report.html").exists()
