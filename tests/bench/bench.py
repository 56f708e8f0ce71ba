"""Benchmark: Patchgraph against general-purpose peers on the development set, in one run.

Peers (each tuned on the TRUE sigma over a small grid, best mean PSNR per sigma kept; and blind with
scikit-image's estimate_sigma): OpenCV fastNlMeansDenoising, scikit-image denoise_nl_means and
denoise_tv_chambolle. Patchgraph runs blind (sigma estimated) and with the true sigma, through its
CLI. Metrics on uint8 outputs against the clean uint8 images. Times are seconds per megapixel on one
thread; Patchgraph's is the CLI's own denoise time (decode and encode excluded); peak memory is the
child process's maximum resident set size.

Usage: bench.py PATCHGRAPH_BIN OUT.md [--quick]"""
import json
import os
import platform
import subprocess
import sys
import tempfile
import time

import cv2
import numpy as np
import skimage
from skimage import io
from skimage.metrics import peak_signal_noise_ratio, structural_similarity
from skimage.restoration import denoise_nl_means, denoise_tv_chambolle, estimate_sigma

import devset
import realnoise
import stacks

cv2.setNumThreads(1)
SIGMAS = (10, 25, 50)


def ssim(a, b):
    return structural_similarity(a, b, gaussian_weights=True, sigma=1.5, use_sample_covariance=False, data_range=255)


def u8(f):
    return np.clip(np.rint(f), 0, 255).astype(np.uint8)


def opencv_nlm(noisy, s, k):
    return cv2.fastNlMeansDenoising(noisy, None, h=float(k * s), templateWindowSize=7, searchWindowSize=21)


def sk_nlm(noisy, s, k):
    f = noisy / 255.0
    return u8(255 * denoise_nl_means(f, h=k * s / 255, sigma=s / 255, fast_mode=True, patch_size=5, patch_distance=6))


def sk_tv(noisy, s, k):
    return u8(255 * denoise_tv_chambolle(noisy / 255.0, weight=k * s / 255))


# name -> (function, grid of the parameter multiplier k of sigma)
PEERS = {
    "OpenCV fastNlMeans": (opencv_nlm, (0.7, 0.9, 1.1)),
    "scikit-image NLM": (sk_nlm, (0.4, 0.55, 0.7)),
    "scikit-image TV Chambolle": (sk_tv, (0.5, 0.8, 1.1)),
}


def run_patchgraph(exe, noisy_path, out_path, sigma=None, extra=()):
    args = [exe, "denoise", noisy_path, "-o", out_path, "--json", *extra]
    if sigma is not None:
        args += ["--sigma", str(sigma)]
    with tempfile.TemporaryFile() as so:
        p = subprocess.Popen(args, stdout=so, stderr=subprocess.PIPE)
        _, status, ru = os.wait4(p.pid, 0)
        so.seek(0)
        if os.waitstatus_to_exitcode(status) != 0:
            raise RuntimeError(f"patchgraph failed on {noisy_path}: {p.stderr.read().decode()}")
        report = json.loads(so.read())
    return report, ru.ru_maxrss * 1024


PG_RUNS = [
    ("Patchgraph patch-graph, blind", False, "patch-graph"),
    ("Patchgraph patch-graph, true sigma", True, "patch-graph"),
    ("Patchgraph pixel-graph, blind", False, "pixel-graph"),
    # The same with a fixed basis across each group (all group-graph weights 1): the graph must
    # at least equal it everywhere and beat it where structure varies within a group.
    ("Patchgraph patch-graph, blind, fixed group basis", False, "patch-graph"),
    # The pixel graph joined by similarity (pixel_graph.graph = non-local) instead of the cut grid.
    ("Patchgraph pixel-graph, blind, non-local graph", False, "pixel-graph"),
]
UNIFORM = "Patchgraph patch-graph, blind, fixed group basis"
NONLOCAL = "Patchgraph pixel-graph, blind, non-local graph"


def colour_peers():
    def cv(noisy, s, k):
        return cv2.fastNlMeansDenoisingColored(noisy, None, h=float(k * s), hColor=float(k * s),
                                               templateWindowSize=7, searchWindowSize=21)

    def nlm(noisy, s, k):
        f = noisy / 255.0
        return u8(255 * denoise_nl_means(f, h=k * s / 255, sigma=s / 255, fast_mode=True, patch_size=5,
                                         patch_distance=6, channel_axis=-1))

    def tv(noisy, s, k):
        return u8(255 * denoise_tv_chambolle(noisy / 255.0, weight=k * s / 255, channel_axis=-1))

    return {"OpenCV fastNlMeansColored": (cv, (0.7, 0.9, 1.1)), "scikit-image NLM": (nlm, (0.4, 0.55, 0.7)),
            "scikit-image TV Chambolle": (tv, (0.5, 0.8, 1.1))}


def anscombe(z):
    return 2.0 * np.sqrt(z + 0.375)


def anscombe_inverse(d):
    """Makitalo and Foi (2011) closed form, clamped at zero counts (as the crate does)."""
    d = np.maximum(d, 1.2247448713915890)
    r = np.sqrt(1.5)
    return np.maximum(d * d / 4 + 0.25 * r / d - 11 / 8 / d ** 2 + 0.625 * r / d ** 3 - 0.125, 0)


def poisson_rows(exe, work):
    """Peak 10: counts = Poisson(clean / 255 * 10), PCG64(1234). Patchgraph reads them as a 16-bit PNG
    with 256 grey levels per photon, told so (gain 256, offset 0, no read noise) and with default
    settings (the noise fitted); peers: Anscombe, OpenCV NLM on the stabilised image scaled to 8 bits
    (h tuned on a grid), the same closed-form inverse."""
    peak = 10.0
    settings = os.path.join(work, "poisson.json")
    with open(settings, "w") as f:
        json.dump({"version": 2, "noise": "poisson", "gain": 256.0, "offset": 0.0, "read_noise": 0.0}, f)
    out = {}
    g = devset.grey_images()
    for name in ("camera512", "astronaut512"):
        lam = g[name] / 255.0 * peak
        z = np.random.Generator(np.random.PCG64(1234)).poisson(lam).astype(np.float64)
        npath = os.path.join(work, f"{name}-poisson.png")
        io.imsave(npath, (z * 256).astype(np.uint16), check_contrast=False)
        opath = os.path.join(work, f"{name}-poisson-pg.png")
        run_patchgraph(exe, npath, opath, None, ["--settings", settings])
        est = io.imread(opath).astype(np.float64) / 256
        out.setdefault("Patchgraph patch-graph, told the gain", []).append(peak_signal_noise_ratio(lam, est, data_range=peak))
        run_patchgraph(exe, npath, opath)
        est = io.imread(opath).astype(np.float64) / 256
        out.setdefault("Patchgraph patch-graph, default (noise fitted)", []).append(peak_signal_noise_ratio(lam, est, data_range=peak))
        d = anscombe(z)
        scale = 255.0 / d.max()
        d8 = u8(d * scale)
        best = -1
        for k in (0.7, 0.9, 1.1, 1.3):
            den = cv2.fastNlMeansDenoising(d8, None, h=float(k * scale), templateWindowSize=7, searchWindowSize=21)
            best = max(best, peak_signal_noise_ratio(lam, anscombe_inverse(den / scale), data_range=peak))
        out.setdefault("Anscombe + OpenCV fastNlMeans (h tuned) + closed-form inverse", []).append(best)
    return [f"| {m} | {v[0]:.2f} | {v[1]:.2f} | {np.mean(v):.2f} |" for m, v in out.items()]


def colour_rows(exe, work):
    peers = colour_peers()
    rows = {}
    items = devset.write_set(os.path.join(work, "rgb"), SIGMAS, colour=True)
    for name, s, cpath, npath in items:
        clean, noisy = io.imread(cpath), io.imread(npath)
        opath = os.path.join(work, f"{name}-s{s}-pg.png")
        run_patchgraph(exe, npath, opath)
        rows.setdefault(("Patchgraph patch-graph, blind", s), []).append(peak_signal_noise_ratio(clean, io.imread(opath), data_range=255))
        for peer, (fn, grid) in peers.items():
            for k in grid:
                rows.setdefault((f"{peer}|{k}", s), []).append(peak_signal_noise_ratio(clean, fn(noisy, s, k), data_range=255))
    lines = []
    names = ["Patchgraph patch-graph, blind"] + list(peers)
    for m in names:
        cells = []
        for s in SIGMAS:
            if m in peers:
                v = max(np.mean(rows[(f"{m}|{k}", s)]) for k in peers[m][1])
            else:
                v = np.mean(rows[(m, s)])
            cells.append(f"{v:.2f}")
        lines.append(f"| {m}{'' if m.startswith('Patchgraph') else ', tuned'} | " + " | ".join(cells) + " |")
    return lines


def main():
    exe, out_md = sys.argv[1], sys.argv[2]
    quick = "--quick" in sys.argv
    work = tempfile.mkdtemp(prefix="pg-bench-")
    items = devset.write_set(work, SIGMAS, which="all")
    if quick:
        items = [it for it in items if it[0] in ("camera256", "astronaut256", "phantom256", "stars256")]
    uniform = os.path.join(work, "uniform.json")
    with open(uniform, "w") as f:
        json.dump({"patch_graph": {"group_graph": "uniform"}}, f)
    nonlocal_graph = os.path.join(work, "non-local.json")
    with open(nonlocal_graph, "w") as f:
        json.dump({"pixel_graph": {"graph": "non-local"}}, f)
    variant = {UNIFORM: uniform, NONLOCAL: nonlocal_graph}
    per_image = {}  # (image, sigma) -> {method: psnr}
    rows = {}  # (method, sigma) -> list of (psnr, ssim)
    times = {}  # method -> list of (seconds, megapixels)

    def add(method, s, clean, out):
        rows.setdefault((method, s), []).append((peak_signal_noise_ratio(clean, out, data_range=255), ssim(clean, out)))

    for name, s, cpath, npath in items:
        clean, noisy = io.imread(cpath), io.imread(npath)
        mp = clean.size / 1e6
        for label, sig, method in PG_RUNS:
            opath = os.path.join(work, f"{name}-s{s}-pg.png")
            extra = ["--method", method] + (["--settings", variant[label]] if label in variant else [])
            report, rss = run_patchgraph(exe, npath, opath, s if sig else None, extra)
            add(label, s, clean, io.imread(opath))
            per_image.setdefault((name, s), {})[label] = rows[(label, s)][-1][0]
            if not sig:
                times.setdefault(label, []).append((report["seconds"], mp))
        est = estimate_sigma(noisy.astype(np.float64))
        for peer, (fn, grid) in PEERS.items():
            for k in grid:
                t0 = time.perf_counter()
                out = fn(noisy, s, k)
                dt = time.perf_counter() - t0
                add(f"{peer}|{k}", s, clean, out)
                cell = per_image.setdefault((name, s), {})
                cell[peer] = max(cell.get(peer, -1.0), rows[(f"{peer}|{k}", s)][-1][0])
                if k == grid[len(grid) // 2]:
                    times.setdefault(peer, []).append((dt, mp))
            add(f"{peer}, blind", s, clean, fn(noisy, est, grid[len(grid) // 2]))

    def mean(method, s):
        v = rows[(method, s)]
        return float(np.mean([p for p, _ in v])), float(np.mean([q for _, q in v]))

    per_image_lines = []
    for (name, s), cell in per_image.items():
        peer = max(PEERS, key=lambda p: cell[p])
        pg, uni, px = cell["Patchgraph patch-graph, blind"], cell[UNIFORM], cell["Patchgraph pixel-graph, blind"]
        nl = cell[NONLOCAL]
        per_image_lines.append(f"| {name} | {s} | {pg:.2f} | {uni:.2f} ({pg - uni:+.2f}) | {px:.2f} | {nl:.2f} | "
                               f"{cell[peer]:.2f} ({peer}) | {pg - cell[peer]:+.2f} | {px - cell[peer]:+.2f} | "
                               f"{nl - cell[peer]:+.2f} |")
    table = []
    methods = [label for label, _, _ in PG_RUNS]
    for peer, (_, grid) in PEERS.items():
        for s in SIGMAS:
            best = max(grid, key=lambda k: mean(f"{peer}|{k}", s)[0])
            rows[(f"{peer}, tuned", s)] = rows[(f"{peer}|{best}", s)]
        methods += [f"{peer}, tuned", f"{peer}, blind"]
    for m in methods:
        cells = [f"{mean(m, s)[0]:.2f} / {mean(m, s)[1]:.4f}" for s in SIGMAS]
        table.append(f"| {m} | " + " | ".join(cells) + " |")

    def spm(m):
        return float(np.median([t / mp for t, mp in times[m]]))

    # Memory and speed at a size where the fixed cost of the process is small: 2048 x 2048.
    big_clean = np.tile(devset.grey_images()["camera512"], (4, 4))
    big = os.path.join(work, "big-s25.png")
    io.imsave(big, devset.add_noise(big_clean, 25), check_contrast=False)
    runs = [run_patchgraph(exe, big, os.path.join(work, "big-out.png"), None, ["--method", "pixel-graph"]) for _ in range(3)]
    big_sec = float(np.median([r["seconds"] for r, _ in runs]))
    big_rss = max(rss for _, rss in runs)
    big_noisy = io.imread(big)
    cv_times = []
    for _ in range(3):
        t0 = time.perf_counter()
        opencv_nlm(big_noisy, 25, 0.9)
        cv_times.append(time.perf_counter() - t0)
    cv_big = float(np.median(cv_times))

    # Patch-graph wall time on all cores against OpenCV NLM on all cores, 512 x 512 grey.
    cam = [it for it in items if it[0] == "camera512" and it[1] == 25] or items[:1]
    pg_wall, cv_wall = [], []
    cv2.setNumThreads(os.cpu_count())
    cam_noisy = io.imread(cam[0][3])
    for _ in range(3):
        t0 = time.perf_counter()
        run_patchgraph(exe, cam[0][3], os.path.join(work, "cam-out.png"))
        pg_wall.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        opencv_nlm(cam_noisy, 25, 0.9)
        cv_wall.append(time.perf_counter() - t0)
    cv2.setNumThreads(1)
    pg_wall, cv_wall = float(np.median(pg_wall)), float(np.median(cv_wall))

    colour = [] if quick else colour_rows(exe, work)
    real_lines, real_summary, _, _ = realnoise.table(exe, os.path.join(work, "real"))
    poisson = poisson_rows(exe, work)
    stack_lines, stack_summary = stacks.table(exe, os.path.join(work, "stacks"))
    big12 = ""
    if not quick:
        # A 12-megapixel colour photo (4000 x 3000, astronaut tiled), sigma 15: time and peak memory.
        astro = devset.colour_images()["astronaut-rgb512"]
        photo = np.tile(astro, (6, 8, 1))[:3000, :4000]
        ppath = os.path.join(work, "photo12.png")
        io.imsave(ppath, devset.add_noise(photo, 15), check_contrast=False)
        rep, rss = run_patchgraph(exe, ppath, os.path.join(work, "photo12-out.png"))
        big12 = (f"12-megapixel colour photo (4000 x 3000, sigma 15), patch-graph on all cores: {rep['seconds']:.1f} s, "
                 f"peak resident memory {rss / 2**30:.2f} GiB.")

    best_peer = {s: max((mean(f"{p}, tuned", s)[0], p) for p in PEERS) for s in SIGMAS}
    gaps = [f"sigma {s}: patch-graph {mean(methods[0], s)[0] - best_peer[s][0]:+.2f} dB, pixel-graph "
            f"{mean(methods[2], s)[0] - best_peer[s][0]:+.2f} dB against {best_peer[s][1]}" for s in SIGMAS]
    images = sorted({it[0] for it in items})
    md = [
        "# Benchmarks",
        "",
        f"Measured {time.strftime('%Y-%m-%d')} on {platform.machine()} ({os.cpu_count()} cores) with "
        f"`scripts/bench.sh`{' --quick' if quick else ''}; numpy {np.__version__}, scikit-image {skimage.__version__}, "
        f"OpenCV {cv2.__version__}. Images: scikit-image's bundled samples ({', '.join(images)}); noise: "
        "per image and sigma a fresh numpy Generator(PCG64(1234)), clipped and rounded to 8 bits.",
        "",
        "## Quality: mean PSNR (dB) / mean SSIM (Wang et al. 2004 settings)",
        "",
        "Peers 'tuned' had their strength chosen on the true sigma (best of a small grid per sigma); "
        "'blind' peers used scikit-image's estimate_sigma; Patchgraph 'blind' estimates sigma itself.",
        "",
        "| method | sigma 10 | sigma 25 | sigma 50 |",
        "|---|---|---|---|",
        *table,
        "",
        "Blind Patchgraph against the best tuned peer: " + "; ".join(gaps) + ".",
        "",
        "## Per image: PSNR (dB), blind Patchgraph against the best peer tuned on the true sigma for that image",
        "",
        "Images: " + devset.__doc__.split("\n\n", 1)[1].replace("\n", " "),
        "",
        "| image | sigma | patch-graph | fixed group basis (graph gain) | pixel-graph | pixel-graph, non-local | best tuned peer | "
        "patch-graph - peer | pixel-graph - peer | non-local - peer |",
        "|---|---|---|---|---|---|---|---|---|---|",
        *per_image_lines,
        "",
        "## Colour (RGB): mean PSNR (dB)",
        "",
        "| method | sigma 10 | sigma 25 | sigma 50 |",
        "|---|---|---|---|",
        *colour,
        "",
        "## Real instruments' noise: PSNR (dB), Patchgraph with default settings (noise fitted)",
        "",
        realnoise.__doc__.strip().replace("\n", " "),
        "",
        *real_lines,
        "",
        "; ".join(real_summary) + ".",
        "",
        "## Stacks: slices alone against the volume, PSNR (dB)",
        "",
        stacks.__doc__.strip().replace("\n", " "),
        "",
        *stack_lines,
        "",
        stack_summary,
        "",
        "## Poisson noise, peak 10: PSNR (dB) on the photon scale",
        "",
        "| method | camera 512 | astronaut 512 | mean |",
        "|---|---|---|---|",
        *poisson,
        "",
        "## Speed and memory",
        "",
        f"512 x 512 grey, sigma 25, wall time on all {os.cpu_count()} cores (median of 3, whole CLI run for Patchgraph): "
        f"Patchgraph patch-graph {pg_wall:.2f} s, OpenCV fastNlMeans {cv_wall:.3f} s; ratio {pg_wall / cv_wall:.1f}.",
        "",
        big12,
        "",
        "Per-image times on the dev set (Patchgraph's own denoise time; patch-graph uses all cores, the",
        "others one thread):",
        "",
        "| method | median seconds per megapixel, dev set |",
        "|---|---|",
        *[f"| {m} | {spm(m):.3f} |" for m in ["Patchgraph patch-graph, blind", "Patchgraph pixel-graph, blind", NONLOCAL, *PEERS]],
        "",
        f"2048 x 2048 grey, sigma 25, one thread (median of 3): Patchgraph pixel-graph {big_sec:.2f} s "
        f"({big_sec / 4.194304:.3f} s/MP), OpenCV fastNlMeans {cv_big:.2f} s ({cv_big / 4.194304:.3f} s/MP); "
        f"ratio pixel-graph / OpenCV = {big_sec / cv_big:.2f}. Pixel-graph peak resident memory "
        f"{big_rss / 2**20:.0f} MiB = {big_rss / (2048 * 2048):.0f} bytes per pixel (whole process, "
        "decoded input and encoded output included).",
        "",
    ]
    with open(out_md, "w") as f:
        f.write("\n".join(md))
    print("\n".join(md))


if __name__ == "__main__":
    main()
