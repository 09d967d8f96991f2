"""The rendering layer's figures: small multiples of factor histograms, compact encodings.

Decoded with Pillow, an outside PNG/JPEG decoder.
"""

import io

import numpy as np
import pytest
from PIL import Image

from augplan.render.plots import factor_grid, jpeg_bytes, palette_png


def _factors(n):
    edges = [0.0, 0.25, 0.5, 0.75, 1.0]
    block = {"histogram": {"edges": edges, "counts": [1, 4, 2, 0]}}
    return {f"factor-{i}": {"unit": "share", "original": block, "augmented": block, "field": {"summary": block}}
            for i in range(n)}


@pytest.mark.parametrize("n", [1, 4, 11], ids=["one", "one-row", "eleven"])
def test_factor_grid_is_one_palette_png(n):
    data = factor_grid(_factors(n), title="recipe x")
    with Image.open(io.BytesIO(data)) as image:
        assert image.format == "PNG" and image.mode == "P"
        rows = -(-n // 4)
        # Four panels a row at 2.6 x 1.75 inches and 90 dots an inch, plus the title and legend bands.
        assert image.size[0] == round(2.6 * 4 * 90)
        assert image.size[1] == round((1.75 * rows + 0.35 + 0.3) * 90)


@pytest.mark.parametrize("factors", [{}, None, {"a": {"original": {"histogram": {"edges": [0, 1], "counts": [0]}}}}],
                         ids=["empty", "none", "no-counts"])
def test_factor_grid_without_histograms_draws_nothing(factors):
    assert factor_grid(factors) is None


def test_a_factor_not_defined_for_the_images_keeps_a_panel_with_its_note():
    # Four measured factors fill one row; hue of grey images, with its note, opens a second.
    empty = {"histogram": {"edges": [0.0, 1.0], "counts": [0]}}
    factors = {**_factors(4), "hue": {"unit": "degrees", "original": empty, "augmented": empty,
                                      "note": "not defined for grey images"}}
    with Image.open(io.BytesIO(factor_grid(factors, title="recipe x"))) as image:
        # 4.15 inches at 90 dpi is 373.5 pixels: the canvas may round either way (one pixel).
        assert abs(image.size[1] - (1.75 * 2 + 0.35 + 0.3) * 90) <= 1
    assert factor_grid({"hue": factors["hue"]}) is None  # a note alone is no figure


def test_palette_png_keeps_flat_colours_exactly():
    rng = np.random.default_rng(0)
    colours = rng.integers(0, 256, size=(12, 3), dtype=np.uint8)
    pixels = colours[rng.integers(0, 12, size=(20, 30))]
    with Image.open(io.BytesIO(palette_png(Image.fromarray(pixels)))) as image:
        assert image.mode == "P"
        np.testing.assert_array_equal(np.asarray(image.convert("RGB")), pixels)


def test_jpeg_bytes_decode_to_the_same_size():
    pixels = np.random.default_rng(1).integers(0, 256, size=(24, 40, 3), dtype=np.uint8)
    data = jpeg_bytes(Image.fromarray(pixels))
    assert data[:3] == b"\xff\xd8\xff"  # JPEG start-of-image marker, ITU-T T.81 annex B
    with Image.open(io.BytesIO(data)) as image:
        assert image.format == "JPEG" and image.size == (40, 24)


@pytest.mark.parametrize("encode", [palette_png, jpeg_bytes], ids=["png", "jpeg"])
def test_only_images_are_encoded(encode):
    with pytest.raises(TypeError, match="PIL image"):
        encode(np.zeros((2, 2, 3), np.uint8))


def test_coverage_plots_are_one_grid_file(tmp_path):
    from augplan.coverage.coverage import analyse_coverage
    from augplan.data import open_dataset
    from augplan.demo import make_demo_dataset
    from augplan.recipe.parse import parse_recipe
    from augplan.render.plots import with_factor_plots

    make_demo_dataset(tmp_path / "data", n_train=3, n_val=2, n_field=2)
    recipe = parse_recipe("name: r\ntransforms:\n  - op: brightness\n    factor: [0.5, 2]\n")
    result = with_factor_plots(analyse_coverage(open_dataset(tmp_path / "data"), recipe, size=32,
                                                        rng=np.random.default_rng(0)), tmp_path / "plots")
    assert result["plots"] == [str(tmp_path / "plots" / "factors.png")]
    assert [p.name for p in (tmp_path / "plots").iterdir()] == ["factors.png"]
    with Image.open(result["plots"][0]) as image:
        assert image.format == "PNG" and image.mode == "P"
