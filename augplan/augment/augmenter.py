"""The training-side API: a recipe as a callable augmenter for any framework."""

import numbers

import numpy as np
from PIL import Image

from augplan.errors import BadInputError
from augplan.imaging.colour import check_image
from augplan.recipe.parse import Recipe, read_recipe_document, vetted_checksum
from augplan.augment.transforms import compile_recipe, run_plan

__all__ = ["Augmenter", "load_recipe"]

_GENERATOR = np.random.Generator
_UINT8 = np.dtype(np.uint8)
_NO_GENERATOR = ("pass a numpy.random.Generator, e.g. aug(image, rng=np.random.default_rng(1234)), "
                 "so the draws are reproducible; give each data-loader worker its own generator")


def _scoped(recipe):
    """True when some transform of ``recipe`` depends on the label (``only``, ``except``, ``relabel``)."""
    return any(t.only is not None or t.exclude is not None or t.relabel is not None for t in recipe.transforms)


def _named_classes(recipe):
    """Every class name the recipe's scopes and relabels mention, in first-seen order."""
    names = []
    for step in recipe.transforms:
        for group in (step.only, step.exclude, tuple(step.relabel or ()), tuple((step.relabel or {}).values())):
            names.extend(name for name in group or () if name not in names)
    return names


def _check_classes(classes, recipe):
    if classes is None:
        return None
    if isinstance(classes, str) or not hasattr(classes, "__iter__"):
        raise TypeError(f"classes must be a sequence of class names in the training loop's index order; "
                        f"got {type(classes).__name__}")
    classes = tuple(str(name) for name in classes)
    if not classes:
        raise ValueError("classes must name at least one class; got an empty sequence")
    repeated = sorted({name for name in classes if classes.count(name) > 1})
    if repeated:
        raise ValueError(f"classes must be distinct; {', '.join(repeated)} appears more than once")
    unknown = [name for name in _named_classes(recipe) if name not in classes]
    if unknown:
        raise ValueError(f"recipe {recipe.name!r} scopes or relabels {', '.join(map(repr, unknown))}, which "
                         f"classes does not name; classes: {', '.join(classes)}")
    return classes


class Augmenter:
    """Apply a recipe to training images, one draw per call.

    The augmenter holds only the (immutable) recipe, its checked plan and its
    class list, so it is picklable (it works inside multi-process data
    loaders) and thread-safe: every call takes its randomness from the
    generator passed in. Images are uint8 RGB ``(H, W, 3)`` or grey ``(H, W)``
    / ``(H, W, 1)`` and come back in their own shape; the pixel work is
    OpenCV's (see `augplan.augment.transforms`). The draws are those of
    `augplan.augment.transforms.apply_recipe`, so the same generator gives the
    same bytes through either.

    Parameters
    ----------
    recipe : augplan.recipe.Recipe
    classes : sequence of str, optional
        Class names in the index order of the training loop, so that
        ``classes[3]`` is the class of integer label 3. Needed for integer
        labels when the recipe scopes (``only``, ``except``) or relabels a
        transform.

    Examples
    --------
    >>> import numpy as np
    >>> from augplan.recipe.parse import parse_recipe
    >>> aug = Augmenter(parse_recipe("name: demo\\ntransforms:\\n  - op: flip\\n"))
    >>> image = np.zeros((4, 6, 3), dtype=np.uint8); image[:, 0] = 255
    >>> aug(image, rng=np.random.default_rng(0))[:, -1, 0].tolist()
    [255, 255, 255, 255]
    """

    def __init__(self, recipe, classes=None):
        if not isinstance(recipe, Recipe):
            raise TypeError(f"Augmenter expects an augplan Recipe; got {type(recipe).__name__}")
        self.recipe = recipe
        self.classes = _check_classes(classes, recipe)
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
        rng : numpy.random.Generator
            Source of randomness; required (a missing one raises, so no draw
            ever runs with an unstated seed).

        Returns
        -------
        Same type as ``image``. Class-scoped transforms are skipped, since no
        label is known; use `apply` to honour scopes and relabels.
        """
        if type(rng) is _GENERATOR and type(image) is np.ndarray and image.dtype is _UINT8 and image.ndim == 3 \
                and image.shape[2] == 3 and image.shape[0] and image.shape[1]:
            # The common call of a training loop, an RGB array and no label,
            # checked in one expression; anything else takes the full path.
            out = run_plan(image, self._plan, rng, None)[0]
            return image.copy() if out is image else out
        return self.apply(image, None, rng)[0]

    def _label_name(self, label):
        """The class name of ``label``, and whether it came as an integer index."""
        if isinstance(label, numbers.Integral) and not isinstance(label, bool):
            if self.classes is None:
                if _scoped(self.recipe):
                    raise ValueError(
                        f"recipe {self.recipe.name!r} scopes or relabels transforms by class name, and the "
                        f"label {int(label)} is an integer: pass the class names in index order, "
                        "load_recipe(path, classes=[...]), or pass the class name as the label")
                return label, False
            if not 0 <= int(label) < len(self.classes):
                raise ValueError(f"label {int(label)} is outside classes (0 to {len(self.classes) - 1})")
            return self.classes[int(label)], True
        if isinstance(label, (numbers.Number, np.generic)) and not isinstance(label, str):
            # 0.5, NaN, a float32 1.0, True: no class is meant, and a scope would skip silently.
            raise ValueError(f"label must be an integer class index or a class name; got {label!r} "
                             f"({type(label).__name__}). Convert labels with int() or .astype(int).")
        return label, False

    def apply(self, image, label, rng=None):
        """One augmented draw of ``(image, label)``: scopes and relabels applied.

        Parameters
        ----------
        image : numpy.ndarray (H, W, 3), (H, W, 1) or (H, W) uint8, or PIL.Image.Image
        label : str or int or None
            A class name, or an integer index into ``classes``. An integer
            comes back as an integer.
        rng : numpy.random.Generator
            Required.

        Returns
        -------
        (image, label)
            The label follows the image when a transform with ``relabel`` ran.

        Raises
        ------
        TypeError
            No generator, or an image that is neither an array nor a PIL image.
        ValueError
            An integer label for a class-scoped recipe without ``classes``.
        """
        if type(rng) is _GENERATOR and type(image) is np.ndarray and image.dtype is _UINT8 and image.ndim == 3 \
                and image.shape[2] == 3 and image.shape[0] and image.shape[1] \
                and (label is None or type(label) is str):
            # An RGB array with a class name (or none): checked in one expression.
            out, new_label = run_plan(image, self._plan, rng, label)
            return (image.copy() if out is image else out), new_label
        _check_generator(rng, type(self).__name__)
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
        name, as_index = self._label_name(label)
        check_image(image)
        plane = image[..., 0] if image.ndim == 3 and image.shape[2] == 1 else image
        augmented, new_name = run_plan(plane, self._plan, rng, name)
        if augmented is plane:
            augmented = plane.copy()
        new_label = self.classes.index(new_name) if as_index else new_name
        return augmented.reshape(image.shape), new_label

    def apply_batch(self, images, labels, rng):
        """Augmented draws of a batch: one `apply` per image, in order.

        Parameters
        ----------
        images : numpy.ndarray of uint8, shape (N, H, W, 3), (N, H, W, 1) or (N, H, W)
        labels : sequence of length N
            One label per image: class names, integer indices into
            ``classes``, or None entries (which skip class-scoped steps).
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
        _check_generator(rng, type(self).__name__)
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


def _check_generator(rng, who):
    if rng is None:
        raise TypeError(f"{who} needs a generator: {_NO_GENERATOR}")
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator; got {type(rng).__name__}")


def load_recipe(path, classes=None, *, verify=True):
    """Read a recipe or vetted recipe file and return its `Augmenter`.

    Parameters
    ----------
    path : str or Path
    classes : sequence of str, optional
        Class names in the training loop's index order, for integer labels.
        Default: the class list a vetted file carries (``evidence.classes``,
        written by ``augplan vet``); a plain recipe has none.
    verify : bool, default True
        Check a vetted file's checksum and refuse an edited file. Pass
        ``verify=False`` to load an edited vetted file anyway (its evidence
        then no longer describes it).

    Returns
    -------
    Augmenter

    Raises
    ------
    augplan.errors.BadInputError
        The file is not a valid recipe, or a vetted file's checksum does not
        match its content.
    """
    recipe, extras = read_recipe_document(path, extra_fields=("evidence", "checksum"))
    evidence, checksum = extras.get("evidence"), extras.get("checksum")
    if verify and (evidence is not None or checksum is not None):
        if evidence is None or checksum is None or checksum != vetted_checksum(recipe, evidence):
            raise BadInputError(
                f"{path}: the vetted recipe's checksum does not match its content: the recipe or its "
                "evidence was edited after vetting. Vet it again, or pass verify=False to load it as it is.")
    vetted_classes = evidence.get("classes") if isinstance(evidence, dict) else None
    if classes is None and vetted_classes:
        classes = vetted_classes
    elif classes is not None and vetted_classes:
        _check_vetted_classes(path, classes, vetted_classes)
    return Augmenter(recipe, classes=classes)


def _check_vetted_classes(path, classes, vetted_classes):
    """A class list given for a vetted file must name the classes it was vetted on (in any order)."""
    if isinstance(classes, str) or not hasattr(classes, "__iter__"):
        return  # Augmenter says what a class list must be
    given = [str(name) for name in classes]
    if len(given) != len(vetted_classes):
        raise ValueError(f"{path}: the recipe was vetted on {len(vetted_classes)} classes "
                         f"({', '.join(map(str, vetted_classes))}); classes names {len(given)}. Pass the "
                         "training loop's class names in index order, or leave classes out to use the vetted list.")
    unknown = sorted(set(given) - set(map(str, vetted_classes)))
    if unknown:
        raise ValueError(f"{path}: classes names {', '.join(map(repr, unknown))}, which the recipe was not vetted "
                         f"on; it was vetted on {', '.join(map(str, vetted_classes))}.")
