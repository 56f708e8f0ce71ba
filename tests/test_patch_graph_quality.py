"""Quality floors of the patch-graph method, so that quality cannot drop silently. Images are
scikit-image's bundled samples (camera, astronaut) with noise from numpy Generator(PCG64(1234)),
as in the benchmark; floors sit a little under what BENCHMARKS.md measured."""
import numpy as np
import pytest
from skimage import data, io
from skimage.metrics import peak_signal_noise_ratio

import devset


def denoise(patchgraph, tmp_path, noisy, name="n.png"):
    io.imsave(tmp_path / name, noisy, check_contrast=False)
    patchgraph("denoise", tmp_path / name, "-o", tmp_path / f"out-{name}")
    return io.imread(tmp_path / f"out-{name}")


def test_camera_sigma25_blind_floor(tmp_path, patchgraph):
    # Measured 29.56 dB (scikit-image NLM tuned on the true sigma: 29.3 dB on this image set).
    clean = devset.grey_images()["camera512"]
    out = denoise(patchgraph, tmp_path, devset.add_noise(clean, 25))
    assert peak_signal_noise_ratio(clean, out, data_range=255) >= 29.4


def test_sixteen_bit_matches_eight_bit_quality(tmp_path, patchgraph):
    # Invariant: sigma is in the input's grey levels, so the same scene at 16 bits (x 257) with
    # 257 times the noise gives the same PSNR relative to its data range (within 0.2 dB).
    clean8 = devset.grey_images()["camera256"]
    noisy8 = devset.add_noise(clean8, 25)
    clean16 = clean8.astype(np.uint16) * 257
    rng = np.random.Generator(np.random.PCG64(1234))
    noisy16 = np.clip(np.rint(clean16 + 25 * 257 * rng.standard_normal(clean8.shape)), 0, 65535).astype(np.uint16)
    out8 = denoise(patchgraph, tmp_path, noisy8, "n8.png")
    out16 = denoise(patchgraph, tmp_path, noisy16, "n16.png")
    assert out16.dtype == np.uint16
    p8 = peak_signal_noise_ratio(clean8, out8, data_range=255)
    p16 = peak_signal_noise_ratio(clean16, out16, data_range=65535)
    assert abs(p8 - p16) <= 0.2, (p8, p16)


def test_colour_keeps_channels_and_beats_the_noise(tmp_path, patchgraph):
    # astronaut (RGB, public domain per its docstring), 256 x 256 crop, sigma 25: noisy input is
    # about 20.3 dB; the result must gain at least 9 dB and stay RGB.
    clean = data.astronaut()[100:356, 100:356]
    noisy = devset.add_noise(clean, 25)
    out = denoise(patchgraph, tmp_path, noisy)
    assert out.shape == clean.shape
    assert peak_signal_noise_ratio(clean, out, data_range=255) >= peak_signal_noise_ratio(clean, noisy, data_range=255) + 9


# Floors per kind of image, blind, sigma 25 and 50, 0.3 dB under what was measured when they were
# set (the per-image table in BENCHMARKS.md): a regression on any kind of image fails here.
KIND_FLOORS = {
    ("retina256", 25): 39.05, ("retina256", 50): 37.15,       # smooth biological tissue
    ("phantom256", 25): 32.85, ("phantom256", 50): 27.9,      # piecewise constant, black clipped background
    ("blobs256", 25): 37.3, ("blobs256", 50): 32.45,          # smooth shapes
    # Ours: fluorescence, dim background. Lowered by 0.3 dB when a group's mean patch began to
    # carry the noise its overlapping patches share (a trade made on purpose: the set gained 0.1 dB
    # in the mean, retina and clock at 50 1.2 dB, where peers led; the micrograph stays 5 dB ahead).
    ("micrograph256", 25): 35.1, ("micrograph256", 50): 31.25,
    # Ours: point sources on black. Lowered by 0.5 dB when flat groups began to grow, by 0.1 to
    # 0.25 dB more with their raised threshold, and by 0.4 at 50 with the mean patch's shared noise
    # (trades made on purpose: each gained on the set and most on the smooth images peers led on;
    # the stars stay about 5 dB ahead of the peers).
    ("stars256", 25): 35.15, ("stars256", 50): 30.3,
    ("clock", 25): 40.7, ("clock", 50): 37.3,                 # flat surfaces, text
}


@pytest.mark.parametrize("name,sigma", list(KIND_FLOORS))
def test_kind_of_image_floor(tmp_path, patchgraph, name, sigma):
    clean = devset.user_like_images()[name]
    out = denoise(patchgraph, tmp_path, devset.add_noise(clean, sigma))
    got = peak_signal_noise_ratio(clean, out, data_range=255)
    assert got >= KIND_FLOORS[(name, sigma)], got


def test_grainy_noise_on_a_smooth_image_floor(tmp_path, patchgraph):
    # Grainy noise (white noise filtered by [1 2 1] / 4 each way: the real-noise bench's "(grainy)"
    # rows) on the smooth retina: 36.14 dB before the first stage matched on a half-whitened
    # plane, 36.85 after, 38.94 once a group's mean patch carried the grain its patches share
    # (a tuned non-local means: 40.2); the floor sits 0.3 dB under.
    import realnoise
    clean = devset.user_like_images()["retina256"]
    out = denoise(patchgraph, tmp_path, realnoise.grainy(clean))
    assert peak_signal_noise_ratio(clean, out, data_range=255) >= 38.6


# The pixel graph joined by similarity (pixel_graph.graph = non-local), blind: floors 0.3 dB under
# what was measured when it was added, on the smooth images where it gains most over the cut grid
# (+1.3 to +2.8 dB there; BENCHMARKS.md, per-image table).
NON_LOCAL_FLOORS = {("retina256", 25): 37.95, ("retina256", 50): 33.05, ("clock", 50): 32.05, ("blobs256", 25): 34.35}


@pytest.mark.parametrize("name,sigma", list(NON_LOCAL_FLOORS))
def test_non_local_pixel_graph_floor(tmp_path, patchgraph, name, sigma):
    import json
    clean = devset.user_like_images()[name]
    settings = tmp_path / "non-local.json"
    settings.write_text(json.dumps({"method": "pixel-graph", "pixel_graph": {"graph": "non-local"}}))
    io.imsave(tmp_path / "n.png", devset.add_noise(clean, sigma), check_contrast=False)
    patchgraph("denoise", tmp_path / "n.png", "-o", tmp_path / "out.png", "--settings", settings)
    got = peak_signal_noise_ratio(clean, io.imread(tmp_path / "out.png"), data_range=255)
    assert got >= NON_LOCAL_FLOORS[(name, sigma)], got
