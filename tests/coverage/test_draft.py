"""Draft recipes: ranges that reach the field's lighting; defaults without a field; drafts from a starting recipe."""

import numpy as np
import pytest

from augplan.coverage.draft import DEFAULTS, draft_ranges
from augplan.measure.factors import brightness
from augplan.augment.transforms import OPS
from augplan.data import open_dataset


def _tiles(level, n, rng):
    """Grey tiles with a darker square; ``level`` is the sRGB code of the background."""
    images = np.full((n, 32, 32, 3), level, dtype=np.uint8)
    images[:, 10:22, 10:22] = level // 2
    noise = rng.integers(-3, 4, size=images.shape)
    return np.clip(images.astype(int) + noise, 0, 255).astype(np.uint8)


def test_without_field_the_defaults_are_proposed():
    rng = np.random.default_rng(0)
    assert draft_ranges(_tiles(180, 10, rng)) == DEFAULTS


def test_darker_field_gets_a_brightness_range_that_reaches_it():
    rng = np.random.default_rng(1)
    train, field = _tiles(180, 20, rng), _tiles(110, 20, rng)
    low, high = draft_ranges(train, field)["brightness"]
    assert low < DEFAULTS["brightness"][0] and high >= 1.0
    # Applying the proposed darkest exposure to a training image must reach the
    # field's darker lighting, measured by the same BT.709 luminance factor.
    darkened = OPS["brightness"].function(train[0], {"factor": low}, np.random.default_rng(0))
    assert brightness(darkened[None])[0] <= np.percentile(brightness(field), 5) * 1.05


def test_blurrier_field_proposes_blur():
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(2)
    train = _tiles(160, 10, rng)
    field = np.stack([gaussian_filter(img, sigma=(2, 2, 0)) for img in train])
    assert draft_ranges(train, field)["blur"] == (0.0, 1.0)


@pytest.mark.parametrize("op", ["rotate", "zoom", "shift", "brightness", "contrast"])
def test_every_range_contains_the_unchanged_image(op):
    rng = np.random.default_rng(3)
    ranges = draft_ranges(_tiles(150, 10, rng), _tiles(90, 10, rng))
    identity = OPS[op].identity
    assert ranges[op][0] <= identity <= ranges[op][1]


def _camera_crops():
    # scikit-image's "camera" sample, four 64x64 crops as RGB.
    from skimage import data

    camera = data.camera()
    crops = [camera[r:r + 64, c:c + 64] for r, c in ((100, 100), (200, 250), (300, 150), (150, 300))]
    return np.stack([np.repeat(crop[..., None], 3, axis=2) for crop in crops])


def test_a_field_that_differs_only_in_exposure_gets_no_blur():
    train = _camera_crops()
    # Exposure alone: linear light times 0.25 (two stops darker), no blur.
    field = np.stack([OPS["brightness"].function(image, {"factor": 0.25}, np.random.default_rng(0))
                      for image in train])
    assert "blur" not in draft_ranges(train, field)


def test_normalised_sharpness_ignores_exposure_and_falls_with_blur():
    from scipy.ndimage import gaussian_filter, laplace

    from augplan.imaging.colour import relative_luminance
    from augplan.measure.factors import normalised_sharpness

    train = _camera_crops()
    # Reference: scipy's Laplacian of the luminance scaled to unit mean.
    lum = relative_luminance(train).astype(np.float64)
    expected = [np.var(laplace(y / y.mean(), mode="reflect")) for y in lum]
    # float32 luminance into a float32 Laplacian: about 1e-6 relative error.
    assert normalised_sharpness(train) == pytest.approx(expected, rel=1e-4)
    darker = np.stack([OPS["brightness"].function(i, {"factor": 0.5}, None) for i in train])
    # 8-bit rounding of the darker image adds a little Laplacian variance.
    assert normalised_sharpness(darker) == pytest.approx(normalised_sharpness(train), rel=0.1)
    blurred = np.stack([gaussian_filter(i, sigma=(1.5, 1.5, 0)) for i in train])
    assert np.all(normalised_sharpness(blurred) < 0.5 * normalised_sharpness(train))


def test_draft_takes_workers_and_drafts_the_same_recipe(tmp_path, run_cli):
    # scikit-learn's digits with a labelled field split.
    from conftest import write_digits_dataset

    data = write_digits_dataset(tmp_path / "DATA", {"train": 3, "val": 1, "field": 2}, size=16)
    drafts = []
    for workers in ("1", "2"):
        out = tmp_path / f"draft-{workers}.yaml"
        result = run_cli("draft", data, "-o", out, "--workers", workers, "--quiet")
        assert result.code == 0, result.err
        drafts.append(out.read_text(encoding="utf-8"))
    assert drafts[0] == drafts[1] and "the field sample (20 images)" in drafts[0]


# --------------------------------------------------------------------------
# drafts that begin from a starting recipe (--start) and the shipped list


def test_list_names_every_shipped_recipe_with_its_purpose(run_cli):
    import re

    from augplan.recipe.shipped import shipped_recipes

    result = run_cli("draft", "--list")
    assert result.code == 0, result.err
    names = [r.name for r in shipped_recipes()]
    assert len(names) >= 8
    for recipe in shipped_recipes():
        assert re.search(rf"^\s*{recipe.name}\s+{re.escape(recipe.purpose)}$", result.out, flags=re.MULTILINE)


def test_lighting_is_widened_to_the_field_and_a_missing_step_added():
    from augplan.recipe.parse import parse_recipe
    from augplan.vet.start import widen_lighting

    start = parse_recipe("name: s\ntransforms:\n  - op: brightness\n    factor: [0.9, 1.1]\n"
                         "  - op: rotate\n    degrees: [-5, 5]\n")
    widened, changes = widen_lighting(start, {"brightness": (0.5, 1.05), "contrast": (0.8, 1.3)})
    assert widened.transforms[0].params["factor"] == (0.5, 1.1)  # the union: never narrower than the start
    assert widened.transforms[1] == start.transforms[1]
    assert (widened.transforms[2].op, widened.transforms[2].params["factor"]) == ("contrast", (0.8, 1.3))
    assert [(c["index"], c["action"]) for c in changes] == [(0, "widen"), (None, "add")]
    assert widen_lighting(start, {}) == (start, [])  # no field: nothing changes


def test_start_draft_applies_the_checks_scope_and_safe_limit(tiny_dataset, monkeypatch):
    # The rules are vet's (vet_transforms); here the check's document is
    # given, so that the adapter's bookkeeping is tested on its own.
    from augplan.recipe.parse import parse_recipe
    from augplan.vet import start as start_module

    start = parse_recipe("name: s\ntransforms:\n  - op: flip\n    axis: horizontal\n"
                         "  - op: rotate\n    degrees: [-20, 20]\n  - op: blur\n    sigma: [0, 2]\n"
                         "  - op: noise\n    sigma: [0, 0.05]\n")
    verdicts = [{"index": 0, "verdict": "breaks", "suggestion": {"only": ["beta"]}, "safe_limit": None},
                {"index": 1, "verdict": "safe", "safe_limit": [-10.0, 10.0]},
                {"index": 2, "verdict": "unverified", "safe_limit": None},
                {"index": 3, "verdict": "breaks", "safe_limit": None}]
    monkeypatch.setattr(start_module, "check_recipe", lambda *args, **kwargs: {"transforms": verdicts})
    drafted = start_module.draft_from_start(open_dataset(tiny_dataset), start, np.random.default_rng(0))
    steps = drafted.recipe.transforms
    assert [s.op for s in steps] == ["flip", "rotate", "blur"]  # the noise that breaks is removed
    assert steps[0].only == ("beta",) and steps[1].params["degrees"] == (-10.0, 10.0)
    assert steps[2] == start.transforms[2]  # unverified: kept for vet and a person
    assert [c["action"] for c in drafted.changes] == ["scope", "clip", "keep", "remove"]
    assert drafted.recipe.name == "s-draft"
    for number, change in enumerate(drafted.changes, start=1):
        assert f"#   transform {number} ({change['op']}) [{change['verdict']}]: {change['detail']}" in drafted.text


def _darkened(image, exposure):
    # IEC 61966-2-1 (sRGB) decoding and encoding, written out here: the
    # same picture under ``exposure`` times the light.
    value = image / 255.0
    linear = np.where(value <= 0.04045, value / 12.92, ((value + 0.055) / 1.055) ** 2.4) * exposure
    encoded = np.where(linear <= 0.0031308, 12.92 * linear, 1.055 * linear ** (1 / 2.4) - 0.055)
    return np.round(encoded * 255).astype(np.uint8)


def test_start_draft_reaches_a_darker_field_and_says_what_changed(tiny_dataset, run_cli):
    from PIL import Image

    from augplan.recipe.parse import read_recipe

    for path in sorted((tiny_dataset / "train").rglob("*.png")):
        target = tiny_dataset / "field" / path.relative_to(tiny_dataset / "train")
        target.parent.mkdir(parents=True, exist_ok=True)
        Image.fromarray(_darkened(np.asarray(Image.open(path).convert("RGB")), 0.5)).save(target)
    before = {p: p.read_bytes() for p in tiny_dataset.rglob("*") if p.is_file()}
    out = tiny_dataset.parent / "draft.yaml"
    result = run_cli("draft", tiny_dataset, "--start", "handwritten-characters", "-o", out, "--quiet")
    assert result.code == 0, result.err
    drafted = read_recipe(out)
    text = out.read_text(encoding="utf-8")
    assert drafted.name == "handwritten-characters-draft"
    assert "starting recipe 'handwritten-characters'" in text and "field sample (10 images)" in text
    for number, op in enumerate(("rotate", "shift", "zoom"), start=1):
        assert f"#   transform {number} ({op})" in text and f"transform {number} ({op})" in result.out
    # The start has no brightness step: one is added that reaches the field,
    # whose every image has half the training image's light, so the lower end
    # is at most 0.5 (0.51 allows the 8-bit rounding of the darkened files
    # and the 2-decimal rounding of the range).
    added = [line for line in text.splitlines() if line.startswith("#   new (brightness)")]
    assert len(added) == 1 and "added to reach the field's lighting" in added[0]
    low = float(added[0].split("lighting: ")[1].split(" to ")[0])
    assert low <= 0.51
    # The data folder is left as it was.
    assert {p: p.read_bytes() for p in tiny_dataset.rglob("*") if p.is_file()} == before
