"""Augmentation: the op functions and the Augmenter that applies a recipe to images."""
