"""The development set: scikit-image's bundled sample images with Gaussian noise, exactly as in the
shared peers table (fresh numpy Generator(PCG64(1234)) per image and sigma; clipped, rounded to uint8).
Images are loaded from inside the scikit-image wheel (no download)."""
import numpy as np
from skimage import data, color, io


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
    return {"astronaut-rgb512": data.astronaut(), "coffee-rgb": data.coffee()[:, 100:500]}


def add_noise(clean, sigma):
    rng = np.random.Generator(np.random.PCG64(1234))
    noisy = clean.astype(np.float64) + sigma * rng.standard_normal(clean.shape)
    return np.clip(np.rint(noisy), 0, 255).astype(np.uint8)


def write_set(folder, sigmas=(10, 25, 50), colour=False):
    """Writes clean and noisy PNGs; returns [(name, sigma, clean_path, noisy_path)]."""
    import os
    os.makedirs(folder, exist_ok=True)
    items = []
    images = colour_images() if colour else grey_images()
    for name, clean in images.items():
        cp = os.path.join(folder, f"{name}-clean.png")
        io.imsave(cp, clean, check_contrast=False)
        for s in sigmas:
            np_ = os.path.join(folder, f"{name}-s{s}.png")
            io.imsave(np_, add_noise(clean, s), check_contrast=False)
            items.append((name, s, cp, np_))
    return items
