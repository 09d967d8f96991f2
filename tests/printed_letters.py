"""Printed characters rendered from the fonts that ship inside matplotlib's package.

Outside data for the label-safety tests of text: the glyphs are drawn by
type designers, not by this project. matplotlib's wheel carries three font
families (``matplotlib/mpl-data/fonts/ttf``, each with its licence file
beside it): DejaVu (Bitstream Vera derivative; Debian ships it as
``fonts-dejavu-core``), STIX (STI Pub; Debian's ``fonts-stix``) and the
BaKoMa TrueType cuts of Knuth's Computer Modern. Training and validation
images come from different families (`TRAIN_FAMILIES`, `VAL_FAMILIES`), so a
verdict cannot rest on one typeface's quirks.

Each rendering is one character, dark ink on white paper, at a random size
and position inside the square (the randomness is ours; the shapes are the
fonts').
"""

from pathlib import Path

import numpy as np
from PIL import Image, ImageDraw, ImageFont

#: Characters whose mirror or half turn is another character of the set, and
#: ones whose mirror and half turn are no other character here.
PAIRED_CHARACTERS = ("b", "d", "p", "q", "n", "u", "6", "9")
PLAIN_CHARACTERS = ("a", "e", "k", "r", "t", "y", "3", "7")

#: Font files inside ``mpl-data/fonts/ttf`` by family. The symbol-only
#: Computer Modern and STIX files (cmsy10, cmex10, STIXSiz*, STIXNonUni*) are
#: left out: they carry no Latin letters at the usual code points.
TRAIN_FAMILIES = {
    "dejavu-sans": ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf", "DejaVuSans-Oblique.ttf",
                    "DejaVuSans-BoldOblique.ttf"),
    "dejavu-serif": ("DejaVuSerif.ttf", "DejaVuSerif-Bold.ttf", "DejaVuSerif-Italic.ttf",
                     "DejaVuSerif-BoldItalic.ttf"),
    "dejavu-mono": ("DejaVuSansMono.ttf", "DejaVuSansMono-Bold.ttf", "DejaVuSansMono-Oblique.ttf",
                    "DejaVuSansMono-BoldOblique.ttf"),
}
VAL_FAMILIES = {
    "stix": ("STIXGeneral.ttf", "STIXGeneralBol.ttf", "STIXGeneralItalic.ttf", "STIXGeneralBolIta.ttf"),
    "computer-modern": ("cmr10.ttf", "cmss10.ttf", "cmtt10.ttf", "cmb10.ttf", "cmti10.ttf"),
}


def font_folder():
    """The folder of TrueType files that ships inside matplotlib."""
    import matplotlib

    return Path(matplotlib.get_data_path()) / "fonts" / "ttf"


def render_character(character, font_path, side, rng):
    """One character from one font, dark on white, as an ``(side, side, 3)`` uint8 image.

    The glyph's height is drawn between 55% and 80% of the side and its
    centre is moved by up to 8% of the side, so that renderings of one font
    differ as handwriting scans of one writer would.
    """
    scale = 4  # draw large, then reduce with area averaging for smooth edges
    canvas_side = side * scale
    size = int(round(canvas_side * rng.uniform(0.55, 0.80)))
    font = ImageFont.truetype(str(font_path), size)
    canvas = Image.new("L", (canvas_side, canvas_side), 255)
    draw = ImageDraw.Draw(canvas)
    left, top, right, bottom = draw.textbbox((0, 0), character, font=font)
    dx, dy = rng.uniform(-0.08, 0.08, size=2) * canvas_side
    x = (canvas_side - (right - left)) / 2 - left + dx
    y = (canvas_side - (bottom - top)) / 2 - top + dy
    draw.text((x, y), character, font=font, fill=0)
    grey = np.asarray(canvas.resize((side, side), Image.Resampling.BOX))
    return np.repeat(grey[..., None], 3, axis=2)


def render_characters(characters, families, per_font, *, side=32, seed=0):
    """Render every character ``per_font`` times from every font of ``families``.

    Parameters
    ----------
    characters : sequence of str
        One character a class.
    families : dict
        Family name -> font file names inside `font_folder()`, e.g.
        `TRAIN_FAMILIES`.
    per_font : int
        Renderings of each character from each font.
    side : int
        Side of the square images.
    seed : int
        Seed of the sizes and positions.

    Returns
    -------
    images : ndarray of uint8, shape (N, side, side, 3)
    labels : list of str
        The character of each image.
    """
    rng = np.random.default_rng(seed)
    folder = font_folder()
    images, labels = [], []
    for files in families.values():
        for name in files:
            for character in characters:
                for _ in range(per_font):
                    images.append(render_character(character, folder / name, side, rng))
                    labels.append(character)
    return np.stack(images), labels


def write_letters_dataset(root, characters, *, per_font_train=3, per_font_val=2, side=32, seed=0):
    """Write ``root/train/<char>/N.png`` from `TRAIN_FAMILIES` and ``root/val`` from `VAL_FAMILIES`.

    Returns ``root``. Class folders are named by the character itself.
    """
    root = Path(root)
    for split, families, per_font, split_seed in (("train", TRAIN_FAMILIES, per_font_train, seed),
                                                  ("val", VAL_FAMILIES, per_font_val, seed + 1)):
        images, labels = render_characters(characters, families, per_font, side=side, seed=split_seed)
        counts = {}
        for image, label in zip(images, labels):
            folder = root / split / label
            folder.mkdir(parents=True, exist_ok=True)
            counts[label] = counts.get(label, 0) + 1
            Image.fromarray(image).save(folder / f"{counts[label]:03d}.png")
    return root
