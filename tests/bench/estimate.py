"""Benchmark of the error estimate (`denoise --estimate-error`): its error against the true PSNR on
the development photographs, and the cost of its second pass against the run's own.

1. Given sigma: white Gaussian noise (NumPy, seed 99) on scikit-image's camera, brick, astronaut
   (256) and coffee (256), written as float32 TIFF (nothing clipped), sigma 10/25/50.
2. Blind: the development set's 8-bit PNGs (noise clipped and rounded; tests/bench/devset.py), sigma
   estimated, over the pixels the estimate covers (its report says which share).
3. Cost: whole-process time of `denoise` with and without the estimate, median of 3, brick 512 at
   sigma 25, both methods, on all cores.

4. Photon frames (--photon: this part alone): estimated minus true PSNR with the model given and
   fitted.

Usage: estimate.py PATCHGRAPH_BIN [--photon]   (prints a Markdown section on stdout)"""
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time

import numpy as np
import tifffile
from scipy.ndimage import maximum_filter
from skimage import color, data, io

import devset

exe = sys.argv[1]
work = tempfile.mkdtemp()


def run(args):
    out = subprocess.run([exe, *map(str, args), "--json"], check=True, capture_output=True, text=True)
    return json.loads(out.stdout)


def given_sigma(method):
    astro = color.rgb2gray(data.astronaut()) * 255.0
    images = {"camera512": data.camera().astype(float), "brick512": data.brick().astype(float),
              "astronaut256": astro.reshape(256, 2, 256, 2).mean(axis=(1, 3)),
              "coffee256": (color.rgb2gray(data.coffee()) * 255.0)[60:316, 170:426]}
    diffs, spreads = [], []
    for name, clean in images.items():
        for s in (10, 25, 50):
            rng = np.random.Generator(np.random.PCG64(99))
            src = os.path.join(work, f"{name}-{s}.tif")
            out = os.path.join(work, f"{name}-{s}-{method}.tif")
            tifffile.imwrite(src, (clean + s * rng.standard_normal(clean.shape)).astype(np.float32), photometric="minisblack")
            e = run(["denoise", src, "-o", out, "--sigma", s, "--method", method, "--estimate-error"])["error_estimate"]
            true_mse = np.mean((tifffile.imread(out).astype(float) - clean) ** 2)
            diffs.append(10 * np.log10(true_mse / e["mse"]))
            spreads.append(e["psnr_spread"])
    return diffs, spreads


def blind(method):
    items = devset.write_set(os.path.join(work, "blind"), (10, 25, 50), which="photos")
    diffs, refused, levels = [], 0, []
    for name, s, cp, npath in items:
        out = npath[:-4] + f"-{method}.png"
        r = run(["denoise", npath, "-o", out, "--method", method, "--estimate-error"])
        e = r["error_estimate"]
        levels.append(100 * (r["sigma"] / s - 1))
        if not e["applies"] or e["psnr"] is None:
            refused += 1
            continue
        c, o, n = (io.imread(p).astype(float) for p in (cp, out, npath))
        keep = np.ones(c.shape, bool)
        if e["covered"] < 1:
            cut = maximum_filter(((n <= 0) | (n >= 255)).astype(np.uint8), size=5) > 0
            m = 2 * r["sigma"]
            keep = (o >= m) & (o <= 255 - m) & ~cut
        true = 10 * np.log10(255**2 / np.mean((c[keep] - o[keep]) ** 2))
        diffs.append(e["psnr"] - true)
    return diffs, refused, len(items), levels


def photon():
    """Estimated minus true PSNR on the real-noise set's 16-bit photon frames (realnoise.py), with the
    model given and fitted; the truth is against the expected frame."""
    import realnoise
    rows = []
    for name, peak, expected, npath in realnoise.frame_items(os.path.join(work, "frames")):
        for how, extra in (("given", ["--noise", "poisson", "--gain", realnoise.GAIN, "--offset", realnoise.OFFSET,
                                       "--read-noise", realnoise.READ]), ("fitted", [])):
            out = os.path.join(work, "frame-out.png")
            e = run(["denoise", npath, "-o", out, "--estimate-error", *extra])["error_estimate"]
            true = 10 * np.log10(65535.0**2 / np.mean((io.imread(out).astype(float) - expected) ** 2))
            rows.append((name, peak, how, None if e["psnr"] is None else e["psnr"] - true))
    return rows


def cost(method):
    # brick: nothing cut off at sigma 25, so the estimate's pass runs for both methods.
    src = os.path.join(work, "brick512-s25.png")
    io.imsave(src, devset.add_noise(devset.grey_images()["brick512"], 25), check_contrast=False)
    times = {}
    for flag in ([], ["--estimate-error"]):
        t = []
        for _ in range(3):
            t0 = time.perf_counter()
            subprocess.run([exe, "denoise", src, "-o", os.path.join(work, "c.png"), "--method", method, *flag], check=True, capture_output=True)
            t.append(time.perf_counter() - t0)
        times[bool(flag)] = statistics.median(t)
    return times[False], times[True]


if "--photon" in sys.argv:
    print("\nPhoton frames (gain 8, offset 100, read noise 12; tests/bench/realnoise.py): estimated minus true PSNR (dB)\n")
    print("| frame | peak | model given | model fitted |")
    print("|---|---|---|---|")
    rows = photon()
    for name, peak in sorted({(r[0], r[1]) for r in rows}):
        cells = [next(f"{r[3]:+.2f}" if r[3] is not None else "not given" for r in rows if r[:3] == (name, peak, how))
                 for how in ("given", "fitted")]
        print(f"| {name} | {peak} | {cells[0]} | {cells[1]} |")
    sys.exit(0)
print("\n## Error estimate without a reference (Stein's unbiased risk estimate)\n")
print("Estimated minus true PSNR (dB). Given sigma: float TIFF inputs, 4 photographs x sigma 10/25/50.")
print("Blind: the development set's 8-bit PNGs, sigma estimated; over the pixels the estimate covers.\n")
print("| method | given sigma: mean | given: max abs | given: mean reported spread | blind: mean | blind: max abs | blind: refused | blind sigma error (%) |")
print("|---|---|---|---|---|---|---|---|")
for method in ("patch-graph", "pixel-graph"):
    d, sp = given_sigma(method)
    b, refused, total, levels = blind(method)
    bm = f"{np.mean(b):+.2f}" if b else "-"
    bx = f"{np.max(np.abs(b)):.2f}" if b else "-"
    print(f"| {method} | {np.mean(d):+.2f} | {np.max(np.abs(d)):.2f} | {np.mean(sp):.2f} | {bm} | {bx} | {refused} of {total} | "
          f"{min(levels):+.1f} to {max(levels):+.1f} |")
print("\nCost of the second pass: whole-process `denoise` time, brick 512 x 512 at sigma 25, median of 3, all cores.\n")
print("| method | run (s) | run + estimate (s) | ratio |")
print("|---|---|---|---|")
for method in ("patch-graph", "pixel-graph"):
    a, b = cost(method)
    print(f"| {method} | {a:.2f} | {b:.2f} | {b / a:.2f} |")
