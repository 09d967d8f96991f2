"""Propose a candidate recipe from the data: a commented YAML starting point.

With a field sample, the lighting, contrast and pose ranges are chosen to
span what the field shows, measured with the same nuisance factors that
``coverage`` reports; without one, conservative defaults. A draft is a
proposal: ``augplan check`` and ``augplan vet`` decide.
"""

import json

import numpy as np

from augplan.data import load_images
from augplan.measure.factors import brightness, normalised_sharpness, orientation, rms_contrast
from augplan.parallel import parallel_map
from augplan.recipe.parse import parse_recipe
from augplan.thresholds import BLURRIER_FIELD_RATIO, PLAUSIBLE_FACTOR

__all__ = ["draft_ranges", "draft_recipe_text", "field_lighting", "field_ratio_range"]

_CHUNK = 64  # images decoded and measured per work unit

# Conservative defaults when there is no field sample (common practice, no
# source): mild changes that rarely change what an image shows.
DEFAULTS = {
    "rotate": (-5.0, 5.0),
    "zoom": (0.95, 1.05),
    "shift": (-0.05, 0.05),
    "brightness": (0.8, 1.25),
    "contrast": (0.85, 1.15),
}
# The widest ranges a draft proposes whatever the field shows; beyond these a
# person should decide. Brightness is held to the plausibility cap that
# coverage's suggestions keep (`PLAUSIBLE_FACTOR`); contrast and rotation
# tighter still (common practice, no source).
LIMITS = {"brightness": (1.0 / PLAUSIBLE_FACTOR["brightness"], PLAUSIBLE_FACTOR["brightness"]),
          "contrast": (0.4, 2.5), "rotate": 45.0}


def field_ratio_range(train_values, field_values, limits):
    """Multiplicative range that takes the training median to the field's 5-95% span.

    Parameters
    ----------
    train_values, field_values : array_like
        One factor measured on the training images and on the field sample
        (a factor that scales with the op's factor, such as mean linear
        luminance for ``brightness``).
    limits : (float, float)
        The widest range proposed.

    Returns
    -------
    (float, float) or None
        Rounded to 2 decimals; always includes 1 (the unchanged image); None
        without field values or when the training median is not positive.
    """
    centre = float(np.median(train_values))
    if field_values is None or len(field_values) == 0 or centre <= 0:
        return None
    low = min(float(np.percentile(field_values, 5)) / centre, 1.0)
    high = max(float(np.percentile(field_values, 95)) / centre, 1.0)
    return (round(max(low, limits[0]), 2), round(min(high, limits[1]), 2))


def _ratio_range(train_values, field_values, default, limits):
    """`field_ratio_range` widened to include ``default``; ``default`` without a field."""
    reach = field_ratio_range(train_values, field_values, limits)
    if reach is None:
        return default
    return (min(reach[0], default[0]), max(reach[1], default[1]))


def field_lighting(train_images, field_images):
    """The brightness and contrast factors that reach the field's lighting.

    Parameters
    ----------
    train_images, field_images : numpy.ndarray (N, H, W, 3) uint8

    Returns
    -------
    dict
        ``{"brightness": (low, high), "contrast": (low, high)}``, each from
        `field_ratio_range` (mean BT.709 relative luminance for brightness,
        RMS contrast for contrast) within `LIMITS`; an op is missing when
        its factor cannot be measured.
    """
    measured = {"brightness": brightness, "contrast": rms_contrast}
    reach = {op: field_ratio_range(factor(train_images), factor(field_images), LIMITS[op])
             for op, factor in measured.items()}
    return {op: pair for op, pair in reach.items() if pair is not None}


def _axial_spread(angles):
    """Circular standard deviation (degrees) of axial angles with period 180."""
    doubled = np.deg2rad(np.asarray(angles) * 2.0)
    resultant = np.hypot(np.mean(np.cos(doubled)), np.mean(np.sin(doubled)))
    resultant = min(max(resultant, 1e-12), 1.0)
    return float(np.rad2deg(np.sqrt(-2.0 * np.log(resultant))) / 2.0)


def _draft_measures(images):
    """The per-image factors a draft reads: ``{name: (N,) float64}``."""
    return {"brightness": brightness(images), "contrast": rms_contrast(images),
            "orientation": orientation(images), "sharpness": normalised_sharpness(images)}


def draft_ranges(train_images, field_images=None):
    """The ranges a draft proposes.

    Parameters
    ----------
    train_images : numpy.ndarray (N, H, W, 3) uint8
        Original training images.
    field_images : numpy.ndarray (M, H, W, 3) uint8, optional
        A sample from deployment.

    Returns
    -------
    dict
        ``{op: (low, high)}`` for rotate, zoom, shift, brightness, contrast and,
        when the field is blurrier than the training data, blur.

    Notes
    -----
    Brightness multiplies linear light and mean relative luminance is linear
    in it, so the factor that takes the training median luminance ``L`` to a
    field luminance ``F`` is ``F / L``; the range spans the field's 5th to
    95th percentile. Contrast likewise with RMS contrast. The rotation range
    is the field's extra orientation spread (circular standard deviation of
    the structure-tensor orientation, Mardia & Jupp 2000) beyond the training
    data's, doubled to cover both directions. Blur is proposed when the
    field's median sharpness is below `BLURRIER_FIELD_RATIO` (0.7) of the
    training median, both
    measured on intensity-normalised images (`normalised_sharpness`: the
    variance of the Laplacian of luminance divided by the squared mean
    luminance), so a field that is only darker or brighter does not read as
    blurrier.
    """
    field = None if field_images is None or len(field_images) == 0 else _draft_measures(field_images)
    return _ranges_from_measures(_draft_measures(train_images), field)


def _ranges_from_measures(train, field):
    """`draft_ranges` from the per-image measures of `_draft_measures` (field None: defaults)."""
    ranges = dict(DEFAULTS)
    if field is None:
        return ranges
    ranges["brightness"] = _ratio_range(train["brightness"], field["brightness"],
                                        DEFAULTS["brightness"], LIMITS["brightness"])
    ranges["contrast"] = _ratio_range(train["contrast"], field["contrast"],
                                      DEFAULTS["contrast"], LIMITS["contrast"])
    extra = max(0.0, _axial_spread(field["orientation"]) - _axial_spread(train["orientation"]))
    degrees = float(np.clip(round(2.0 * extra), DEFAULTS["rotate"][1], LIMITS["rotate"]))
    ranges["rotate"] = (-degrees, degrees)
    # On intensity-normalised images: a darker field alone lowers the plain
    # variance of the Laplacian and would read as blur.
    train_sharpness = float(np.median(train["sharpness"]))
    field_sharpness = float(np.median(field["sharpness"]))
    if train_sharpness > 0 and field_sharpness < BLURRIER_FIELD_RATIO * train_sharpness:
        ranges["blur"] = (0.0, 1.0)
    return ranges


def _measure_chunk(item):
    records, size = item
    return _draft_measures(load_images(records, size=size))


def _measure_records(records, size, workers, quiet, desc):
    """`_draft_measures` of ``records``, decoded and measured in chunks (in parallel with ``workers``)."""
    chunks = [records[i:i + _CHUNK] for i in range(0, len(records), _CHUNK)]
    parts = parallel_map(_measure_chunk, [(chunk, size) for chunk in chunks], workers=workers, desc=desc,
                         quiet=quiet)
    return {name: np.concatenate([part[name] for part in parts]) for name in parts[0]}


def _fmt(pair):
    return f"[{pair[0]:g}, {pair[1]:g}]"


def draft_recipe_text(dataset, *, name="draft", seed=0, size=64, workers=1, quiet=True):
    """A commented YAML recipe drafted from ``dataset`` (and its field split).

    Parameters
    ----------
    dataset : augplan.data.Dataset
    name : str
        The recipe's name.
    seed : int
        Written as the recipe's ``seed:`` field, the default seed of the
        training team's loader (`augplan.torch`). The draft itself draws
        nothing: it measures the images and writes ranges.
    size : int
        Side of the square the images are measured at.
    workers : int or augplan.parallel.Cluster, default 1
        Decode and measure the images in parallel; the draft is the same for
        any value.
    quiet : bool, default True
        Hide the progress bar.

    Returns
    -------
    str
        Recipe YAML that `augplan.recipe.parse_recipe` accepts.
    """
    train_records, field_records = dataset.split("train"), dataset.split("field")
    train = _measure_records(train_records, size, workers, quiet, "measuring train")
    field = _measure_records(field_records, size, workers, quiet, "measuring field") if field_records else None
    ranges = _ranges_from_measures(train, field)
    source = (f"the field sample ({len(field_records)} images)" if field is not None
              else "conservative defaults (no field sample was given)")
    lines = [
        f"# Drafted by augplan from {len(train_records)} training images; ranges from {source}.",
        "# A proposal, not a verdict: run 'augplan check' (or 'augplan vet') before use.",
        f"name: {json.dumps(name)}",
        f"seed: {int(seed)}",
        "copies: 4",
        "fill: reflect",
        "transforms:",
        "  # Exposure change in linear light; spans the field's lighting when a field sample exists.",
        "  - op: brightness",
        f"    factor: {_fmt(ranges['brightness'])}",
        "  - op: contrast",
        f"    factor: {_fmt(ranges['contrast'])}",
        "  - op: rotate",
        f"    degrees: {_fmt(ranges['rotate'])}",
        "  - op: zoom",
        f"    factor: {_fmt(ranges['zoom'])}",
        "  - op: shift",
        f"    fraction: {_fmt(ranges['shift'])}",
    ]
    if "blur" in ranges:
        lines += ["  # The field is blurrier than the training images.",
                  "  - op: blur", f"    sigma: {_fmt(ranges['blur'])}"]
    lines += [
        "  # Flips are proposed unconfirmed: 'check' must confirm them, since a flip",
        "  # swaps mirror-image classes (left/right parts, some letters and digits).",
        "  - op: flip",
        "    axis: horizontal",
        "    probability: 0.5",
        "# Hue and saturation are left out on purpose: colour often carries the class.",
    ]
    text = "\n".join(lines) + "\n"
    parse_recipe(text, source=f"draft '{name}'")  # a draft must always be a valid recipe
    return text
