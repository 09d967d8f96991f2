"""Augmentation: the op functions and the Augmenter that applies a recipe to images.

Modules: `transforms` (one function per op, ``image, params, rng -> image``,
and a recipe compiled into a plan) and `augmenter` (`Augmenter`, what the
training team calls, and `load_recipe`).
"""

from augplan.augment.augmenter import Augmenter, load_recipe
from augplan.augment.transforms import apply_recipe, augment_batch

__all__ = ["Augmenter", "load_recipe", "apply_recipe", "augment_batch"]
