"""Reading a data set: its layout, its images and the copies shared between its splits.

Modules: `records` (an image file and lists of them), `decoding` (files to RGB
arrays), `folders` and `manifest` (the two layouts), `duplicates` (copies
across splits) and `dataset` (`Dataset`, `open_dataset`).
"""

from augplan.data.dataset import Dataset, open_dataset
from augplan.data.decoding import load_images, read_image, read_record
from augplan.data.duplicates import find_duplicates, hamming_matrix, local_difference, perceptual_hash
from augplan.data.records import SPLITS, ImageRecord, fingerprint, stratified_choice

__all__ = [
    "Dataset",
    "open_dataset",
    "ImageRecord",
    "SPLITS",
    "stratified_choice",
    "fingerprint",
    "read_image",
    "read_record",
    "load_images",
    "find_duplicates",
    "perceptual_hash",
    "hamming_matrix",
    "local_difference",
]
