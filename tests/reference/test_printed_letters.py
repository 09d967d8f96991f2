"""The letter renderer draws real glyphs: ink on paper, a different shape for every character."""

import numpy as np
import pytest
from PIL import Image

from printed_letters import (PAIRED_CHARACTERS, PLAIN_CHARACTERS, TRAIN_FAMILIES, VAL_FAMILIES,
                             render_characters, write_letters_dataset)

CHARACTERS = PAIRED_CHARACTERS + PLAIN_CHARACTERS


@pytest.mark.parametrize("family", [*TRAIN_FAMILIES, *VAL_FAMILIES])
def test_every_font_draws_each_character_as_its_own_glyph(family):
    families = {**TRAIN_FAMILIES, **VAL_FAMILIES}
    for name in families[family]:
        images, labels = render_characters(CHARACTERS, {family: (name,)}, 1, side=32, seed=0)
        assert labels == list(CHARACTERS)
        ink = images[..., 0] < 128
        # Every glyph leaves ink and paper; a font without the character would
        # draw nothing or the same placeholder box for all of them.
        assert ink.any(axis=(1, 2)).all(), name
        assert (~ink).mean() > 0.5, name
        shapes = {ink[i].tobytes() for i in range(len(CHARACTERS))}
        assert len(shapes) == len(CHARACTERS), name


def test_train_and_validation_come_from_different_families(tmp_path):
    assert not set(TRAIN_FAMILIES) & set(VAL_FAMILIES)
    root = write_letters_dataset(tmp_path / "letters", ("b", "d"), per_font_train=1, per_font_val=1)
    train = sorted(p.relative_to(root).as_posix() for p in (root / "train").rglob("*.png"))
    val = sorted(p.relative_to(root).as_posix() for p in (root / "val").rglob("*.png"))
    n_train_fonts = sum(len(files) for files in TRAIN_FAMILIES.values())
    n_val_fonts = sum(len(files) for files in VAL_FAMILIES.values())
    assert len(train) == 2 * n_train_fonts and len(val) == 2 * n_val_fonts
    first = np.asarray(Image.open(root / train[0]))
    assert first.shape == (32, 32, 3) and first.dtype == np.uint8
