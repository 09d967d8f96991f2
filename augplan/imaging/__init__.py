"""Image arrays: sRGB colour maths and the checks every image function relies on.

Module: `colour` (sRGB <-> linear light, relative luminance, HSV, and the
shape and dtype checks of images and batches).
"""

from augplan.imaging.colour import (
    check_rgb_batch,
    check_rgb_image,
    linear_to_srgb,
    relative_luminance,
    rgb_to_hsv,
    hsv_to_rgb,
    srgb_to_linear,
)

__all__ = [
    "srgb_to_linear",
    "linear_to_srgb",
    "relative_luminance",
    "rgb_to_hsv",
    "hsv_to_rgb",
    "check_rgb_image",
    "check_rgb_batch",
]
