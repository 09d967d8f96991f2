"""The training-side API: a recipe as a callable augmenter for any framework."""

import numpy as np
from PIL import Image

from augplan.imaging.colour import check_image
from augplan.recipe.parse import Recipe, read_recipe_document
from augplan.augment.transforms import compile_recipe, run_plan

__all__ = ["Augmenter", "load_recipe"]


class Augmenter:
    """Apply a recipe to training images, one draw per call.

    The augmenter holds only the (immutable) recipe and its checked plan, so
    it is picklable (it works inside multi-process data loaders) and
    thread-safe: every call takes its randomness from the generator passed
    in. Images are uint8 RGB ``(H, W, 3)`` or grey ``(H, W)`` / ``(H, W, 1)``
    and come back in their own shape; the pixel work is OpenCV's (see
    `augplan.augment.transforms`). The draws are those of
    `augplan.augment.transforms.apply_recipe`, so the same generator gives the same
    bytes through either.

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
        self._plan = compile_recipe(recipe)

    def __repr__(self):
        return f"Augmenter(recipe={self.recipe.name!r}, transforms={len(self.recipe.transforms)})"

    def __call__(self, image, rng=None):
        """One augmented draw of ``image``.

        Parameters
        ----------
        image : numpy.ndarray (H, W, 3), (H, W, 1) or (H, W) uint8, or PIL.Image.Image
            A grey ("L") PIL image stays grey; any other PIL image is
            converted to RGB and an RGB PIL image comes back.
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
        pil_mode = None
        if isinstance(image, Image.Image):
            pil_mode = "L" if image.mode == "L" else "RGB"
            image = np.asarray(image.convert(pil_mode))
        elif not isinstance(image, np.ndarray):
            raise TypeError(f"image must be a numpy array or a PIL image; got {type(image).__name__}")
        augmented, new_label = self._apply_array(image, label, rng)
        if pil_mode is not None:
            augmented = Image.fromarray(augmented, mode=pil_mode)
        return augmented, new_label

    def _apply_array(self, image, label, rng):
        check_image(image)
        plane = image[..., 0] if image.ndim == 3 and image.shape[2] == 1 else image
        augmented, new_label = run_plan(plane, self._plan, rng, label)
        if augmented is plane:
            augmented = plane.copy()
        return augmented.reshape(image.shape), new_label

    def apply_batch(self, images, labels, rng):
        """Augmented draws of a batch: one `apply` per image, in order.

        Parameters
        ----------
        images : numpy.ndarray of uint8, shape (N, H, W, 3), (N, H, W, 1) or (N, H, W)
        labels : sequence of length N
            One label per image (None entries skip class-scoped steps).
        rng : numpy.random.Generator
            Drawn from image after image, so a batch gives the bytes that
            calling `apply` on each image in turn with the same generator
            gives.

        Returns
        -------
        (numpy.ndarray, list)
            The augmented batch, same shape and dtype as ``images``, and the
            labels after relabels.
        """
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}")
        if not isinstance(images, np.ndarray) or images.ndim not in (3, 4):
            shape = getattr(images, "shape", None)
            raise ValueError("images must be a uint8 batch of shape (N, H, W, 3), (N, H, W, 1) or (N, H, W); "
                             f"got {type(images).__name__} of shape {shape}")
        labels = list(labels)
        if len(labels) != len(images):
            raise ValueError(f"labels must hold one label per image: {len(images)} images, {len(labels)} labels")
        out = np.empty_like(images)
        new_labels = []
        for index, (image, label) in enumerate(zip(images, labels)):
            out[index], label = self._apply_array(image, label, rng)
            new_labels.append(label)
        return out, new_labels


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
