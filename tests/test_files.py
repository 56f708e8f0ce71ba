"""The files of the trades, written by reference libraries and read back by them.

Every file here is written by tifffile, astropy or Pillow (PyPI), denoised by the CLI, and the
result is read back by the same library: pages, shape, dtype, tags and header cards must be the
input's, blank pixels where they were, and each page closer to its clean truth than the input was
(an invariant of any denoiser worth the name on noise this strong).
"""
import os
import subprocess

import numpy as np
import pytest
import tifffile
from astropy.io import fits
from PIL import Image

from conftest import ROOT

EXE = os.environ.get("PATCHGRAPH_BIN", str(ROOT / "target" / "release" / "patchgraph"))


def scene(h=64, w=64, seed=0, shift=0):
    """A smooth blob field with a sharp square: our own synthetic micrograph slice."""
    y, x = np.mgrid[0:h, 0:w].astype(float)
    rng = np.random.default_rng(seed)
    img = np.zeros((h, w))
    for _ in range(4):
        cy, cx, r = rng.uniform(8, h - 8), rng.uniform(8, w - 8), rng.uniform(5, 12)
        img += np.exp(-((y - cy) ** 2 + (x - cx - shift) ** 2) / (2 * r * r))
    img[h // 4 : h // 2, w // 4 : w // 2] += 0.8
    return img / img.max()


def mse(a, b):
    return float(np.mean((np.asarray(a, float) - np.asarray(b, float)) ** 2))


def run(*args):
    return subprocess.run([EXE, *map(str, args)], capture_output=True, text=True)


def test_tiff_zstack_keeps_every_page_and_its_tags(tmp_path, patchgraph):
    # tifffile writes a 5-page 16-bit stack with a description and 600 pixels per inch.
    clean = np.stack([scene(seed=1, shift=2 * k) * 40000 + 2000 for k in range(5)])
    noisy = np.clip(clean + np.random.default_rng(1).normal(0, 1500, clean.shape), 0, 65535).astype(np.uint16)
    src, out = tmp_path / "stack.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack", resolution=(600, 600), resolutionunit="INCH",
                     description="z-stack of our own, 5 slices", compression="zlib", metadata=None)
    r = patchgraph("denoise", src, "-o", out)
    assert r["file"]["pages"] == 5 and r["file"]["units"] == 5 and len(r["units"]) == 5
    with tifffile.TiffFile(out) as t:
        assert len(t.pages) == 5
        page = t.pages[0]
        assert page.dtype == np.uint16 and page.shape == (64, 64)
        assert page.description == "z-stack of our own, 5 slices"
        assert page.tags["XResolution"].value == (600, 1) and page.tags["ResolutionUnit"].value == 2
        assert page.compression == tifffile.COMPRESSION.ADOBE_DEFLATE  # the input's compression
        software = page.tags["Software"].value
        assert software.startswith("Patchgraph") and '"method"' in software
        result = t.asarray()
    for k in range(5):
        assert mse(result[k], clean[k]) < 0.5 * mse(noisy[k], clean[k]), f"page {k + 1}"


def test_a_zstack_as_a_volume_beats_its_slices_alone_and_unrelated_pages_stay_alone(tmp_path, patchgraph):
    # Our own synthetic z-stack (tests/bench/devset.py: cells, granules and filaments through z),
    # 16-bit photon counts with read noise. Invariant of averaging: patches of the neighbouring
    # slices carry independent noise, so the volume run is closer to the truth than each slice
    # alone (measured on this stack: +0.16 to +0.24 dB per page, +0.21 dB overall; checked: a
    # gain on every inner page, and at least 0.15 dB on the whole stack). Pages that are unrelated images (the
    # development set's photographs) lend nothing: the result equals each page alone.
    import devset
    rng = np.random.default_rng(7)
    lam = 60 * devset.cell_stack(n=128, depth=6)
    clean = 100 + 4 * lam
    noisy = np.clip(np.rint(100 + 4 * rng.poisson(lam) + rng.normal(0, 6, lam.shape)), 0, 65535).astype(np.uint16)
    src = tmp_path / "zstack.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack", metadata=None)
    alone_settings = tmp_path / "alone.json"
    alone_settings.write_text('{"patch_graph": {"neighbour_slices": 0}}')
    vol = patchgraph("denoise", src, "-o", tmp_path / "vol.tif")
    assert all(u["slices_joined"] >= 1 for u in vol["units"]), vol["units"]
    patchgraph("denoise", src, "-o", tmp_path / "alone.tif", "--settings", alone_settings)
    a, b = tifffile.imread(tmp_path / "vol.tif"), tifffile.imread(tmp_path / "alone.tif")
    per_page = [mse(a[k], clean[k]) < mse(b[k], clean[k]) for k in range(1, 5)]
    assert all(per_page) and mse(a, clean) < mse(b, clean) * 10 ** -0.015, (per_page, mse(a, clean), mse(b, clean))
    g = devset.grey_images()
    unrelated = np.stack([g["camera256"], g["astronaut256"], g["coffee256"]])
    noisy_u = np.clip(np.rint(unrelated + rng.normal(0, 20, unrelated.shape)), 0, 255).astype(np.uint8)
    src_u = tmp_path / "pages.tif"
    tifffile.imwrite(src_u, noisy_u, photometric="minisblack", metadata=None)
    r = patchgraph("denoise", src_u, "-o", tmp_path / "u_vol.tif")
    assert all(u["slices_joined"] == 0 for u in r["units"]), r["units"]
    patchgraph("denoise", src_u, "-o", tmp_path / "u_alone.tif", "--settings", alone_settings)
    assert np.array_equal(tifffile.imread(tmp_path / "u_vol.tif"), tifffile.imread(tmp_path / "u_alone.tif"))


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.int16, np.int32])
def test_float_and_signed_tiff_keep_type_sign_and_range(tmp_path, patchgraph, dtype):
    # Background-subtracted data: values below zero must survive, floats unclipped.
    clean = scene(seed=2) * 3.0 - 0.5 if np.dtype(dtype).kind == "f" else scene(seed=2) * 3000 - 500
    sigma = 0.12 if np.dtype(dtype).kind == "f" else 120
    noisy = (clean + np.random.default_rng(2).normal(0, sigma, clean.shape)).astype(dtype)
    src, out = tmp_path / "signed.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, noisy, photometric="minisblack", metadata=None)
    r = patchgraph("denoise", src, "-o", out)
    assert r["file"]["sample"] == np.dtype(dtype).name.replace("int", "i").replace("float", "f").replace("ui", "u")
    # The reported sigma is in the file's own units (the true sigma, within the estimator's 25%).
    assert abs(r["sigma"] - sigma) < 0.25 * sigma
    result = tifffile.imread(out)
    assert result.dtype == dtype and result.shape == noisy.shape
    assert result.min() < 0
    assert mse(result, clean) < 0.5 * mse(noisy, clean)


def test_float_tiff_nan_pixels_stay_where_they_were(tmp_path, patchgraph):
    clean = scene(seed=3).astype(np.float32)
    noisy = (clean + np.random.default_rng(3).normal(0, 0.05, clean.shape)).astype(np.float32)
    noisy[:10, :] = np.nan  # a blank border, as mosaics have
    noisy[30, 30] = np.nan
    src, out = tmp_path / "nan.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, noisy, metadata=None)
    r = patchgraph("denoise", src, "-o", out)
    assert r["file"]["blank_pixels"] == 10 * 64 + 1
    result = tifffile.imread(out)
    assert np.array_equal(np.isnan(result), np.isnan(noisy))
    # The blank border must not pull the noise estimate down (a constant fill would).
    assert abs(r["sigma"] - 0.05) < 0.0125


def test_bigtiff_in_bigtiff_out(tmp_path, patchgraph):
    noisy = (scene(seed=4) * 200 + np.random.default_rng(4).normal(0, 10, (64, 64))).clip(0, 255).astype(np.uint8)
    src, out = tmp_path / "big.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, np.stack([noisy, noisy[::-1]]), bigtiff=True, metadata=None)
    patchgraph("denoise", src, "-o", out)
    with tifffile.TiffFile(out) as t:
        assert t.is_bigtiff and len(t.pages) == 2


@pytest.mark.parametrize("planar", ["separate", "contig"])
def test_two_channel_tiff_denoises_each_channel_on_its_own(tmp_path, patchgraph, planar):
    # Two fluorescence channels with different structure: the second marked as an unspecified extra sample.
    clean = np.stack([scene(seed=5) * 30000 + 1000, scene(seed=6) * 20000 + 3000])
    noisy = (clean + np.random.default_rng(5).normal(0, 1200, clean.shape)).clip(0, 65535).astype(np.uint16)
    data = noisy if planar == "separate" else np.moveaxis(noisy, 0, -1)
    src, out = tmp_path / "two.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, data, photometric="minisblack", planarconfig=planar, extrasamples=["unspecified"],
                     metadata=None)
    r = patchgraph("denoise", src, "-o", out)
    assert r["file"]["units"] == 2
    with tifffile.TiffFile(out) as t:
        page = t.pages[0]
        assert page.samplesperpixel == 2 and page.dtype == np.uint16
        result = page.asarray()
    result = result if result.shape[0] == 2 else np.moveaxis(result, -1, 0)
    for c in range(2):
        assert mse(result[c], clean[c]) < 0.5 * mse(noisy[c], clean[c]), f"channel {c}"


def test_lzw_rgb_tiff_keeps_compression(tmp_path, patchgraph):
    rgb = np.stack([scene(seed=s) for s in (7, 8, 9)], -1) * 200
    noisy = (rgb + np.random.default_rng(7).normal(0, 12, rgb.shape)).clip(0, 255).astype(np.uint8)
    src, out = tmp_path / "rgb.tif", tmp_path / "out.tif"
    tifffile.imwrite(src, noisy, photometric="rgb", compression="lzw", metadata=None)
    patchgraph("denoise", src, "-o", out)
    with tifffile.TiffFile(out) as t:
        assert t.pages[0].compression == tifffile.COMPRESSION.LZW
        assert t.pages[0].photometric == tifffile.PHOTOMETRIC.RGB
        assert mse(t.asarray(), rgb) < 0.5 * mse(noisy, rgb)


def test_fits_unsigned_16_bit_keeps_cards_and_records_history(tmp_path, patchgraph):
    clean = scene(seed=10) * 30000 + 1000
    noisy = (clean + np.random.default_rng(10).normal(0, 900, clean.shape)).clip(0, 65535).astype(np.uint16)
    hdu = fits.PrimaryHDU(noisy)  # astropy stores uint16 as BITPIX 16 with BZERO 32768
    hdu.header["OBJECT"] = ("field of our own", "target")
    hdu.header["EXPTIME"] = 12.5
    hdu.header["COMMENT"] = "a comment card that must survive"
    src, out = tmp_path / "frame.fits", tmp_path / "out.fits"
    hdu.writeto(src)
    patchgraph("denoise", src, "-o", out)
    with fits.open(out) as f:
        h, data = f[0].header, f[0].data
        assert h["BITPIX"] == 16 and h["BZERO"] == 32768 and data.dtype == np.uint16 and data.shape == (64, 64)
        assert h["OBJECT"] == "field of our own" and h["EXPTIME"] == 12.5
        assert "a comment card that must survive" in str(h["COMMENT"])
        assert "Patchgraph" in "".join(str(c) for c in h["HISTORY"])
        assert mse(data, clean) < 0.5 * mse(noisy, clean)


def test_fits_float_cube_with_nan_and_integer_blank(tmp_path, patchgraph):
    clean = np.stack([scene(seed=11, shift=k) for k in range(3)]).astype(np.float32) * 5
    noisy = (clean + np.random.default_rng(11).normal(0, 0.3, clean.shape)).astype(np.float32)
    noisy[1, 5:9, 5:9] = np.nan
    src, out = tmp_path / "cube.fits", tmp_path / "out.fits"
    fits.PrimaryHDU(noisy).writeto(src)
    r = patchgraph("denoise", src, "-o", out)
    assert r["file"]["pages"] == 3
    data = fits.getdata(out)
    assert data.shape == (3, 64, 64) and data.dtype.kind == "f" and data.dtype.itemsize == 4
    assert np.array_equal(np.isnan(data), np.isnan(noisy))
    ok = ~np.isnan(noisy)
    assert mse(data[ok], clean[ok]) < 0.5 * mse(noisy[ok], clean[ok])

    ints = (clean[0] * 1000 + np.random.default_rng(12).normal(0, 60, clean[0].shape)).astype(np.int16)
    ints[0, :] = -32768
    hdu = fits.PrimaryHDU(ints)
    hdu.header["BLANK"] = -32768
    src2, out2 = tmp_path / "blank.fits", tmp_path / "out2.fits"
    hdu.writeto(src2)
    patchgraph("denoise", src2, "-o", out2)
    with fits.open(out2, do_not_scale_image_data=True) as f:
        raw = f[0].data
        assert f[0].header["BLANK"] == -32768
        assert np.array_equal(raw[0], ints[0]) and raw.dtype == np.dtype(">i2")


def test_png_keeps_density_profile_and_text(tmp_path, patchgraph):
    noisy = (scene(seed=13) * 200 + np.random.default_rng(13).normal(0, 10, (64, 64))).clip(0, 255).astype(np.uint8)
    src, out = tmp_path / "scan.png", tmp_path / "out.png"
    from PIL import PngImagePlugin
    info = PngImagePlugin.PngInfo()
    info.add_text("Title", "archival scan of our own")
    Image.fromarray(noisy).save(src, dpi=(600, 600), pnginfo=info)
    patchgraph("denoise", src, "-o", out)
    im = Image.open(out)
    assert round(im.info["dpi"][0]) == 600
    assert im.text["Title"] == "archival scan of our own"
    assert im.text["Software"].startswith("Patchgraph") and "method" in im.text["Patchgraph settings"]


def test_jpeg_keeps_its_comment_and_orientation_and_records_the_run(tmp_path, patchgraph):
    """Pillow (PyPI) writes a JPEG with a comment and EXIF orientation 6; written back as JPEG, the
    comment and orientation are still there (Pillow reads them) and a second comment records the
    program and the settings, so the result can be told from the original."""
    noisy = (scene(seed=14) * 200 + np.random.default_rng(14).normal(0, 10, (64, 64))).clip(0, 255).astype(np.uint8)
    src, out = tmp_path / "photo.jpg", tmp_path / "out.jpg"
    exif = Image.Exif()
    exif[0x0112] = 6
    Image.fromarray(noisy).convert("RGB").save(src, quality=95, comment=b"field notes of our own", exif=exif)
    patchgraph("denoise", src, "-o", out)
    im = Image.open(out)
    assert im.getexif().get(0x0112) == 6
    # Pillow keeps the last comment in info; all comments are in the applist.
    comments = [seg for marker, seg in im.applist if marker == "COM"]
    assert b"field notes of our own" in comments, comments
    made = [c for c in comments if c.startswith(b"Patchgraph ")]
    assert len(made) == 1 and b'"method"' in made[0]


@pytest.mark.parametrize("src_kind,out_name,hint", [
    ("float-tiff", "out.png", ".tif or .fits"),
    ("stack-tiff", "out.png", ".tif or .fits"),
    ("two-channel", "out.fits", ".tif"),
])
def test_output_that_cannot_hold_the_file_is_refused_before_work(tmp_path, src_kind, out_name, hint):
    src = tmp_path / "in.tif"
    if src_kind == "float-tiff":
        tifffile.imwrite(src, scene().astype(np.float32), metadata=None)
    elif src_kind == "stack-tiff":
        tifffile.imwrite(src, (np.stack([scene()] * 3) * 60000).astype(np.uint16), photometric="minisblack",
                         metadata=None)
    else:
        tifffile.imwrite(src, (np.stack([scene()] * 2, -1) * 60000).astype(np.uint16), photometric="minisblack",
                         extrasamples=["unspecified"], metadata=None)
    r = run("denoise", src, "-o", tmp_path / out_name)
    assert r.returncode == 2 and hint in r.stderr and "cannot hold" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert not (tmp_path / out_name).exists()


def broken_stack(path):
    tifffile.imwrite(path, (np.stack([scene()] * 4) * 60000).astype(np.uint16), metadata=None)
    data = path.read_bytes()
    with tifffile.TiffFile(path) as t:
        last = t.pages[-1].dataoffsets[0]
    path.write_bytes(data[: last + 100])  # the last page's strip cut short


def bad_fits_header(path):
    fits.PrimaryHDU(scene().astype(np.float32)).writeto(path)
    data = bytearray(path.read_bytes())
    at = data.index(b"NAXIS1  =")
    data[at + 10 : at + 30] = b"        not a number"
    path.write_bytes(bytes(data))


def mismatched_strips(path):
    tifffile.imwrite(path, (scene() * 200).astype(np.uint8), metadata=None, rowsperstrip=16)
    data = bytearray(path.read_bytes())
    with tifffile.TiffFile(path) as t:
        tag = t.pages[0].tags["StripByteCounts"]
        offset, count = tag.valueoffset, tag.count
    # Claim the last strip holds 10 bytes where its 16 rows need 1024.
    import struct
    fmt = "<" + ("I" if tag.dtype == 4 else "H") * count
    counts = list(struct.unpack_from(fmt, data, offset))
    counts[-1] = 10
    struct.pack_into(fmt, data, offset, *counts)
    path.write_bytes(bytes(data))


@pytest.mark.parametrize("make,name", [(broken_stack, "stack.tif"), (bad_fits_header, "bad.fits"),
                                        (mismatched_strips, "strips.tif")])
def test_broken_files_exit_2_with_one_sentence_and_no_output(tmp_path, make, name):
    src, out = tmp_path / name, tmp_path / ("out" + os.path.splitext(name)[1])
    make(src)
    r = run("denoise", src, "-o", out)
    assert r.returncode == 2, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and str(src) in r.stderr
    assert "panicked" not in r.stderr
    assert not out.exists()


def test_metrics_of_a_float_stack_match_scikit_image_page_by_page(tmp_path, patchgraph):
    # Each file is scaled by its own range inside; the comparison must happen in the clean one's
    # units. Reference: skimage.metrics.peak_signal_noise_ratio with the clean file's working range.
    from skimage.metrics import peak_signal_noise_ratio
    clean = np.stack([scene(seed=20 + k) for k in range(3)]).astype(np.float32) * 7.5
    noisy = (clean + np.random.default_rng(20).normal(0, 0.4, clean.shape)).astype(np.float32)
    a, b = tmp_path / "clean.tif", tmp_path / "noisy.tif"
    tifffile.imwrite(a, clean, photometric="minisblack", metadata=None)
    tifffile.imwrite(b, noisy, photometric="minisblack", metadata=None)
    q = patchgraph("metrics", a, b)
    scale = patchgraph("inspect", a)["file"]["map"]["scale"]
    assert len(q["units"]) == 3
    for k in range(3):
        want = peak_signal_noise_ratio(clean[k].astype(float), noisy[k].astype(float), data_range=65535 * scale)
        assert abs(q["units"][k]["psnr"] - want) < 0.01, (k, q["units"][k]["psnr"], want)


def test_noise_fits_the_image_of_a_stack_asked_for(tmp_path, patchgraph):
    """A 3-page 16-bit stack (tifffile) whose pages carry white noise of std 40, 160 and 80: the
    noise command fits the page asked for (closed form: the std drawn, within 10%), and a page that
    is not there is one clear sentence, exit 2."""
    stds = (40.0, 160.0, 80.0)
    rng = np.random.default_rng(21)
    pages = [(20000 + 10000 * scene(128, 128, seed=k) + rng.normal(0, s, (128, 128))).astype(np.uint16)
             for k, s in enumerate(stds)]
    src = tmp_path / "stack.tif"
    tifffile.imwrite(src, np.stack(pages), photometric="minisblack")
    for number, want in enumerate(stds, start=1):
        got = patchgraph("noise", src, "--image", number)
        assert (got["image"], got["images"]) == (number, 3)
        assert abs(got["sigma"] / want - 1) < 0.10, (number, got["sigma"], want)
    r = run("noise", src, "--image", 4)
    assert r.returncode == 2 and "there is no image 4; the file holds 3" in r.stderr, r.stderr
