"""The development set: scikit-image's bundled sample images with Gaussian noise, exactly as in the
shared peers table (fresh numpy Generator(PCG64(1234)) per image and sigma; clipped, rounded to uint8).
Images are loaded from inside the scikit-image wheel (no download).

Besides the four photographs, images that look like our users' (tuned on too, never one alone):
scikit-image's retina (grey crop; colour crop in the colour set), clock, microaneurysms, Shepp-Logan
phantom (piecewise constant, half black: noise clips at 0), binary_blobs and horse smoothed (smooth
shapes); and our own scenes, drawn here: a fluorescence micrograph (dim background, soft cells,
filaments), a star field (black sky, point sources of many brightnesses) and flat shapes on a
black background. The moon is kept out of tuning, for independent checks."""
import numpy as np
from scipy.ndimage import gaussian_filter
from skimage import data, color, io


def _u8(a):
    return np.clip(np.rint(a), 0, 255).astype(np.uint8)


def micrograph(n=256, seed=11):
    """Ours: dim uneven background (about 8 grey levels), soft cells with brighter nuclei, thin filaments."""
    rng = np.random.Generator(np.random.PCG64(seed))
    y, x = np.mgrid[0:n, 0:n].astype(np.float64)
    img = 8 + 3 * np.sin(x / 50) * np.cos(y / 70)
    for _ in range(10):
        cx, cy, a, b, th, v = rng.uniform(20, n - 20), rng.uniform(20, n - 20), rng.uniform(10, 22), rng.uniform(8, 15), rng.uniform(0, np.pi), rng.uniform(60, 120)
        u = (np.cos(th) * (x - cx) + np.sin(th) * (y - cy)) / a
        w = (-np.sin(th) * (x - cx) + np.cos(th) * (y - cy)) / b
        r = np.sqrt(u * u + w * w)
        img += v / (1 + np.exp((r - 1) * 10)) + v / (1 + np.exp((r - 0.4) * 18))
    for _ in range(12):
        px, py, d = rng.uniform(0, n), rng.uniform(0, n), rng.uniform(0, 2 * np.pi)
        v = rng.uniform(30, 70)
        for _ in range(300):
            d += rng.normal(0, 0.08)
            px, py = px + np.cos(d), py + np.sin(d)
            if 0 <= px < n and 0 <= py < n:
                img += v * np.exp(-((x - px) ** 2 + (y - py) ** 2) / 2.0) * 0.25
    return _u8(img)


def star_field(n=256, seed=12):
    """Ours: black sky with a faint glow, stars as Gaussian spots of many brightnesses and widths."""
    rng = np.random.Generator(np.random.PCG64(seed))
    y, x = np.mgrid[0:n, 0:n].astype(np.float64)
    img = 4 + 10 * np.exp(-((x - 0.7 * n) ** 2 + (y - 0.3 * n) ** 2) / (2 * (0.25 * n) ** 2))
    for _ in range(120):
        cx, cy = rng.uniform(0, n), rng.uniform(0, n)
        v, s = 250 * rng.uniform(0.05, 1) ** 3, rng.uniform(0.7, 2.0)
        img += v * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * s * s))
    return _u8(img)


def shapes_on_black(n=256):
    """Ours: flat discs and a bar of several grey levels on a black background (noise clips at 0)."""
    y, x = np.mgrid[0:n, 0:n]
    img = np.zeros((n, n))
    for cx, cy, r, v in [(70, 70, 40, 120), (180, 80, 32, 200), (110, 180, 52, 70), (200, 200, 25, 160)]:
        img[(x - cx) ** 2 + (y - cy) ** 2 < r * r] = v
    img[20:30, 120:240] = 90
    return _u8(img)


def cell_stack(n=192, depth=10, seed=21):
    """Ours: a z-stack of a fluorescence volume, depth slices of n x n in [0, 1]: ellipsoidal cells
    with brighter nuclei and small granules, filaments winding through z, a dim uneven
    background, blurred more along z than across (an optical section is thicker than a pixel)."""
    rng = np.random.Generator(np.random.PCG64(seed))
    z, y, x = np.mgrid[0:depth, 0:n, 0:n].astype(np.float64)
    zs = 2.0  # pixels per slice step
    vol = 0.05 + 0.02 * np.sin(x / 40) * np.cos(y / 55)
    for _ in range(9):
        c = rng.uniform([2, 20, 20], [depth - 3, n - 20, n - 20])
        a, b, cz, th, v = rng.uniform(12, 24), rng.uniform(9, 16), rng.uniform(5, 9), rng.uniform(0, np.pi), rng.uniform(0.3, 0.5)
        u = (np.cos(th) * (x - c[2]) + np.sin(th) * (y - c[1])) / a
        w = (-np.sin(th) * (x - c[2]) + np.cos(th) * (y - c[1])) / b
        r = np.sqrt(u * u + w * w + ((z - c[0]) * zs / cz) ** 2)
        vol += v / (1 + np.exp((r - 1) * 8)) + 0.6 * v / (1 + np.exp((r - 0.45) * 14))
        for _ in range(6):
            g = c + rng.normal(0, 1, 3) * [cz / zs / 2, b / 2, a / 2]
            vol += rng.uniform(0.15, 0.3) * np.exp(-(((z - g[0]) * zs) ** 2 + (y - g[1]) ** 2 + (x - g[2]) ** 2) / (2 * 1.6 ** 2))
    for _ in range(8):
        p = rng.uniform([0, 0, 0], [depth, n, n])
        d = rng.normal(0, 1, 3) * [0.15, 1, 1]
        d /= np.linalg.norm(d)
        for _ in range(240):
            d = d + rng.normal(0, 0.06, 3) * [0.3, 1, 1]
            d /= np.linalg.norm(d)
            p = p + d * [1 / zs, 1, 1]
            if not (0 <= p[0] < depth and 0 <= p[1] < n and 0 <= p[2] < n):
                break
            lo = np.maximum(np.floor(p[1:] - 4).astype(int), 0)
            hi = np.minimum(np.floor(p[1:] + 5).astype(int), n)
            sl = (slice(None), slice(lo[0], hi[0]), slice(lo[1], hi[1]))
            vol[sl] += 0.12 * np.exp(-(((z[sl] - p[0]) * zs) ** 2 + (y[sl] - p[1]) ** 2 + (x[sl] - p[2]) ** 2) / 2.0)
    vol = gaussian_filter(vol, (0.8, 0.5, 0.5))
    return vol / vol.max()


def user_like_images():
    """The images that look like our users', 8-bit grey."""
    retina = color.rgb2gray(data.retina()) * 255.0
    blobs = data.binary_blobs(length=256, blob_size_fraction=0.15, volume_fraction=0.4, rng=5)
    return {
        "retina256": _u8(retina[560:816, 560:816]),
        "clock": data.clock(),
        "microaneurysms": data.microaneurysms(),
        "phantom256": _u8(255 * data.shepp_logan_phantom()[72:328, 72:328]),
        "blobs256": _u8(gaussian_filter(30 + 180 * blobs.astype(np.float64), 2.0)),
        "horse": _u8(gaussian_filter(220 - 190 * data.horse().astype(np.float64), 2.0)),
        "micrograph256": micrograph(),
        "stars256": star_field(),
        "shapes-on-black256": shapes_on_black(),
    }


def check_images():
    """Kept out of tuning: independent checks."""
    return {"moon256": _u8(data.moon()[128:384, 128:384].astype(np.float64))}


def grey_images():
    camera = data.camera()
    cam256 = camera.reshape(256, 2, 256, 2).mean(axis=(1, 3))
    astro = color.rgb2gray(data.astronaut()) * 255.0
    astro256 = astro.reshape(256, 2, 256, 2).mean(axis=(1, 3))
    coffee = (color.rgb2gray(data.coffee()) * 255.0)[60:316, 170:426]
    u8 = lambda a: np.clip(np.rint(a), 0, 255).astype(np.uint8)
    return {
        "camera512": u8(camera), "camera256": u8(cam256), "astronaut512": u8(astro),
        "astronaut256": u8(astro256), "brick512": u8(data.brick()), "coffee256": u8(coffee),
    }


def colour_images():
    return {"astronaut-rgb512": data.astronaut(), "coffee-rgb": data.coffee()[:, 100:500],
            "retina-rgb256": data.retina()[560:816, 560:816]}


def colour_images_more():
    """More colour images for the camera-JPEG part, added 2026-12-04 as independent checks and tuned
    on since 2026-12-05 (the luminance-to-colour noise limit was chosen on them with the rest):
    scikit-image's chelsea (fur), rocket (a 512-wide crop: sky, structure), immunohistochemistry
    (stained tissue, textured everywhere) and hubble_deep_field (a 512 x 512 crop: galaxies)."""
    return {"chelsea-rgb": data.chelsea(), "rocket-rgb": data.rocket()[:, 64:576],
            "immunohistochemistry-rgb": data.immunohistochemistry(),
            "hubble-rgb512": data.hubble_deep_field()[180:692, 244:756]}


def colour_checks():
    """Colour images kept out of tuning, for independent checks of the camera-JPEG part:
    scikit-image's stereo_motorcycle (left view, a 512-wide crop: a workshop scene)."""
    return {"motorcycle-rgb": data.stereo_motorcycle()[0][:, 100:612]}


def add_noise(clean, sigma):
    rng = np.random.Generator(np.random.PCG64(1234))
    noisy = clean.astype(np.float64) + sigma * rng.standard_normal(clean.shape)
    return np.clip(np.rint(noisy), 0, 255).astype(np.uint8)


def write_set(folder, sigmas=(10, 25, 50), colour=False, which="photos"):
    """Writes clean and noisy PNGs; returns [(name, sigma, clean_path, noisy_path)].
    which: "photos" (the four photographs), "users" (the user-like images), "checks", or "all"."""
    import os
    os.makedirs(folder, exist_ok=True)
    items = []
    if colour:
        images = colour_images()
    else:
        groups = {"photos": grey_images, "users": user_like_images, "checks": check_images}
        images = {}
        for g in (groups if which == "all" else [which]):
            images.update(groups[g]())
    for name, clean in images.items():
        cp = os.path.join(folder, f"{name}-clean.png")
        io.imsave(cp, clean, check_contrast=False)
        for s in sigmas:
            np_ = os.path.join(folder, f"{name}-s{s}.png")
            io.imsave(np_, add_noise(clean, s), check_contrast=False)
            items.append((name, s, cp, np_))
    return items
