"""The invented demo scenario: a glazed-tile sorting station.

An invented pottery workshop sorts small glazed tiles on a conveyor. A
camera above the belt photographs one tile per image (64 x 64 RGB). Five
classes, each folder named after its class:

``chevron-left``, ``chevron-right``
    A dark chevron mark pointing left or right. The two are mirror images of
    each other, so a horizontal flip swaps them; the mark is symmetric about
    the horizontal axis, so a vertical flip keeps them.
``glaze-amber``, ``glaze-teal``
    The same round glaze spot, told apart only by its hue.
``hairline-crack``
    A tile crossed by thin dark crack lines.

Every image varies the tile's base colour, the mark's position and size, a
small rotation, mild sensor noise and mild blur. The scenario carries a
lighting shortcut on purpose: in ``train/`` and ``val/`` every cracked tile
was photographed under dim light (exposure 0.35-0.5 in linear light) and
every other tile under normal light (0.9-1.1), so brightness alone predicts
the crack class on both splits. ``field/<class>/`` is what the deployed
camera will see: every class under a wide lighting range (0.3-1.2) and a
wider pose (rotation up to 25 degrees either way), so dim intact tiles and
bright cracked tiles appear there.

Everything is drawn by this module (numpy and Pillow's ImageDraw); no
photograph, person, brand or logo is involved. All randomness comes from
one seeded ``numpy.random.Generator``, spawned per image, and PNGs are
written with fixed options and no metadata, so ``python -m augplan.demo``
regenerates ``demo_images/`` byte for byte on the same platform and library
versions.
"""

from __future__ import annotations

import colorsys
import contextlib
import importlib.resources
import io
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw
from scipy.ndimage import gaussian_filter

from augplan.atomic import write_bytes_atomic
from augplan.imaging.colour import linear_to_srgb, srgb_to_linear, unit_to_uint8
from augplan.seeding import require_generator

__all__ = [
    "CLASSES",
    "DEMO_SEED",
    "DEFAULT_DEMO_DIR",
    "DEMO_RECIPE_DIR",
    "DEMO_RECIPES",
    "SPLIT_CONDITIONS",
    "CaptureConditions",
    "render_tile",
    "make_demo_dataset",
    "read_demo_recipes",
    "main",
]

CLASSES = ("chevron-left", "chevron-right", "glaze-amber", "glaze-teal", "hairline-crack")
DEMO_SEED = 20240611
DEFAULT_DEMO_DIR = Path(__file__).resolve().parent.parent / "demo_images"
IMAGE_SIZE = 64
# Drawn at four times the final size, then box-averaged down: thin crack
# lines and chevron edges come out anti-aliased, as a real lens would give.
_SUPERSAMPLE = 4
# Fixed PNG options; Pillow adds no time stamp unless given ``pnginfo``.
_PNG_OPTIONS = {"format": "PNG", "compress_level": 9, "optimize": False}


@dataclass(frozen=True)
class CaptureConditions:
    """How the camera saw the tiles of one split (and, optionally, one class).

    Parameters
    ----------
    exposure : tuple of float
        ``(low, high)`` multiplier of linear-light intensity.
    rotation : float
        Largest tile rotation in degrees, either way.
    stratified : bool
        Spread the exposures of a class evenly over the range (one draw per
        equal-width stratum) instead of independent uniform draws, so even a
        small sample of a class spans the whole lighting range.
    """

    exposure: tuple[float, float]
    rotation: float
    stratified: bool = False


_NORMAL_LIGHT = CaptureConditions(exposure=(0.9, 1.1), rotation=10.0)
_DIM_LIGHT = CaptureConditions(exposure=(0.35, 0.5), rotation=10.0)
_FIELD = CaptureConditions(exposure=(0.3, 1.2), rotation=25.0, stratified=True)

# split -> class -> conditions. The shortcut: on train and val the crack
# class alone is photographed under dim light.
SPLIT_CONDITIONS = {
    split: {name: (_DIM_LIGHT if name == "hairline-crack" else _NORMAL_LIGHT) for name in CLASSES}
    for split in ("train", "val")
}
SPLIT_CONDITIONS["field"] = {name: _FIELD for name in CLASSES}


def _hsv_colour(h, s, v):
    r, g, b = colorsys.hsv_to_rgb(h % 1.0, s, v)
    return (round(r * 255), round(g * 255), round(b * 255))


def _chevron_points(cx, cy, half_width, half_height, direction):
    """Apex and arm ends of a chevron; ``direction`` -1 points left, +1 right."""
    apex = (cx + direction * half_width, cy)
    top = (cx - direction * half_width, cy - half_height)
    bottom = (cx - direction * half_width, cy + half_height)
    return [top, apex, bottom]


def _draw_mark(draw, label, rng, centre, tile_half, base):
    s = _SUPERSAMPLE
    cx, cy = centre
    # Position and size of the mark vary slightly from tile to tile.
    dx, dy = rng.uniform(-3.0, 3.0, size=2) * s
    scale = rng.uniform(0.85, 1.15)
    if label in ("chevron-left", "chevron-right"):
        direction = -1 if label == "chevron-left" else 1
        shade = rng.uniform(0.18, 0.28)
        ink = tuple(int(round(c * shade)) for c in base)
        points = _chevron_points(cx + dx, cy + dy, 9 * s * scale, 14 * s * scale, direction)
        draw.line(points, fill=ink, width=int(round(5 * s * scale)), joint="curve")
    elif label in ("glaze-amber", "glaze-teal"):
        # Same saturation, value and size for both; only the hue differs.
        hue = (0.095 if label == "glaze-amber" else 0.49) + rng.uniform(-0.015, 0.015)
        colour = _hsv_colour(hue, rng.uniform(0.68, 0.8), rng.uniform(0.72, 0.82))
        radius = 12 * s * scale
        box = (cx + dx - radius, cy + dy - radius, cx + dx + radius, cy + dy + radius)
        draw.ellipse(box, fill=colour)
    elif label == "hairline-crack":
        shade = rng.uniform(0.3, 0.42)
        ink = tuple(int(round(c * shade)) for c in base)
        for _ in range(int(rng.integers(2, 4))):
            # A crack starts near an edge of the tile and wanders inwards.
            angle = rng.uniform(0.0, 2.0 * np.pi)
            x = cx + np.cos(angle) * tile_half * 0.9
            y = cy + np.sin(angle) * tile_half * 0.9
            heading = angle + np.pi + rng.uniform(-0.5, 0.5)
            points = [(x, y)]
            for _ in range(int(rng.integers(5, 9))):
                heading += rng.uniform(-0.7, 0.7)
                step = rng.uniform(3.0, 6.0) * s
                x += np.cos(heading) * step
                y += np.sin(heading) * step
                points.append((x, y))
            draw.line(points, fill=ink, width=int(rng.integers(4, 6)), joint="curve")
    else:
        raise ValueError(f"label must be one of {', '.join(CLASSES)}; got {label!r}")


def render_tile(label, rng, *, exposure, rotation, size=IMAGE_SIZE):
    """Draw one photographed tile of class ``label``.

    Parameters
    ----------
    label : str
        One of `CLASSES`.
    rng : numpy.random.Generator
        Source of every random choice for this image.
    exposure : float
        Multiplier of linear-light intensity (1 is normal light).
    rotation : float
        Tile rotation in degrees, counterclockwise.
    size : int, optional
        Output width and height in pixels.

    Returns
    -------
    numpy.ndarray
        ``(size, size, 3)`` uint8 RGB image, sRGB encoded.

    Notes
    -----
    Exposure is applied to linear light: the sRGB codes are decoded with the
    IEC 61966-2-1 transfer function, multiplied, clipped and re-encoded [1]_.

    References
    ----------
    .. [1] IEC 61966-2-1:1999, Default RGB colour space -- sRGB.
    """
    if label not in CLASSES:
        raise ValueError(f"label must be one of {', '.join(CLASSES)}; got {label!r}")
    big = size * _SUPERSAMPLE
    # Tiles land on the belt a few pixels off centre and the camera's
    # distance drifts a little, so position and scale vary from photo to photo.
    centre = (big / 2 + rng.uniform(-4.0, 4.0) * _SUPERSAMPLE,
              big / 2 + rng.uniform(-4.0, 4.0) * _SUPERSAMPLE)

    belt_grey = rng.uniform(78, 96)
    belt = Image.new("RGB", (big, big), tuple(int(round(belt_grey + d)) for d in (0, 1, 3)))

    # An off-white glaze whose tint varies slightly from tile to tile.
    base = tuple(int(round(c + rng.uniform(-8, 8))) for c in (226, 216, 196))
    tile_half = 0.39 * big * rng.uniform(0.92, 1.08)
    layer = Image.new("RGBA", (big, big), (0, 0, 0, 0))
    draw = ImageDraw.Draw(layer)
    draw.rectangle((centre[0] - tile_half, centre[1] - tile_half,
                    centre[0] + tile_half, centre[1] + tile_half), fill=base + (255,))
    _draw_mark(draw, label, rng, centre, tile_half, base)
    layer = layer.rotate(float(rotation), resample=Image.BICUBIC, center=centre)
    belt.paste(layer, (0, 0), layer)
    small = belt.resize((size, size), resample=Image.BOX)

    encoded = np.asarray(small, dtype=np.float64) / 255.0
    blur = rng.uniform(0.0, 0.6)
    if blur > 0.05:
        encoded = gaussian_filter(encoded, sigma=(blur, blur, 0), mode="nearest")
    linear = srgb_to_linear(encoded) * float(exposure)
    encoded = linear_to_srgb(np.clip(linear, 0.0, 1.0)).astype(np.float64)
    # Sensor noise lands after exposure, on the recorded codes.
    encoded = encoded + rng.normal(0.0, rng.uniform(0.003, 0.007), size=encoded.shape)
    return unit_to_uint8(encoded)


def _png_bytes(image):
    buffer = io.BytesIO()
    Image.fromarray(image, mode="RGB").save(buffer, **_PNG_OPTIONS)
    return buffer.getvalue()


def _draws(conditions, rng, index, count):
    low, high = conditions.exposure
    u = rng.uniform()
    if conditions.stratified:
        exposure = low + (high - low) * (index + u) / count
    else:
        exposure = low + (high - low) * u
    rotation = rng.uniform(-conditions.rotation, conditions.rotation)
    return exposure, rotation


def make_demo_dataset(root, *, rng=None, n_train=36, n_val=15, n_field=18):
    """Write the demo data set under ``root``.

    Parameters
    ----------
    root : str or Path
        Destination folder; ``train/``, ``val/`` and ``field/`` with one
        folder per class are created inside it. PNGs in those class folders
        that this call did not write are removed, so a smaller run leaves no
        stale images behind.
    rng : numpy.random.Generator, optional
        The one generator everything is drawn from; default the demo's own
        scenario, ``numpy.random.default_rng(DEMO_SEED)`` (the images of
        ``demo_images/``).
    n_train, n_val, n_field : int, optional
        Images per class in each split.

    Returns
    -------
    list of Path
        The files written, in a fixed order.

    Notes
    -----
    The generator is spawned per split, then per class, then per image, so
    image ``i`` of a class is the same whatever the counts of other splits
    or later images.
    """
    counts = {"train": n_train, "val": n_val, "field": n_field}
    for split, count in counts.items():
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
            raise ValueError(f"n_{split} must be a positive integer; got {count!r}")
    root = Path(root)
    # The shipped scenario is one fixed draw: the demo's images are data, not an analysis.
    rng = np.random.default_rng(DEMO_SEED) if rng is None else require_generator(rng)
    written = []
    for (split, count), split_rng in zip(counts.items(), rng.spawn(len(counts))):
        for label, class_rng in zip(CLASSES, split_rng.spawn(len(CLASSES))):
            conditions = SPLIT_CONDITIONS[split][label]
            folder = root / split / label
            folder.mkdir(parents=True, exist_ok=True)
            kept = set()
            for index, image_rng in enumerate(class_rng.spawn(count)):
                exposure, rotation = _draws(conditions, image_rng, index, count)
                image = render_tile(label, image_rng, exposure=exposure, rotation=rotation)
                path = folder / f"{label}-{index:03d}.png"
                write_bytes_atomic(path, _png_bytes(image))
                kept.add(path.name)
                written.append(path)
            for stale in sorted(folder.glob("*.png")):
                if stale.name not in kept:
                    stale.unlink()
    return written


# The demo recipes ship inside the package (package data, see pyproject.toml),
# so an installed augplan runs the demo without a checkout.
DEMO_RECIPE_DIR = importlib.resources.files("augplan") / "demo_recipes"
DEMO_RECIPES = ("naive-draft.yaml", "cautious.yaml", "light-and-pose.yaml")


def read_demo_recipes():
    """The demo recipes (`DEMO_RECIPES`), read from the package through `importlib.resources`.

    Raises
    ------
    BadInputError
        A recipe is missing from this installation (names it).
    """
    from augplan.errors import BadInputError
    from augplan.recipe.parse import read_recipe

    recipes = []
    for name in DEMO_RECIPES:
        resource = DEMO_RECIPE_DIR / name
        if not resource.is_file():
            raise BadInputError(f"the demo recipe {name} is missing from this installation of augplan "
                                f"({DEMO_RECIPE_DIR}): reinstall the package")
        with importlib.resources.as_file(resource) as path:
            recipes.append(read_recipe(path))
    return recipes


def run_demo(out_dir, rng, *, seed=None, workers=1, quiet=True, repeats=5, model=None):
    """Vet the demo recipes on the demo scenario; the output folder is replaced.

    Uses the checkout's ``demo_images/`` when it is there; otherwise (an
    installed package) the scenario is drawn into a temporary folder first,
    the same images `make_demo_dataset` always draws. The recipes ship in
    the package (`read_demo_recipes`). ``model`` is `augplan.vet.vet_recipes`'s
    (None: the default model).

    Parameters
    ----------
    out_dir : str or Path
        The output folder (replaced).
    rng : numpy.random.Generator
        The vetting run's generator (`augplan.vet.vet_recipes`).
    seed : int, optional
        The seed ``rng`` was made from, recorded as provenance.
    workers, quiet, repeats, model
        As `augplan.vet.vet_recipes` takes them.

    Returns
    -------
    augplan.results.VetResult
    """
    from augplan.data import open_dataset
    from augplan.vet import vet_recipes
    from augplan.workspace import default_ledger

    recipes = read_demo_recipes()
    # The demo keeps its ledger beside its output folder, as a data set keeps it beside the data.
    ledger = default_ledger(Path(out_dir).resolve())
    ledger.parent.mkdir(parents=True, exist_ok=True)
    with contextlib.ExitStack() as stack:
        root = DEFAULT_DEMO_DIR
        if not root.is_dir():
            root = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="augplan-demo-"))) / "demo_images"
            make_demo_dataset(root)
        return vet_recipes(open_dataset(root), recipes, out_dir, rng=rng, seed=seed, replace=True, repeats=repeats,
                           workers=workers, quiet=quiet, ledger_path=ledger, cache_dir=ledger.parent / "features",
                           model=model)


def main(argv=None):
    """Regenerate the demo images: ``python -m augplan.demo [OUTPUT_DIR]``.

    Returns
    -------
    int
        0 on success, 2 on a usage error.
    """
    args = list(sys.argv[1:] if argv is None else argv)
    if len(args) > 1 or any(a.startswith("-") for a in args):
        print("usage: python -m augplan.demo [OUTPUT_DIR]  (default: demo_images/ in the repository)",
              file=sys.stderr)
        return 2
    root = Path(args[0]) if args else DEFAULT_DEMO_DIR
    files = make_demo_dataset(root)
    print(f"wrote {len(files)} images under {root}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
