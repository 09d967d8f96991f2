"""On-disk cache of the features of original (never augmented) images.

One ``.npy`` file per image, named by the image's content hash (sha256 of the
file bytes) inside a folder named by the feature settings key, so a rerun on
unchanged data reuses every row, a changed image misses only its own row, and
a change of feature code or image size starts a fresh folder. Files are
written atomically, so an interrupted run never leaves a half-written row.

Only originals are cached: augmented draws change with every recipe, repeat
and seed, and are streamed instead.
"""

import hashlib
import inspect
import io
from pathlib import Path

import numpy as np

from augplan.atomic import write_bytes_atomic
from augplan.workspace import default_feature_cache

__all__ = ["FeatureCache", "feature_settings_key", "default_cache_dir"]


def default_cache_dir(data_root):
    """Default cache folder: ``<parent of the data folder>/.augplan/features``.

    The data folder itself is never written to.
    """
    return default_feature_cache(data_root)


def _source_digest(function):
    """sha256 of the source file that defines ``function`` (empty if unknown)."""
    try:
        source_file = inspect.getsourcefile(function)
    except TypeError:
        source_file = None
    if not source_file or not Path(source_file).is_file():
        return ""
    return hashlib.sha256(Path(source_file).read_bytes()).hexdigest()


def feature_settings_key(feature_fn, size):
    """Key naming every setting that changes an original image's feature row.

    Parameters
    ----------
    feature_fn : callable
        The batch feature function ``(N, H, W, 3) uint8 -> (N, D) float32``.
    size : int
        Side length the images are downsized to before featurising.

    Returns
    -------
    str
        24 hex characters: a hash of the function's qualified name, the
        content of the file defining it (so an edit of the feature code
        invalidates the cache) and ``size``.
    """
    name = f"{getattr(feature_fn, '__module__', '?')}.{getattr(feature_fn, '__qualname__', repr(feature_fn))}"
    text = "|".join([name, _source_digest(feature_fn), f"size={int(size)}"])
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:24]


class FeatureCache:
    """Feature rows of original images on disk, keyed by content hash.

    Parameters
    ----------
    cache_dir : str or Path or None
        Root of the cache. ``None`` disables the disk cache (every lookup
        misses, nothing is written).
    settings_key : str
        From `feature_settings_key`; rows of different settings never mix.

    row_length : int, optional
        Length every row has; a stored row of another length is damaged.

    Attributes
    ----------
    hits, misses : int
        Lookups served from disk and lookups that found nothing, since creation.
    damaged : list of Path
        Stored rows that were unreadable, of the wrong shape or length, or
        not finite: each counts as a miss, so it is recomputed and rewritten.
    """

    def __init__(self, cache_dir, settings_key, row_length=None):
        self.cache_dir = None if cache_dir is None else Path(cache_dir)
        self.settings_key = str(settings_key)
        self.row_length = None if row_length is None else int(row_length)
        self.hits = 0
        self.misses = 0
        self.damaged = []
        if self.cache_dir is not None:
            self.folder.mkdir(parents=True, exist_ok=True)

    @property
    def folder(self):
        """Folder holding this settings key's rows (``None`` when disabled)."""
        if self.cache_dir is None:
            return None
        return self.cache_dir / self.settings_key

    def _path(self, content_hash):
        content_hash = str(content_hash)
        if len(content_hash) < 8 or not all(c in "0123456789abcdef" for c in content_hash):
            raise ValueError(f"content_hash must be a lowercase hex digest; got {content_hash!r}.")
        return self.folder / content_hash[:2] / f"{content_hash}.npy"

    def get(self, content_hash):
        """Return the cached feature row of an image, or ``None``."""
        if self.cache_dir is None:
            self.misses += 1
            return None
        path = self._path(content_hash)
        try:
            row = np.load(path, allow_pickle=False)
        except FileNotFoundError:
            self.misses += 1
            return None
        except (ValueError, OSError, EOFError):
            row = None
        if not self._sound(row):
            # A damaged row is recomputed and rewritten.
            self.damaged.append(path)
            self.misses += 1
            return None
        self.hits += 1
        return row

    def mark_damaged(self, content_hash):
        """Record a stored row found unfit by its user (wrong length); it is then recomputed."""
        if self.cache_dir is not None:
            self.damaged.append(self._path(content_hash))

    def _sound(self, row):
        return (isinstance(row, np.ndarray) and row.ndim == 1 and row.dtype.kind == "f"
                and (self.row_length is None or row.size == self.row_length)
                and bool(np.isfinite(row).all()))

    def put(self, content_hash, row):
        """Store one feature row (atomically); a no-op when disabled."""
        if self.cache_dir is None:
            return
        path = self._path(content_hash)
        path.parent.mkdir(parents=True, exist_ok=True)
        buffer = io.BytesIO()
        np.save(buffer, np.asarray(row, dtype=np.float32), allow_pickle=False)
        # No fsync: a row lost in a power cut fails to load and is recomputed.
        write_bytes_atomic(path, buffer.getvalue(), durable=False)

    def lookup(self, content_hashes):
        """Look up many rows at once.

        Returns
        -------
        rows : list
            The cached row or ``None`` for each hash, in order.
        """
        return [self.get(h) for h in content_hashes]
