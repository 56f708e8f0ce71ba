"""`patchgraph noise` against the known noise of synthetic Gaussian noise (sigma 5, 10, 25), on a
smooth image and on textured images, within 10% of the noise actually present (the std of
noisy - clean after rounding and clipping). The wavelet MAD estimate is also compared with
scikit-image's estimate_sigma, which computes the same statistic (db2 HH band, median / 0.6745)."""
import numpy as np
import pytest
from skimage import data, io
from skimage.restoration import estimate_sigma

import devset


def smooth_scene():
    # A smooth synthetic scene (ours): two broad blobs on a gentle ramp, well inside 0..255.
    y, x = np.mgrid[0:256, 0:256].astype(np.float64)
    v = 60 + 0.3 * x + 70 * np.exp(-((x - 90) ** 2 + (y - 100) ** 2) / 2000) \
        + 50 * np.exp(-((x - 180) ** 2 + (y - 170) ** 2) / 3000)
    return np.clip(np.rint(v), 0, 255).astype(np.uint8)


IMAGES = {
    "smooth-scene": smooth_scene,
    "camera": lambda: devset.grey_images()["camera512"],
    "brick (textured)": lambda: data.brick(),
}


@pytest.mark.parametrize("image", list(IMAGES))
@pytest.mark.parametrize("sigma", [5, 10, 25])
def test_estimate_within_ten_percent(tmp_path, patchgraph, image, sigma):
    clean = IMAGES[image]()
    noisy = devset.add_noise(clean, sigma)
    present = float(np.std(noisy.astype(np.float64) - clean))
    io.imsave(tmp_path / "n.png", noisy, check_contrast=False)
    got = patchgraph("noise", tmp_path / "n.png")
    assert abs(got["sigma"] - present) <= 0.10 * present, (got, present)


@pytest.mark.parametrize("sigma", [5, 25])
def test_wavelet_mad_equals_skimage_estimate_sigma(tmp_path, patchgraph, sigma):
    noisy = devset.add_noise(devset.grey_images()["astronaut512"], sigma)
    io.imsave(tmp_path / "n.png", noisy, check_contrast=False)
    got = patchgraph("noise", tmp_path / "n.png")["channels"][0]["wavelet_mad"]
    want = estimate_sigma(noisy.astype(np.float64))
    assert abs(got - want) <= 0.01 * want, (got, want)
