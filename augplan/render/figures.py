"""Figures of the HTML report: files and bytes embedded as data URIs.

The page loads nothing: every figure is a PNG or JPEG embedded as a base64
data URI, told by its signature and decoded once, so the page never holds an
image a browser would show as broken. A figure whose file is missing is
named in a note instead.
"""

from __future__ import annotations

import base64
import io
from pathlib import Path

from augplan.render.formatting import escape
from augplan.render.plots import palette_png

__all__ = ["EVIDENCE_COLOURS", "embed_png", "embed_image", "inline_figure", "figure_html"]

_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


_JPEG_SIGNATURE = b"\xff\xd8\xff"


# Evidence sheets are embedded with this many colours (median cut), which
# keeps a report of many sheets small; the sheet files keep every colour.
EVIDENCE_COLOURS = 32


def embed_png(path, *, base_dir=None):
    """A ``data:image/png;base64,...`` URI for a PNG file, or None.

    Parameters
    ----------
    path : str or Path or None
        The PNG. A relative path is taken relative to ``base_dir`` when given.
    base_dir : str or Path, optional

    Returns
    -------
    str or None
        None when there is no path, the file cannot be read, or it is not a
        PNG (checked by its signature, PNG specification section 5.2), so the
        report never embeds something a browser would have to guess at.

    References
    ----------
    .. [1] W3C, "Portable Network Graphics (PNG) Specification (Second
       Edition)", 2003, section 5.2 (PNG signature).
    .. [2] L. Masinter, "The 'data' URL scheme", RFC 2397, 1998.
    """
    data = _read_figure(path, base_dir)
    if data is None or not data.startswith(_PNG_SIGNATURE):
        return None
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def _read_figure(path, base_dir):
    """The bytes of a figure file (relative paths against ``base_dir``), or None."""
    if not path:
        return None
    path = Path(path)
    if not path.is_absolute() and base_dir is not None:
        path = Path(base_dir) / path
    try:
        return path.read_bytes()
    except OSError:
        return None


def embed_image(path, *, base_dir=None):
    """A data URI for a PNG or JPEG file that decodes (told by its signature), or None; see `embed_png`."""
    data = _read_figure(path, base_dir)
    return None if data is None else _data_uri(data)


def _data_uri(data):
    """``data:`` URI of PNG or JPEG bytes that decode, else None.

    The type is told by the signature (PNG section 5.2; JPEG's start-of-image
    marker, ITU-T T.81 annex B) and the bytes are decoded once, so the page
    never holds an image a browser would show as broken.
    """
    if data.startswith(_PNG_SIGNATURE):
        mime = "image/png"
    elif data.startswith(_JPEG_SIGNATURE):
        mime = "image/jpeg"
    else:
        return None
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(io.BytesIO(data)) as image:
            image.load()
    except (OSError, UnidentifiedImageError, ValueError, SyntaxError):
        return None
    return f"data:{mime};base64," + base64.b64encode(data).decode("ascii")


def _as_palette(uri, colours):
    """A PNG data URI re-encoded as a palette PNG of ``colours`` colours (smaller for a page)."""
    from PIL import Image

    with Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1]))) as image:
        return palette_png(image, colours)


def inline_figure(data, caption, alt, *, css=""):
    """A ``<figure>`` of PNG or JPEG bytes drawn for the page, or "" when they do not decode."""
    uri = _data_uri(data) if data else None
    if uri is None:
        return ""
    return (f'<figure class="{css}"><img src="{uri}" alt="{escape(alt)}">'
            f"<figcaption>{escape(caption)}</figcaption></figure>")


def figure_html(path, caption, alt, base_dir, *, anchor=None, colours=None):
    """A ``<figure>`` of an image file, or a note naming the file when it cannot be embedded."""
    uri = embed_image(path, base_dir=base_dir)
    if uri is not None and colours:
        uri = _data_uri(_as_palette(uri, colours)) or uri
    if uri is None:
        if not path:
            return ""
        return f'<p class="note">Figure not available: <code>{escape(path)}</code></p>'
    id_attr = f' id="{anchor}"' if anchor else ""
    return (f'<figure{id_attr}><img src="{uri}" alt="{escape(alt)}">'
            f"<figcaption>{escape(caption)}</figcaption></figure>")
