"""Reading image files as RGB uint8 arrays: identification, decoding, size limits.

Image policy
------------
Every image becomes an ``(H, W, 3)`` RGB ``uint8`` array:

- ``1``, ``L``, ``CMYK``, ``YCbCr`` and the like: Pillow's own conversion to RGB.
- Alpha (``LA``, ``PA``, ``RGBA``, palette or grey/RGB transparency) is
  **composited over black**: each colour is multiplied by its opacity, so a
  fully transparent pixel is black whatever colour it stored. Hidden colours
  under transparent pixels therefore cannot leak into features.
- 16-bit data (``I;16`` variants, and ``I`` whose values lie in
  ``[0, 65535]``, which is how Pillow opens 16-bit PNG and TIFF files) are
  scaled by the bit depth, ``round(v * 255 / 65535)``: 65535 -> 255,
  32768 -> 128. ``I`` data outside that range are min-max scaled.
- ``F`` (float) data within ``[0, 1]`` are scaled by 255; anything else is
  min-max scaled to ``[0, 255]``; non-finite values count as 0; a constant
  image outside ``[0, 1]`` becomes black.
- EXIF orientation is applied (``PIL.ImageOps.exif_transpose``).
- Multi-frame files (GIF, TIFF) give their first frame.
"""

import io
import warnings
from pathlib import Path

import numpy as np
from PIL import Image, ImageOps

from augplan.data.records import ImageRecord
from augplan.errors import BadInputError
from augplan.imaging.colour import unit_to_uint8

__all__ = ["MAX_IMAGE_BYTES", "MAX_IMAGE_PIXELS", "REDUCE_ABOVE_PIXELS", "read_image", "read_record", "load_images"]

#: Largest image file read (bytes): past any real photograph, and a bound on
#: memory before a byte is read (common practice, no source).
MAX_IMAGE_BYTES = 512 * 2**20
#: Most pixels in an image augplan decodes: 2**26 (8192 x 8192). Decoded at
#: up to 4 bytes a pixel (RGBA, 32-bit grey) that is 256 MiB, the largest
#: buffer a read holds; larger images are listed and skipped (common
#: practice, no source).
MAX_IMAGE_PIXELS = 2**26
#: Images of more pixels than this are reduced by a whole factor (block
#: averages, Pillow's ``Image.reduce``) right after decoding, before any
#: conversion copies them: at most the analysis side is ever converted. Smaller
#: images take the plain path, so their results do not change (chosen here).
REDUCE_ABOVE_PIXELS = 2**22


def _pixel_limit_message(path, error):
    return (f"{path}: image is too large to decode safely ({error}); "
            "Pillow refuses images this big as a possible decompression bomb")


def _too_many_pixels(width, height):
    """The reason an image of ``width`` x ``height`` is not decoded, or None."""
    if width * height > MAX_IMAGE_PIXELS:
        return (f"{width}x{height} is {width * height} pixels; augplan decodes images of at most "
                f"{MAX_IMAGE_PIXELS} pixels")
    return None


def identify(data):
    """Return None if ``data`` decodes as an image, else the reason.

    ``Image.verify`` checks PNG chunk checksums and completeness; it does
    nothing for JPEG, so JPEGs are also decoded at 1/8 scale, which still
    walks all of the entropy-coded data and so catches truncation cheaply.
    Every other format is decoded in full, so a damaged compressed stream
    behind intact chunks is caught here, where it is listed and skipped,
    not later in the middle of an analysis.
    """
    if not data:
        return "empty file (0 bytes)"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data)) as image:
                image_format = image.format
                width, height = image.size
                too_many = _too_many_pixels(width, height)
                if too_many is not None:
                    return too_many
                image.verify()
            with Image.open(io.BytesIO(data)) as image:
                if image_format == "JPEG":
                    image.draft(image.mode, (max(1, width // 8), max(1, height // 8)))
                image.load()
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as error:
        return f"too large to decode safely, a possible decompression bomb ({error})"
    except Image.UnidentifiedImageError:
        return "not an image Pillow can read"
    except Exception as error:  # noqa: BLE001 - Pillow plugins raise many kinds on bad bytes
        return f"damaged or truncated image ({type(error).__name__}: {error})"
    if width < 1 or height < 1:
        return f"image has no pixels ({width}x{height})"
    return None


def _composite_over_black(rgba):
    """RGBA uint8 array -> RGB uint8, colours multiplied by opacity."""
    rgb = rgba[..., :3].astype(np.uint16)
    alpha = rgba[..., 3:4].astype(np.uint16)
    return ((rgb * alpha + 127) // 255).astype(np.uint8)


def _grey_to_rgb(grey):
    return np.repeat(grey[..., None], 3, axis=2)


def _scale_16bit(values):
    values = values.astype(np.uint32)
    return ((values * 255 + 32767) // 65535).astype(np.uint8)


def _min_max(values):
    low, high = float(values.min()), float(values.max())
    if high <= low:
        return np.zeros(values.shape, np.uint8)
    scaled = (values.astype(np.float64) - low) * (255.0 / (high - low))
    return np.clip(np.rint(scaled), 0, 255).astype(np.uint8)


def _to_rgb_array(image):
    """A loaded Pillow image of any mode -> (H, W, 3) RGB uint8 (see module notes)."""
    mode = image.mode
    has_transparency = "transparency" in image.info
    if mode in ("LA", "La", "PA", "RGBA", "RGBa") or (
            has_transparency and mode in ("1", "L", "P", "RGB")):
        return _composite_over_black(np.asarray(image.convert("RGBA")))
    if mode == "RGB":
        return np.array(image, dtype=np.uint8)
    if mode.startswith("I;16") or mode == "I":
        values = np.asarray(image)
        if values.dtype.kind in "ui" and values.size and values.min() >= 0 and values.max() <= 65535:
            return _grey_to_rgb(_scale_16bit(values))
        return _grey_to_rgb(_min_max(values))
    if mode == "F":
        values = np.nan_to_num(np.asarray(image, dtype=np.float64), nan=0.0, posinf=0.0, neginf=0.0)
        if values.min() >= 0.0 and values.max() <= 1.0:
            return _grey_to_rgb(unit_to_uint8(values))
        return _grey_to_rgb(_min_max(values))
    return np.array(image.convert("RGB"), dtype=np.uint8)


def decode(path, *, max_side=None, draft_size=None, data=None):
    """Open ``path`` (or decode ``data``, its bytes) and return its RGB uint8 array.

    ``max_side`` bounds the longer side of the result; ``draft_size`` asks
    the JPEG decoder for at least that (width, height). Both keep huge
    JPEGs from ever being decoded at full size. Messages name ``path``.
    """
    path = Path(path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path if data is None else io.BytesIO(data)) as image:
                width, height = image.size
                too_many = _too_many_pixels(width, height)
                if too_many is not None:
                    raise BadInputError(f"{path}: {too_many}")
                request = draft_size
                if max_side is not None and max(width, height) > max_side:
                    ratio = max_side / max(width, height)
                    request = (max(1, int(np.ceil(width * ratio))), max(1, int(np.ceil(height * ratio))))
                if image.format == "JPEG" and request is not None:
                    image.draft(image.mode, request)
                reduced = _reduced(image, request)
                if reduced is None:
                    image.load()
                    image = ImageOps.exif_transpose(image)
                else:
                    image = reduced
                array = _to_rgb_array(image)
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as error:
        raise BadInputError(_pixel_limit_message(path, error)) from None
    except BadInputError:
        raise
    except FileNotFoundError:
        raise BadInputError(f"{path}: image file not found") from None
    except IsADirectoryError:
        raise BadInputError(f"{path}: is a folder, expected an image file") from None
    except PermissionError:
        raise BadInputError(f"{path}: cannot read the image (permission denied)") from None
    except Image.UnidentifiedImageError:
        raise BadInputError(f"{path}: not an image Pillow can read") from None
    except Exception as error:  # noqa: BLE001 - Pillow plugins raise many kinds on bad bytes
        raise BadInputError(
            f"{path}: damaged or truncated image ({type(error).__name__}: {error})") from None
    if max_side is not None and max(array.shape[:2]) > max_side:
        height, width = array.shape[:2]
        ratio = max_side / max(width, height)
        size = (max(1, round(width * ratio)), max(1, round(height * ratio)))
        array = _resize(array, size)
    return array


# EXIF orientation -> the transpose that undoes it (as ImageOps.exif_transpose).
_ORIENTATION = {2: Image.Transpose.FLIP_LEFT_RIGHT, 3: Image.Transpose.ROTATE_180,
                4: Image.Transpose.FLIP_TOP_BOTTOM, 5: Image.Transpose.TRANSPOSE, 6: Image.Transpose.ROTATE_270,
                7: Image.Transpose.TRANSVERSE, 8: Image.Transpose.ROTATE_90}


def _reduced(image, request):
    """A large image reduced by a whole factor toward ``request`` (width, height), oriented; else None.

    Only images of more than `REDUCE_ABOVE_PIXELS` (after any JPEG draft)
    are reduced, and never below ``request``: the box resize that follows
    still makes the final size. Palette, bilevel and 16-bit images are first
    converted to a mode whose pixels can be averaged; transparency becomes
    an alpha channel.
    """
    width, height = image.size
    if request is None or width * height <= REDUCE_ABOVE_PIXELS:
        return None
    factor = min(width // max(1, request[0]), height // max(1, request[1]))
    orientation = image.getexif().get(0x0112, 1)
    if orientation in (5, 6, 7, 8):  # the request is for the turned image
        factor = min(width // max(1, request[1]), height // max(1, request[0]))
    if factor < 2:
        return None
    if image.mode in ("P", "PA") or "transparency" in image.info:
        image = image.convert("RGBA")
    elif image.mode == "1":
        image = image.convert("L")
    elif image.mode.startswith("I;16"):
        image = image.convert("I")
    reduced = image.reduce(factor)
    method = _ORIENTATION.get(orientation)
    return reduced if method is None else reduced.transpose(method)


def _resize(array, size):
    """Resize an RGB uint8 array to ``size`` (width, height).

    Shrinking averages over the area each output pixel covers (Pillow's box
    filter), so fine detail is averaged rather than aliased; enlarging is
    bilinear.
    """
    height, width = array.shape[:2]
    shrinking = size[0] <= width and size[1] <= height
    method = Image.Resampling.BOX if shrinking else Image.Resampling.BILINEAR
    return np.asarray(Image.fromarray(array).resize(size, method))


def read_image(path, max_side=None):
    """Read one image file as an RGB uint8 array.

    Parameters
    ----------
    path : str or Path
        The image file.
    max_side : int, optional
        If given, the image is downsized while reading (the JPEG decoder's
        draft mode, then an area-averaging resize) so that its longer side is
        at most ``max_side``; aspect ratio is kept.

    Returns
    -------
    numpy.ndarray
        ``(H, W, 3)`` uint8, RGB, EXIF orientation applied. Mode handling
        (alpha over black, 16-bit and float scaling) is in the module notes.

    Raises
    ------
    BadInputError
        The file is missing, unreadable, not an image, damaged, or larger
        than Pillow's decompression-bomb limit.
    """
    if max_side is not None:
        if isinstance(max_side, bool) or not isinstance(max_side, (int, np.integer)) or max_side < 1:
            raise ValueError(f"max_side must be a positive integer or None; got {max_side!r}")
        max_side = int(max_side)
    return decode(path, max_side=max_side)


def read_record(record, max_side=None):
    """`read_image` of an `ImageRecord`: from the bytes it carries (``record.data``), else its file."""
    if max_side is not None and (isinstance(max_side, bool) or not isinstance(max_side, (int, np.integer))
                                 or max_side < 1):
        raise ValueError(f"max_side must be a positive integer or None; got {max_side!r}")
    return decode(record.path, max_side=None if max_side is None else int(max_side), data=record.data)


def load_images(records, size=64):
    """Read images one at a time and resize each to a ``size`` x ``size`` square.

    Aspect ratio is **not** kept: the proxy model works on fixed squares and
    a stretch keeps all of the content, where a crop would drop some.
    Shrinking averages over areas (Pillow's box filter, after JPEG draft
    decoding); enlarging a small image is bilinear.

    Parameters
    ----------
    records : sequence of ImageRecord or path
        Images to read, in order. A record that carries its bytes
        (``record.data``) is decoded from them; its file is not opened.
    size : int, default 64
        Side of the output squares.

    Returns
    -------
    numpy.ndarray
        ``(N, size, size, 3)`` uint8.

    Raises
    ------
    BadInputError
        An image cannot be decoded (the message names the file).
    """
    if isinstance(size, bool) or not isinstance(size, (int, np.integer)) or size < 1:
        raise ValueError(f"size must be a positive integer; got {size!r}")
    size = int(size)
    records = list(records)
    batch = np.empty((len(records), size, size, 3), dtype=np.uint8)
    for index, record in enumerate(records):
        if isinstance(record, ImageRecord):
            array = decode(record.path, draft_size=(size, size), data=record.data)
        else:
            array = decode(Path(record), draft_size=(size, size))
        if array.shape[:2] != (size, size):
            array = _resize(array, (size, size))
        batch[index] = array
    return batch
