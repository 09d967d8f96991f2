"""Figures embedded in the report (augplan.render.figures)."""

import base64
import io

import numpy as np
from PIL import Image

from augplan.render import embed_png


def test_embedded_pixels_are_the_files_pixels(tmp_path):
    rng = np.random.default_rng(3)
    pixels = rng.integers(0, 256, size=(5, 7, 3), dtype=np.uint8)
    path = tmp_path / "noise.png"
    Image.fromarray(pixels).save(path)
    uri = embed_png(path)
    # Pillow, an outside PNG decoder, reads back the pixels written.
    with Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1]))) as image:
        np.testing.assert_array_equal(np.asarray(image.convert("RGB")), pixels)
