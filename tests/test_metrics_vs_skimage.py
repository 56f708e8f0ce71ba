"""PSNR and SSIM from `patchgraph metrics` against scikit-image 0.26 (the reference library):
peak_signal_noise_ratio, and structural_similarity with the Wang et al. (2004) settings
(gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range from the bit depth).
Images are scikit-image's bundled samples (camera, astronaut, coffee) with synthetic noise."""
import numpy as np
import pytest
from skimage import data, io
from skimage.metrics import peak_signal_noise_ratio, structural_similarity

import devset


def wang_ssim(a, b, data_range, channel_axis=None):
    return structural_similarity(a, b, gaussian_weights=True, sigma=1.5, use_sample_covariance=False,
                                 data_range=data_range, channel_axis=channel_axis)


CASES = [("camera", 10), ("camera", 50), ("astronaut-grey", 25), ("coffee-grey", 5)]


def grey(name):
    g = devset.grey_images()
    return {"camera": g["camera512"], "astronaut-grey": g["astronaut256"], "coffee-grey": g["coffee256"]}[name]


@pytest.mark.parametrize("name,sigma", CASES)
def test_grey_8bit_matches_skimage(tmp_path, patchgraph, name, sigma):
    clean = grey(name)
    noisy = devset.add_noise(clean, sigma)
    io.imsave(tmp_path / "c.png", clean, check_contrast=False)
    io.imsave(tmp_path / "n.png", noisy, check_contrast=False)
    got = patchgraph("metrics", tmp_path / "c.png", tmp_path / "n.png")
    assert abs(got["psnr"] - peak_signal_noise_ratio(clean, noisy, data_range=255)) <= 0.01
    assert abs(got["ssim"] - wang_ssim(clean, noisy, 255)) <= 1e-3


def test_rgb_8bit_matches_skimage_channel_mean(tmp_path, patchgraph):
    clean = data.astronaut()[:256, :256]
    noisy = devset.add_noise(clean, 20)
    io.imsave(tmp_path / "c.png", clean, check_contrast=False)
    io.imsave(tmp_path / "n.png", noisy, check_contrast=False)
    got = patchgraph("metrics", tmp_path / "c.png", tmp_path / "n.png")
    assert abs(got["psnr"] - peak_signal_noise_ratio(clean, noisy, data_range=255)) <= 0.01
    assert abs(got["ssim"] - wang_ssim(clean, noisy, 255, channel_axis=2)) <= 1e-3


def test_16bit_uses_the_16bit_data_range(tmp_path, patchgraph):
    clean = (grey("camera").astype(np.uint16) * 257)
    rng = np.random.Generator(np.random.PCG64(1234))
    noisy = np.clip(np.rint(clean + 2000 * rng.standard_normal(clean.shape)), 0, 65535).astype(np.uint16)
    io.imsave(tmp_path / "c.png", clean, check_contrast=False)
    io.imsave(tmp_path / "n.png", noisy, check_contrast=False)
    got = patchgraph("metrics", tmp_path / "c.png", tmp_path / "n.png")
    assert abs(got["psnr"] - peak_signal_noise_ratio(clean, noisy, data_range=65535)) <= 0.01
    assert abs(got["ssim"] - wang_ssim(clean, noisy, 65535)) <= 1e-3
