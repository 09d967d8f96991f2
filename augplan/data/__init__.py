"""Data sets: folder and manifest layouts, decoding, fingerprints and near duplicates."""
