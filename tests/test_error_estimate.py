"""The error estimate without a reference (`denoise --estimate-error`), checked against the true
error on images with a known clean version.

The clean images are scikit-image's data (camera, brick, astronaut, coffee; PyPI). The noise is
white Gaussian, drawn here with NumPy, and the noisy images are written as 32-bit float TIFF
(tifffile) so that nothing is rounded or cut off at black and white: the conditions under which
Stein's unbiased risk estimate holds. The noise level is given, as the estimate needs it exactly
(with an estimated level the number moves by `per_sigma_percent_db` per 1%; BENCHMARKS.md).
"""
import numpy as np
import pytest
import tifffile
from skimage import color, data


SIGMAS = (10, 25, 50)


def _images():
    astro = color.rgb2gray(data.astronaut()) * 255.0
    return {
        "camera512": data.camera().astype(np.float64),
        "brick512": data.brick().astype(np.float64),
        "astronaut256": astro.reshape(256, 2, 256, 2).mean(axis=(1, 3)),
        "coffee256": (color.rgb2gray(data.coffee()) * 255.0)[60:316, 170:426],
    }


def _run(patchgraph, tmp_path, name, clean, sigma, method):
    rng = np.random.Generator(np.random.PCG64(99))
    noisy = (clean + sigma * rng.standard_normal(clean.shape)).astype(np.float32)
    src, out = tmp_path / f"{name}-{sigma}.tif", tmp_path / f"{name}-{sigma}-{method}.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack")
    r = patchgraph("denoise", src, "-o", out, "--sigma", sigma, "--method", method, "--estimate-error")
    result = tifffile.imread(out).astype(np.float64)
    return r["error_estimate"], result


@pytest.mark.parametrize("method", ["patch-graph", "pixel-graph"])
def test_estimated_psnr_is_within_0_3_db_of_the_true_one(patchgraph, tmp_path, method):
    """The issue's bound: within 0.3 dB at sigma 10, 25 and 50, on every development photograph.
    The true PSNR is over the same range (255) as the estimate's."""
    misses = []
    for name, clean in _images().items():
        for sigma in SIGMAS:
            e, result = _run(patchgraph, tmp_path, name, clean, sigma, method)
            assert e["applies"], e["note"]
            true = 10 * np.log10(255.0**2 / np.mean((result - clean) ** 2))
            # The report's range is the working range of float data, so its PSNR is over that
            # range: compare the mean squared errors, which are in the file's own units.
            est = 10 * np.log10(255.0**2 / e["mse"])
            if abs(est - true) > 0.3:
                misses.append(f"{name} sigma {sigma}: estimated {est:.2f} dB, true {true:.2f} dB")
    assert not misses, misses


def test_the_estimate_is_refused_for_correlated_noise(patchgraph, tmp_path):
    """Invariant: Stein's identity needs noise independent from pixel to pixel. Noise blurred by a
    3 x 3 box is correlated; the estimate must say it does not apply rather than give a number."""
    from scipy.ndimage import uniform_filter

    rng = np.random.Generator(np.random.PCG64(5))
    clean = data.brick()[:256, :256].astype(np.float64)
    noise = uniform_filter(rng.standard_normal((256, 256)) * 30.0, size=3)
    noisy = np.clip(np.rint(clean + noise), 0, 255).astype(np.uint8)
    src = tmp_path / "correlated.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack")
    r = patchgraph("denoise", src, "-o", tmp_path / "out.tif", "--estimate-error")
    e = r["error_estimate"]
    assert not e["applies"] and "correlated" in e["note"], e


def test_sweep_marks_the_value_of_lowest_true_error(patchgraph, tmp_path):
    """`sweep` writes one CSV row per value and marks the lowest estimated error; checked against
    the true PSNR of each value's result (scikit-image's peak_signal_noise_ratio) on a brick crop
    with white noise of std 25, where thresholds 2 and 3.5 differ by more than 1 dB."""
    import csv
    import json
    import os
    import subprocess

    from skimage.metrics import peak_signal_noise_ratio

    clean = data.brick()[:256, :256]
    rng = np.random.Generator(np.random.PCG64(3))
    noisy = (clean + 25.0 * rng.standard_normal(clean.shape)).astype(np.float32)
    src = tmp_path / "brick.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack")
    table = tmp_path / "sweep.csv"
    r = patchgraph("sweep", src, "--parameter", "threshold", "--values", "2,3.5", "--sigma", 25, "-o", table)
    rows = list(csv.DictReader(open(table)))
    assert [float(x["threshold"]) for x in rows] == [2.0, 3.5]
    truth = {}
    for t in (2.0, 3.5):
        settings = tmp_path / f"t{t}.json"
        settings.write_text(json.dumps({"patch_graph": {"threshold": t}}))
        out = tmp_path / f"t{t}.tif"
        exe = os.environ.get("PATCHGRAPH_BIN", "target/release/patchgraph")
        subprocess.run([exe, "denoise", src, "-o", out, "--sigma", "25", "--settings", settings], check=True, capture_output=True)
        truth[t] = peak_signal_noise_ratio(clean.astype(np.float64), tifffile.imread(out).astype(np.float64), data_range=255)
    assert abs(truth[2.0] - truth[3.5]) > 1.0, truth
    assert r["best"] == max(truth, key=truth.get), (r["best"], truth)
    assert [x["lowest_error"] for x in rows].count("true") == 1


def test_photon_noise_with_its_model_given(patchgraph, tmp_path):
    """16-bit frames of photon noise (NumPy Poisson counts x gain 8 + offset 100 + read noise of
    std 12, the real-noise set's recipe in tests/bench/realnoise.py) at a peak of 300 photons, the
    model given: the estimate (Gaussian with the model's variance at each pixel) within 0.5 dB of
    the true PSNR against the expected frame. At a peak of 30 the approximation reads up to 1.3 dB
    low (BENCHMARKS.md), so it is not held to this bound there."""
    from skimage import io

    astro = color.rgb2gray(data.astronaut()) * 255.0
    for name, x in (("camera", data.camera() / 255.0), ("astronaut", astro / 255.0)):
        rng = np.random.Generator(np.random.PCG64(1234))
        frame = 100 + 8 * rng.poisson(300 * x) + 12 * rng.standard_normal(x.shape)
        src, out = tmp_path / f"{name}.png", tmp_path / f"{name}-out.png"
        io.imsave(src, np.clip(np.rint(frame), 0, 65535).astype(np.uint16), check_contrast=False)
        r = patchgraph("denoise", src, "-o", out, "--noise", "poisson", "--gain", 8, "--offset", 100, "--read-noise", 12,
                       "--estimate-error")
        e = r["error_estimate"]
        expected = 100 + 8 * 300 * x
        true = 10 * np.log10(65535.0**2 / np.mean((io.imread(out).astype(np.float64) - expected) ** 2))
        assert e["applies"] and e["psnr"] is not None, e
        assert abs(e["psnr"] - true) < 0.5, (name, e["psnr"], true)
