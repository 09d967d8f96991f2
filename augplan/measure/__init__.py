"""Measurements of images and of models: image factors, features, the feature model and statistics."""
