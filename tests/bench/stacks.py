"""Stacks: our own synthetic z-stack (devset.cell_stack: 10 slices of 192 x 192, cells, granules and
filaments through z), denoised slice by slice (patch_graph.neighbour_slices 0) and as a volume (the
default, 1 slice on each side). (a) 16-bit photon counts: 100 + 4 Poisson(peak x image) + N(0, 6^2),
peaks 60 and 400; reference 100 + 4 peak x image, PSNR over the signal range 4 peak. (b) 8 bits:
20 + 200 x image + N(0, sigma^2), sigma 15 and 30, clipped and rounded; PSNR over 255. Noise from
numpy Generator(PCG64(5)), one draw per case in this order. Default settings otherwise (noise fitted);
whole CLI runs on all cores, the same machine and run."""
import json
import os
import time

import numpy as np
import tifffile

import devset


def cases():
    clean = devset.cell_stack()
    rng = np.random.Generator(np.random.PCG64(5))
    out = []
    for peak in (60, 400):
        lam = peak * clean
        noisy = np.clip(np.rint(100 + 4 * rng.poisson(lam) + rng.normal(0, 6, clean.shape)), 0, 65535)
        out.append((f"16-bit, peak {peak}", noisy.astype(np.uint16), 100 + 4 * lam, 4 * peak))
    for sigma in (15, 30):
        ref = 20 + 200 * clean
        noisy = np.clip(np.rint(ref + rng.normal(0, sigma, clean.shape)), 0, 255)
        out.append((f"8-bit, sigma {sigma}", noisy.astype(np.uint8), ref, 255))
    return out


def psnr(a, ref, top):
    return 10 * np.log10(top ** 2 / np.mean((np.asarray(a, float) - ref) ** 2))


def table(exe, work):
    from bench import run_patchgraph  # here: bench imports this module

    os.makedirs(work, exist_ok=True)
    alone = os.path.join(work, "alone.json")
    with open(alone, "w") as f:
        json.dump({"patch_graph": {"neighbour_slices": 0}}, f)
    lines = ["| stack | input | slices alone | as a volume | gain | seconds alone | seconds as a volume | time ratio |",
             "|---|---|---|---|---|---|---|---|"]
    gains, ratios = [], []
    for name, noisy, ref, top in cases():
        src = os.path.join(work, "stack.tif")
        tifffile.imwrite(src, noisy, photometric="minisblack", metadata=None)
        res = {}
        for mode, extra in (("alone", ("--settings", alone)), ("volume", ())):
            out = os.path.join(work, f"{mode}.tif")
            t0 = time.perf_counter()
            run_patchgraph(exe, src, out, extra=extra)
            res[mode] = (psnr(tifffile.imread(out), ref, top), time.perf_counter() - t0)
        gain, ratio = res["volume"][0] - res["alone"][0], res["volume"][1] / res["alone"][1]
        gains.append(gain)
        ratios.append(ratio)
        lines.append(f"| {name} | {psnr(noisy, ref, top):.2f} | {res['alone'][0]:.2f} | {res['volume'][0]:.2f} | "
                     f"{gain:+.2f} | {res['alone'][1]:.1f} | {res['volume'][1]:.1f} | {ratio:.2f} |")
    summary = (f"As a volume: {min(gains):+.2f} to {max(gains):+.2f} dB over slices alone, "
               f"at {min(ratios):.1f}x to {max(ratios):.1f}x their time.")
    return lines, summary


if __name__ == "__main__":
    import sys
    lines, summary = table(sys.argv[1], sys.argv[2] if len(sys.argv) > 2 else "/tmp/patchgraph-stacks")
    print("\n".join(lines))
    print()
    print(summary)
