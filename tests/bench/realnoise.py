"""The real-noise part of the development set, built from the development images themselves.

(a) Camera JPEGs (noise level = std of the noise before JPEG) by the "unprocessing" protocol (T. Brooks et al., "Unprocessing images for learned raw
    denoising", CVPR 2019): sRGB -> linear, inverse white balance (red gain 2.0, blue gain 1.7, fixed
    mid values of the published ranges; identity colour matrix), RGGB mosaic, noise of variance
    shot * x + read with log(read) = 2.18 log(shot) + 1.20 (natural logs; the read term is a variance,
    as in the published code), bilinear demosaicing, white balance, sRGB, 8 bits, JPEG quality 90.
    The reference is the same pipeline without noise and without JPEG. The same protocol also runs
    on four more colour images (devset.colour_images_more: rows marked "(more)"), with the camera's
    own colour noise reduction (the opponent colour planes blurred by a Gaussian of std 2 before
    JPEG: rows marked "(colour-smoothed)"), made grey (the mean of R, G and B, saved as colour:
    rows marked "(made grey)" and "(more, made grey)"; the reference made grey too), and on an
    image kept out of tuning
    (devset.colour_checks: rows marked "(check)", plain and colour-smoothed).
(b) 16-bit scientific frames: offset + gain * Poisson(peak * image) + N(0, read^2), offset 100,
    gain 8 grey levels per photon, read noise 12 grey levels, peaks 30 and 300. The reference is the
    expected value offset + gain * peak * image; PSNR over the signal range gain * peak.
(c) Grainy noise made here (rows marked "(grainy)"): grey development images plus white Gaussian
    noise of std 25 (numpy Generator(PCG64(1234))) filtered by [1 2 1] / 4 along each axis (std
    about 9.4 after; lag-1 correlation 2/3), as resampling or a sensor's interpolation leaves it,
    clipped and rounded to 8 bits. The reference is the clean image; the noise level is the std of
    (noisy - reference).

Peers are tuned on the true noise: (a) and (c) on the measured std of (noisy - reference); (b) through the
generalized Anscombe transform with the true gain, offset and read noise and the closed-form exact
unbiased inverse (Makitalo and Foi 2011). Patchgraph runs with default settings (noise fitted)."""
import io as pyio
import json
import os

import cv2
import numpy as np
from PIL import Image
from scipy.ndimage import convolve, gaussian_filter
from skimage import io
from skimage.metrics import peak_signal_noise_ratio
from skimage.restoration import denoise_tv_chambolle

import devset

SHOTS = (0.002, 0.008)
PEAKS = (30, 300)
OFFSET, GAIN, READ = 100.0, 8.0, 12.0


def srgb_to_linear(x):
    return np.where(x <= 0.04045, x / 12.92, ((x + 0.055) / 1.055) ** 2.4)


def linear_to_srgb(x):
    x = np.clip(x, 0, 1)
    return np.where(x <= 0.0031308, 12.92 * x, 1.055 * x ** (1 / 2.4) - 0.055)


WB = np.array([2.0, 1.0, 1.7])


def mosaic(rgb):
    """RGGB: R at (0,0), G at (0,1) and (1,0), B at (1,1)."""
    h, w, _ = rgb.shape
    m = np.zeros((h, w))
    m[0::2, 0::2] = rgb[0::2, 0::2, 0]
    m[0::2, 1::2] = rgb[0::2, 1::2, 1]
    m[1::2, 0::2] = rgb[1::2, 0::2, 1]
    m[1::2, 1::2] = rgb[1::2, 1::2, 2]
    return m


def demosaic_bilinear(m):
    h, w = m.shape
    masks = np.zeros((3, h, w))
    masks[0, 0::2, 0::2] = 1
    masks[1, 0::2, 1::2] = 1
    masks[1, 1::2, 0::2] = 1
    masks[2, 1::2, 1::2] = 1
    k_g = np.array([[0, 1, 0], [1, 4, 1], [0, 1, 0]]) / 4.0
    k_rb = np.array([[1, 2, 1], [2, 4, 2], [1, 2, 1]]) / 4.0
    out = np.zeros((h, w, 3))
    for c, k in ((0, k_rb), (1, k_g), (2, k_rb)):
        out[..., c] = convolve(m * masks[c], k, mode="mirror")
    return out


def camera_pipeline(srgb8, shot, rng):
    """The noisy (or, with shot 0, clean) 8-bit sRGB image before JPEG."""
    lin = srgb_to_linear(srgb8 / 255.0) / WB
    raw = mosaic(lin)
    if shot > 0:
        read = np.exp(2.18 * np.log(shot) + 1.20)
        raw = raw + np.sqrt(np.maximum(shot * raw + read, 0)) * rng.standard_normal(raw.shape)
    rgb = demosaic_bilinear(raw) * WB
    return np.clip(np.rint(255 * linear_to_srgb(rgb)), 0, 255).astype(np.uint8)


OPPONENT = np.array([[1, 1, 1], [1, 0, -1], [1, -2, 1]], float)
OPPONENT /= np.linalg.norm(OPPONENT, axis=1)[:, None]


def smooth_colour(rgb8):
    """A camera's own colour noise reduction (common practice in camera processing; the form is
    ours): the two opponent colour planes blurred by a Gaussian of std 2, brightness kept."""
    o = rgb8.astype(np.float64) @ OPPONENT.T
    for c in (1, 2):
        o[..., c] = gaussian_filter(o[..., c], 2.0)
    return np.clip(np.rint(o @ OPPONENT), 0, 255).astype(np.uint8)


def to_grey(rgb8):
    """The picture made grey (the mean of R, G and B), still saved as colour, as a grey conversion
    of a camera's JPEG is."""
    g = np.rint(rgb8.astype(np.float64).mean(axis=-1)).astype(np.uint8)
    return np.repeat(g[..., None], 3, axis=-1)


def jpeg(rgb8, quality=90):
    buf = pyio.BytesIO()
    Image.fromarray(rgb8).save(buf, format="JPEG", quality=quality)
    return buf.getvalue()


def camera_items(work, images=None, finish=None, reference=None):
    """[(name, shot, clean_png, noisy_jpg)] for `images` (default: the development set's colour
    images); `finish` (e.g. smooth_colour) is applied to the noisy image before JPEG, `reference`
    (e.g. to_grey) to the clean one."""
    os.makedirs(work, exist_ok=True)
    items = []
    for name, img in (images or devset.colour_images()).items():
        clean = camera_pipeline(img, 0, None)
        clean = reference(clean) if reference else clean
        cp = os.path.join(work, f"{name}-cam-clean.png")
        io.imsave(cp, clean, check_contrast=False)
        for shot in SHOTS:
            rng = np.random.Generator(np.random.PCG64(1234))
            noisy = camera_pipeline(img, shot, rng)
            noisy = finish(noisy) if finish else noisy
            np.save(os.path.join(work, f"{name}-shot{shot}-before-jpeg.npy"), noisy)
            np_ = os.path.join(work, f"{name}-shot{shot}.jpg")
            with open(np_, "wb") as f:
                f.write(jpeg(noisy))
            items.append((name, shot, cp, np_))
    return items


def frame_items(work):
    """[(name, peak, expected (float), noisy_png16)]"""
    os.makedirs(work, exist_ok=True)
    items = []
    grey = devset.grey_images()
    for name in ("camera512", "astronaut512", "coffee256"):
        x = grey[name] / 255.0
        for peak in PEAKS:
            rng = np.random.Generator(np.random.PCG64(1234))
            frame = OFFSET + GAIN * rng.poisson(peak * x) + READ * rng.standard_normal(x.shape)
            frame = np.clip(np.rint(frame), 0, 65535).astype(np.uint16)
            np_ = os.path.join(work, f"{name}-peak{peak}.png")
            io.imsave(np_, frame, check_contrast=False)
            items.append((name, peak, OFFSET + GAIN * peak * x, np_))
    return items


def _gat(z):
    return 2.0 / GAIN * np.sqrt(np.maximum(GAIN * z + 0.375 * GAIN ** 2 + READ ** 2 - GAIN * OFFSET, 0))


def _gat_inverse(d):
    """Closed-form exact unbiased inverse (Makitalo and Foi 2011) for gain 1, with the read noise
    taken as extra counts, then back to grey levels (as the crate does)."""
    d = np.maximum(d, np.sqrt(1.5))
    r = np.sqrt(1.5)
    counts = np.maximum(d * d / 4 + 0.25 * r / d - 11 / 8 / d ** 2 + 0.625 * r / d ** 3 - 0.125, 0)
    return GAIN * np.maximum(counts - (READ / GAIN) ** 2, 0) + OFFSET


def _u8(f):
    return np.clip(np.rint(f), 0, 255).astype(np.uint8)


def run_cli(exe, noisy, out, extra=()):
    import subprocess
    r = subprocess.run([exe, "denoise", noisy, "-o", out, "--json", *extra], capture_output=True, check=True)
    return json.loads(r.stdout)


def noise_fit(exe, path, *extra):
    import subprocess
    return json.loads(subprocess.run([exe, "noise", path, "--json", *extra], capture_output=True, check=True).stdout)


def camera_rows(exe, work, images=None, finish=None, reference=None):
    """Per image and shot: Patchgraph default, the best tuned peer, and the effective level's error."""
    out = []
    for name, shot, cp, np_ in camera_items(os.path.join(work, "camera"), images, finish, reference):
        clean = io.imread(cp)
        noisy = np.asarray(Image.open(np_).convert("RGB"))
        # The noise's own std: before JPEG, which removes some of it (fine grain) and adds its own
        # error (on texture). 'In the file' is the std of the decoded JPEG against the reference:
        # what a blind estimate can see.
        true_std = float(np.std(np.load(np_[:-4] + "-before-jpeg.npy").astype(np.float64) - clean))
        opath = np_[:-4] + "-pg.png"
        rep = run_cli(exe, np_, opath)
        pg = peak_signal_noise_ratio(clean, io.imread(opath), data_range=255)
        eff = rep["noise_model"]["mean_level"]
        peers = {}
        for k in (0.5, 0.7, 0.9, 1.1, 1.4):
            h = float(k * true_std)
            den = cv2.fastNlMeansDenoisingColored(noisy, None, h=h, hColor=h, templateWindowSize=7, searchWindowSize=21)
            peers.setdefault("OpenCV fastNlMeansColored", []).append(peak_signal_noise_ratio(clean, den, data_range=255))
        for k in (0.3, 0.5, 0.8, 1.1):
            den = _u8(255 * denoise_tv_chambolle(noisy / 255.0, weight=k * true_std / 255, channel_axis=-1))
            peers.setdefault("scikit-image TV Chambolle", []).append(peak_signal_noise_ratio(clean, den, data_range=255))
        best = max((max(v), p) for p, v in peers.items())
        out.append(dict(image=name, noise=f"shot {shot}", input=peak_signal_noise_ratio(clean, noisy, data_range=255),
                        patchgraph=pg, peer=best[0], peer_name=best[1], model=rep["noise_model"]["model"],
                        true_std=true_std, level=eff, in_file=float(np.std(noisy.astype(np.float64) - clean))))
    return out


GRAINY_IMAGES = ("retina256", "clock", "blobs256", "horse", "micrograph256", "camera256", "astronaut256", "coffee256")
BINOMIAL = np.outer([0.25, 0.5, 0.25], [0.25, 0.5, 0.25])


def grainy(clean):
    """(c): white noise of std 25 filtered by the 3 x 3 binomial kernel, clipped and rounded to 8 bits."""
    rng = np.random.Generator(np.random.PCG64(1234))
    noise = convolve(25.0 * rng.standard_normal(clean.shape), BINOMIAL, mode="reflect")
    return np.clip(np.rint(clean + noise), 0, 255).astype(np.uint8)


def grainy_rows(exe, work):
    """Per grey image: white noise filtered by the 3 x 3 binomial kernel (c); peers tuned on its std."""
    os.makedirs(work, exist_ok=True)
    images = {**devset.grey_images(), **devset.user_like_images()}
    out = []
    for name in GRAINY_IMAGES:
        clean = images[name]
        noisy = grainy(clean)
        np_ = os.path.join(work, f"{name}-grainy.png")
        io.imsave(np_, noisy, check_contrast=False)
        std = float(np.std(noisy.astype(np.float64) - clean))
        opath = np_[:-4] + "-pg.png"
        rep = run_cli(exe, np_, opath)
        pg = peak_signal_noise_ratio(clean, io.imread(opath), data_range=255)
        peers = {}
        for k in (0.5, 0.7, 0.9, 1.1, 1.4, 1.8, 2.2):
            den = cv2.fastNlMeansDenoising(noisy, None, h=float(k * std), templateWindowSize=7, searchWindowSize=21)
            peers.setdefault("OpenCV fastNlMeans", []).append(peak_signal_noise_ratio(clean, den, data_range=255))
        for k in (0.3, 0.5, 0.8, 1.1, 1.5, 2.0):
            den = _u8(255 * denoise_tv_chambolle(noisy / 255.0, weight=k * std / 255))
            peers.setdefault("scikit-image TV Chambolle", []).append(peak_signal_noise_ratio(clean, den, data_range=255))
        best = max((max(v), p) for p, v in peers.items())
        out.append(dict(image=f"{name} (grainy)", noise="binomial-filtered", input=peak_signal_noise_ratio(clean, noisy, data_range=255),
                        patchgraph=pg, peer=best[0], peer_name=best[1], model=rep["noise_model"]["model"],
                        true_std=std, level=rep["noise_model"]["mean_level"], in_file=std))
    return out


def frame_rows(exe, work):
    out = []
    for name, peak, expected, np_ in frame_items(os.path.join(work, "frames")):
        noisy = io.imread(np_).astype(np.float64)
        rng_ = GAIN * peak
        opath = np_[:-4] + "-pg.png"
        rep = run_cli(exe, np_, opath)
        pg = peak_signal_noise_ratio(expected, io.imread(opath).astype(np.float64), data_range=rng_)
        ch = rep["noise_model"]["channels"][0]
        photon = ch.get("photon") or {}
        d = _gat(noisy)
        scale = 255.0 / d.max()
        best = (-1, "")
        for k in (0.6, 0.8, 1.0, 1.2, 1.5):
            den = cv2.fastNlMeansDenoising(_u8(d * scale), None, h=float(k * scale), templateWindowSize=7, searchWindowSize=21)
            best = max(best, (peak_signal_noise_ratio(expected, _gat_inverse(den / scale), data_range=rng_), "GAT + OpenCV fastNlMeans"))
        for k in (0.5, 0.8, 1.1):
            den = denoise_tv_chambolle(d, weight=k)
            best = max(best, (peak_signal_noise_ratio(expected, _gat_inverse(den), data_range=rng_), "GAT + scikit-image TV"))
        # The read noise when the camera's offset is known (a data sheet or a dark frame gives it):
        # without a black area in the scene the fit cannot separate offset from read noise.
        given = noise_fit(exe, np_, "--offset", str(OFFSET))["channels"][0].get("photon") or {}
        out.append(dict(image=name, noise=f"peak {peak}", input=peak_signal_noise_ratio(expected, noisy, data_range=rng_),
                        patchgraph=pg, peer=best[0], peer_name=best[1], model=rep["noise_model"]["model"],
                        gain=photon.get("gain", float("nan")), read=photon.get("read_noise", float("nan")),
                        offset=photon.get("offset", float("nan")), read_given=given.get("read_noise", float("nan"))))
    return out


def table(exe, work):
    cam, fr = camera_rows(exe, work), frame_rows(exe, work)
    marked = lambda rows, mark: [dict(r, image=f"{r['image']} ({mark})") for r in rows]
    more = marked(camera_rows(exe, os.path.join(work, "more"), devset.colour_images_more()), "more")
    smoothed = marked(camera_rows(exe, os.path.join(work, "smoothed"), None, smooth_colour), "colour-smoothed")
    grey = marked(camera_rows(exe, os.path.join(work, "grey"), None, to_grey, to_grey), "made grey")
    # Grey pictures have no colour planes to tell texture from noise: the four more images made grey.
    grey_more = marked(camera_rows(exe, os.path.join(work, "grey-more"), devset.colour_images_more(), to_grey, to_grey),
                       "more, made grey")
    # Kept out of tuning: the same protocol on an image the noise fit was never tuned on.
    checks = marked(camera_rows(exe, os.path.join(work, "checks"), devset.colour_checks()), "check")
    checks += marked(camera_rows(exe, os.path.join(work, "checks-smoothed"), devset.colour_checks(), smooth_colour),
                     "check, colour-smoothed")
    grainy = grainy_rows(exe, os.path.join(work, "grainy"))
    lines = ["| image | noise | input | Patchgraph (default) | best tuned peer | difference | model chosen | fitted |",
             "|---|---|---|---|---|---|---|---|"]
    for r in cam + more + smoothed + grey + grey_more + checks + grainy:
        lines.append(f"| {r['image']} | {r['noise']} | {r['input']:.2f} | {r['patchgraph']:.2f} | {r['peer']:.2f} ({r['peer_name']}) | "
                     f"{r['patchgraph'] - r['peer']:+.2f} | {r['model']} | level {r['level']:.2f} (true {r['true_std']:.2f}; "
                     f"{r['in_file']:.2f} in the file) |")
    for r in fr:
        lines.append(f"| {r['image']} | {r['noise']} | {r['input']:.2f} | {r['patchgraph']:.2f} | {r['peer']:.2f} ({r['peer_name']}) | "
                     f"{r['patchgraph'] - r['peer']:+.2f} | {r['model']} | gain {r['gain']:.2f} (true {GAIN:g}), read {r['read']:.2f} "
                     f"(true {READ:g}), offset {r['offset']:.1f} (true {OFFSET:g}); read {r['read_given']:.2f} with the offset given |")
    summary = []
    for label, rows in (("camera JPEGs", cam), ("16-bit frames", fr), ("camera JPEGs of the four more images", more),
                        ("colour-smoothed camera JPEGs", smoothed),
                        ("camera JPEGs made grey", grey),
                        ("camera JPEGs of the four more images made grey", grey_more),
                        ("camera JPEGs of the independent check (not tuned on)", checks),
                        ("grainy noise made here", grainy)):
        d = np.mean([r["patchgraph"] - r["peer"] for r in rows])
        summary.append(f"{label}: mean {np.mean([r['patchgraph'] for r in rows]):.2f} dB against the best tuned peer's "
                       f"{np.mean([r['peer'] for r in rows]):.2f} dB ({d:+.2f} dB)")
    return lines, summary, cam, fr


if __name__ == "__main__":
    import sys
    import tempfile
    lines, summary, _, _ = table(sys.argv[1], tempfile.mkdtemp(prefix="pg-real-"))
    print("\n".join(lines))
    print("; ".join(summary))
