"""Large-image benchmark: a 24-megapixel colour photo-like scene (6000 x 4000, 8-bit) and a 16-bit
8000 x 8000 grey scan, both synthetic scenes of our own with Gaussian noise, through the CLI with
the default settings (patch-graph, sigma estimated). Reports wall seconds, the child's peak
resident memory (from wait4, the kernel's own count), bytes per pixel and PSNR against the clean
scene. Leaves the noisy inputs and CLI results in WORKDIR for the page's run (bench-large.mjs).

Usage: large.py PATCHGRAPH_BIN WORKDIR  (prints a Markdown section and writes WORKDIR/cli.json)"""
import json
import os
import subprocess
import sys
import time

import cv2
import numpy as np
from skimage.metrics import peak_signal_noise_ratio


def scene(w, h, channels, seed):
    """Smooth light falloff, discs of many sizes and tones, a fine grating and sharp bars: edges,
    flat areas and texture at once, in [0, 1]."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    base = 0.35 + 0.25 * np.cos((x / w - 0.4) * 2.2) * np.cos((y / h - 0.6) * 1.7)
    img = np.repeat(base[..., None], channels, axis=2)
    for _ in range(400):
        cx, cy, r = rng.uniform(0, w), rng.uniform(0, h), rng.uniform(8, w / 20)
        x0, x1, y0, y1 = int(max(cx - r, 0)), int(min(cx + r + 1, w)), int(max(cy - r, 0)), int(min(cy + r + 1, h))
        if x1 <= x0 or y1 <= y0:
            continue
        inside = (x[y0:y1, x0:x1] - cx) ** 2 + (y[y0:y1, x0:x1] - cy) ** 2 <= r * r
        img[y0:y1, x0:x1][inside] = rng.uniform(0.05, 0.95, channels)
    band = (y > h * 0.45) & (y < h * 0.55)
    img[band] = (0.5 + 0.3 * np.sign(np.sin(x[band] * 2 * np.pi / (6 + 20 * x[band] / w))))[:, None]
    return np.clip(img, 0, 1)


def run(cli, src, out):
    t0 = time.perf_counter()
    p = subprocess.Popen([cli, "denoise", src, "-o", out, "--json"], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
    report = json.loads(p.stdout.read())
    _, status, usage = os.wait4(p.pid, 0)
    if status != 0:
        raise SystemExit(f"the CLI failed on {src}")
    return time.perf_counter() - t0, usage.ru_maxrss * 1024, report


def main():
    cli, work = sys.argv[1], sys.argv[2]
    os.makedirs(work, exist_ok=True)
    cases = [
        ("24 MP colour, 8-bit, 6000 x 4000", "colour24", 6000, 4000, 3, 255, 15),
        ("64 MP grey, 16-bit, 8000 x 8000", "grey16", 8000, 8000, 1, 65535, 15 * 257),
    ]
    rows, record = [], {}
    for label, name, w, h, ch, peak, sigma in cases:
        rng = np.random.default_rng(7)
        clean = scene(w, h, ch, seed=3) * peak
        noisy = clean + rng.normal(0, sigma, clean.shape).astype(np.float32)
        dtype = np.uint8 if peak == 255 else np.uint16
        clean_q = np.clip(np.rint(clean), 0, peak).astype(dtype)
        noisy_q = np.clip(np.rint(noisy), 0, peak).astype(dtype)
        del clean, noisy
        src, out = os.path.join(work, f"{name}-noisy.png"), os.path.join(work, f"{name}-cli.png")
        # OpenCV writes BGR; the scene is symmetric in its channels' roles, so order does not matter
        # for the benchmark, but keep RGB on disk for the page by reversing.
        cv2.imwrite(src, noisy_q[..., ::-1] if ch == 3 else noisy_q[..., 0])
        secs, rss, report = run(cli, src, out)
        res = cv2.imread(out, cv2.IMREAD_UNCHANGED)
        res = res[..., ::-1] if ch == 3 else res[..., None]
        psnr_in = peak_signal_noise_ratio(clean_q, noisy_q, data_range=peak)
        psnr_out = peak_signal_noise_ratio(clean_q, res, data_range=peak)
        px = w * h
        record[name] = {"input": src, "cli_output": out, "seconds": secs, "peak_bytes": rss}
        rows.append(f"| {label} | {report['sigma']:.1f} | {psnr_in:.2f} -> {psnr_out:.2f} | {secs:.0f} | "
                    f"{rss / 2**30:.2f} | {rss / px:.0f} |")
        del clean_q, noisy_q, res
    with open(os.path.join(work, "cli.json"), "w") as f:
        json.dump(record, f)
    print("\n".join([
        "## Very large images, command line",
        "",
        f"Synthetic scenes of our own (tests/bench/large.py), Gaussian noise sigma 15 (x 257 at 16 bits); default "
        f"settings (patch-graph, sigma estimated); {os.cpu_count()} cores. Peak memory is the process's maximum resident "
        "set (wait4), including decode and encode.",
        "",
        "| image | sigma estimated | PSNR in -> out, dB | wall seconds | peak memory, GiB | bytes per pixel |",
        "|---|---|---|---|---|---|",
        *rows,
        "",
    ]))


if __name__ == "__main__":
    main()
