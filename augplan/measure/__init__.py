"""Measurements of images and of models: image factors, features, the feature model and statistics.

Modules: `factors` (nuisance factors of an image), `features` (the proxy
model's features), `model` (`FeatureModel`), `models` (the scoring models
and their names), `convnet` (the small network; needs PyTorch, so it is not
imported here), `shortcuts` (the shortcut audit) and `stats` (intervals and
tests).
"""

from augplan.measure.factors import FACTORS, Factor, measure_factors
from augplan.measure.features import image_features
from augplan.measure.model import FeatureModel
from augplan.measure.models import scoring_model
from augplan.measure.shortcuts import audit_shortcuts, shortcut_scores, val_shared_shortcuts
from augplan.measure.stats import holm, paired_gain_test, sign_flip_test, wilson_interval

__all__ = [
    "FACTORS",
    "Factor",
    "measure_factors",
    "image_features",
    "FeatureModel",
    "scoring_model",
    "audit_shortcuts",
    "shortcut_scores",
    "val_shared_shortcuts",
    "wilson_interval",
    "sign_flip_test",
    "paired_gain_test",
    "holm",
]
