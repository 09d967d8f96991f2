"""Small image files for the tests of augplan.data: solid colours and folder layouts."""

from pathlib import Path

import numpy as np
from PIL import Image


def save_image(path, image, fmt="PNG", **options):
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(image, np.ndarray):
        image = Image.fromarray(image)
    image.save(path, fmt, **options)
    return path


def solid(colour, size=(6, 6)):
    return np.full(size + (3,), colour, dtype=np.uint8)


def make_layout(root, classes=("ok", "bad"), per_class=3, splits=("train", "val")):
    """Tiny PNGs of distinct solid colours, one folder per split and class."""
    value = 0
    for split in splits:
        for label in classes:
            for i in range(per_class):
                value += 7
                save_image(root / split / label / f"img{i}.png", solid((value % 256, i * 30, 50)))
    return root
