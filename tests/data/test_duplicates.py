"""Tests for augplan.data.duplicates: exact and near copies across splits."""

from pathlib import Path

import numpy as np
import pytest
from PIL import Image, ImageEnhance
from skimage import data as skdata

import augplan.data.duplicates as duplicates_module
from augplan.data import (
    find_duplicates,
    hamming_matrix,
    local_difference,
    open_dataset,
    perceptual_hash,
    read_image,
)
from augplan.thresholds import NEAR_DUPLICATE_BITS, NEAR_DUPLICATE_LOCAL_DIFFERENCE
from conftest import write_digits_dataset
from image_files import make_layout as _make_layout, save_image as _save, solid as _solid


# --------------------------------------------------------------------------
# Fingerprint and duplicates


def test_exact_duplicate_between_train_and_val(tmp_path):
    _make_layout(tmp_path)
    source = tmp_path / "train" / "ok" / "img1.png"
    (tmp_path / "val" / "ok" / "copy.png").write_bytes(source.read_bytes())
    duplicates = find_duplicates(open_dataset(tmp_path))
    assert duplicates == [{"kind": "exact", "a": "train/ok/img1.png", "b": "val/ok/copy.png",
                           "splits": ["train", "val"], "distance": 0}]


def _rgb(grey):
    return np.repeat(grey[..., None], 3, axis=2)


def test_near_duplicate_of_camera_found_not_coins(tmp_path):
    # Outside data: scikit-image's sample images camera() and coins().
    camera = np.asarray(Image.fromarray(skdata.camera()).resize((128, 128), Image.Resampling.BOX))
    coins = np.asarray(Image.fromarray(skdata.coins()).resize((128, 128), Image.Resampling.BOX))
    rng = np.random.default_rng(11)
    noised = np.clip(camera + rng.normal(0, 6, camera.shape), 0, 255).astype(np.uint8)
    _save(tmp_path / "train" / "a" / "camera.png", _rgb(camera))
    _save(tmp_path / "train" / "b" / "coins.png", _rgb(coins))
    _save(tmp_path / "val" / "a" / "camera_copy.jpg", _rgb(noised), "JPEG", quality=70)
    _save(tmp_path / "val" / "b" / "other.png", _rgb(skdata.moon()[::4, ::4]))
    duplicates = find_duplicates(open_dataset(tmp_path))
    assert [(d["kind"], d["a"], d["b"]) for d in duplicates] == [
        ("near", "train/a/camera.png", "val/a/camera_copy.jpg")]
    assert 0 <= duplicates[0]["distance"] <= NEAR_DUPLICATE_BITS
    distance_to_coins = hamming_matrix([perceptual_hash(_rgb(camera))], [perceptual_hash(_rgb(coins))])
    assert distance_to_coins[0, 0] > 3 * NEAR_DUPLICATE_BITS


@pytest.mark.parametrize("size, resample, ink", [
    (8, Image.Resampling.NEAREST, "dark"),
    (16, Image.Resampling.BILINEAR, "light"),
    (32, Image.Resampling.BICUBIC, "dark"),
    (64, Image.Resampling.NEAREST, "dark"),
], ids=["8px-dark", "16px-bilinear-light", "32px-bicubic-dark", "64px-nearest-dark"])
def test_distinct_handwritten_digits_are_not_near_duplicates(tmp_path, monkeypatch, size, resample, ink):
    # Outside data: scikit-learn's digits (UCI optdigits), every image, about
    # three quarters of each class in train/ and the rest in val/.
    from sklearn.datasets import load_digits

    root = write_digits_dataset(tmp_path / "DATA", {"train": 135, "val": None}, size=size,
                                resample=resample, ink=ink)
    dataset = open_dataset(root)
    # Perceptual hash and SSIM alone (the local test switched off) call some
    # of these pairs near copies; no two of the 8 x 8 sources are equal, so
    # every such pair is two distinct handwritten digits.
    with monkeypatch.context() as patch:
        patch.setattr(duplicates_module, "NEAR_DUPLICATE_LOCAL_DIFFERENCE", np.inf)
        ssim_only = [d for d in find_duplicates(dataset) if d["kind"] == "near"]
    assert ssim_only, "the data no longer show the look-alikes this test guards against"
    sources = load_digits().images
    for pair in ssim_only:
        first, second = (int(Path(pair[key]).stem) for key in ("a", "b"))
        assert not np.array_equal(sources[first], sources[second])
    assert [d for d in find_duplicates(dataset) if d["kind"] == "near"] == []


def _grey_view(path):
    # The 64 x 64 grey codes a candidate is confirmed on, made here with Pillow alone.
    return np.asarray(Image.open(path).convert("RGB").resize((64, 64), Image.Resampling.BILINEAR).convert("L"))


def test_near_copies_of_outside_images_are_still_reported(tmp_path):
    # Outside data: scikit-image's camera() and coins(), and one handwritten
    # digit per class of scikit-learn's digits (UCI optdigits, 64 px bicubic).
    # The copies are made by Pillow: JPEG quality 90, resized by -3 % and
    # +3 % (bicubic), and brightened by 5 % (ImageEnhance.Brightness 1.05).
    root = write_digits_dataset(tmp_path / "DATA", {"train": 1}, size=64, resample=Image.Resampling.BICUBIC)
    for name in ("camera", "coins"):
        picture = Image.fromarray(getattr(skdata, name)()).convert("RGB")
        picture = picture.resize((128, round(128 * picture.height / picture.width)), Image.Resampling.BOX)
        _save(root / "train" / name / f"{name}.png", picture)
    copies = {}
    for original in sorted((root / "train").rglob("*.png")):
        image = Image.open(original).convert("RGB")
        width, height = image.size
        folder = root / "val" / original.parent.name
        made = {
            "q90.jpg": (image, "JPEG", {"quality": 90}),
            "smaller.png": (image.resize((round(width * 0.97), round(height * 0.97)), Image.Resampling.BICUBIC),
                            "PNG", {}),
            "larger.png": (image.resize((round(width * 1.03), round(height * 1.03)), Image.Resampling.BICUBIC),
                           "PNG", {}),
            "brighter.png": (ImageEnhance.Brightness(image).enhance(1.05), "PNG", {}),
        }
        for suffix, (picture, fmt, options) in made.items():
            copy = _save(folder / f"{original.stem}-{suffix}", picture, fmt, **options)
            copies[(original.relative_to(root).as_posix(), copy.relative_to(root).as_posix())] = (original, copy)

    found = {(d["a"], d["b"]) for d in find_duplicates(open_dataset(root)) if d["kind"] == "near"}
    assert found <= set(copies)  # nothing but true copies
    pictures = {pair for pair in copies if pair[0].split("/")[1] in ("camera", "coins")}
    assert pictures <= found and len(pictures) == 8
    # Every copy that the perceptual hash proposes is confirmed, so the
    # stricter confirmation loses none; copies the hash misses are a limit of
    # the hash, not of the confirmation, which passes them all as well.
    proposed = {pair for pair, (original, copy) in copies.items()
                if hamming_matrix([perceptual_hash(read_image(original))],
                                  [perceptual_hash(read_image(copy))])[0, 0] <= NEAR_DUPLICATE_BITS}
    assert len(proposed) >= 30 and found == proposed
    for original, copy in copies.values():
        assert local_difference(_grey_view(original), _grey_view(copy)) <= NEAR_DUPLICATE_LOCAL_DIFFERENCE


def test_local_difference_ignores_brightness_and_sees_a_redrawn_patch():
    # A thin dark stroke on white paper, drawn here.
    page = np.full((64, 64), 240, dtype=np.uint8)
    page[8:56, 30:33] = 20
    assert local_difference(page, page) == 0
    # Gain and offset with saturation: white clips at 255, the stroke stays
    # measurable. Rounding to whole codes leaves at most half a code per pixel.
    brighter = np.clip(np.round(page.astype(float) * 1.1 + 3), 0, 255).astype(np.uint8)
    assert local_difference(page, brighter) <= 0.5 / (240 - 20)
    # A second stroke as wide as the window, drawn in one copy only.
    redrawn = page.copy()
    redrawn[20:29, 10:19] = 20
    difference = local_difference(page, redrawn)
    assert difference > 3 * NEAR_DUPLICATE_LOCAL_DIFFERENCE and difference <= 1
    assert local_difference(redrawn, page) == difference


def test_hamming_matrix_matches_bit_counting():
    rng = np.random.default_rng(2)
    a = rng.integers(0, 2**63, 7, dtype=np.uint64) * np.uint64(2) + rng.integers(0, 2, 7, dtype=np.uint64)
    b = rng.integers(0, 2**63, 5, dtype=np.uint64)
    # Independent count: Python's integer bit strings.
    expected = [[bin(int(x) ^ int(y)).count("1") for y in b] for x in a]
    np.testing.assert_array_equal(hamming_matrix(a, b), expected)


def test_perceptual_hash_ignores_scale_and_mild_brightness():
    astronaut = skdata.astronaut()  # outside data: scikit-image sample image
    base = perceptual_hash(astronaut)
    half = perceptual_hash(np.asarray(Image.fromarray(astronaut).resize((256, 256))))
    brighter = perceptual_hash(np.clip(astronaut.astype(int) + 10, 0, 255).astype(np.uint8))
    flipped = perceptual_hash(astronaut[:, ::-1].copy())
    distances = hamming_matrix([base], [half, brighter, flipped])[0]
    assert distances[0] <= NEAR_DUPLICATE_BITS and distances[1] <= NEAR_DUPLICATE_BITS
    assert distances[2] > NEAR_DUPLICATE_BITS  # a mirror image is a different picture


def test_flat_images_are_not_near_duplicates(tmp_path):
    # Different blank frames share a meaningless hash; only exact copies count.
    _save(tmp_path / "train" / "a" / "grey.png", _solid((120, 120, 120), (32, 32)))
    _save(tmp_path / "train" / "b" / "dark.png", _solid((20, 20, 20), (32, 32)))
    _save(tmp_path / "val" / "a" / "light.png", _solid((200, 200, 200), (32, 32)))
    _save(tmp_path / "val" / "b" / "black.png", _solid((0, 0, 0), (32, 32)))
    assert find_duplicates(open_dataset(tmp_path)) == []
