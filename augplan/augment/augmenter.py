"""The training-side API: a recipe as a callable augmenter for any framework."""

import numpy as np
from PIL import Image

from augplan.imaging.colour import check_rgb_image
from augplan.recipe.parse import Recipe, read_recipe_document
from augplan.augment.transforms import apply_recipe

__all__ = ["Augmenter", "load_recipe"]


class Augmenter:
    """Apply a recipe to training images, one draw per call.

    The augmenter holds only the (immutable) recipe, so it is picklable (it
    works inside multi-process data loaders) and thread-safe: every call
    takes its randomness from the generator passed in.

    Parameters
    ----------
    recipe : augplan.recipe.Recipe

    Examples
    --------
    >>> import numpy as np
    >>> from augplan.recipe.parse import parse_recipe
    >>> aug = Augmenter(parse_recipe("name: demo\\ntransforms:\\n  - op: flip\\n"))
    >>> image = np.zeros((4, 6, 3), dtype=np.uint8); image[:, 0] = 255
    >>> aug(image, rng=np.random.default_rng(0))[:, -1, 0].tolist()
    [255, 255, 255, 255]
    """

    def __init__(self, recipe):
        if not isinstance(recipe, Recipe):
            raise TypeError(f"Augmenter expects an augplan Recipe; got {type(recipe).__name__}")
        self.recipe = recipe

    def __repr__(self):
        return f"Augmenter(recipe={self.recipe.name!r}, transforms={len(self.recipe.transforms)})"

    def __call__(self, image, rng=None):
        """One augmented draw of ``image``.

        Parameters
        ----------
        image : numpy.ndarray (H, W, 3) uint8 or PIL.Image.Image
            A PIL image is converted to RGB and an RGB PIL image comes back.
        rng : numpy.random.Generator, optional
            Source of randomness; pass one for reproducible draws. Without it a
            fresh generator seeded from the operating system is used.

        Returns
        -------
        Same type as ``image``. Class-scoped transforms are skipped, since no
        label is known; use `apply` to honour scopes and relabels.
        """
        return self.apply(image, None, rng)[0]

    def apply(self, image, label, rng=None):
        """One augmented draw of ``(image, label)``: scopes and relabels applied.

        Returns
        -------
        (image, label)
            The label follows the image when a transform with ``relabel`` ran.
        """
        rng = np.random.default_rng() if rng is None else rng
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"rng must be a numpy.random.Generator or None; got {type(rng).__name__}")
        pil_image = None
        if isinstance(image, Image.Image):
            pil_image, image = image, np.asarray(image.convert("RGB"))
        elif not isinstance(image, np.ndarray):
            raise TypeError(f"image must be a numpy array or a PIL image; got {type(image).__name__}")
        check_rgb_image(image)
        augmented, new_label = apply_recipe(image, self.recipe, rng, label)
        if pil_image is not None:
            augmented = Image.fromarray(augmented, mode="RGB")
        return augmented, new_label


def load_recipe(path):
    """Read a recipe or vetted recipe file and return its `Augmenter`.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Augmenter
    """
    recipe, _ = read_recipe_document(path, extra_fields=("evidence", "checksum"))
    return Augmenter(recipe)
