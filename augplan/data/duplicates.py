"""Images shared between splits: exact copies (same bytes) and near copies (perceptual hash, confirmed)."""

import numpy as np
from PIL import Image

from augplan.data.decoding import decode
from augplan.data.records import SPLITS
from augplan.thresholds import (
    FLAT_SPREAD,
    NEAR_DUPLICATE_BITS,
    NEAR_DUPLICATE_LOCAL_DIFFERENCE,
    NEAR_DUPLICATE_PREFILTER_CORRELATION,
    NEAR_DUPLICATE_SSIM,
    NEAR_DUPLICATE_WINDOW,
)

__all__ = ["perceptual_hash", "hamming_matrix", "local_difference", "find_duplicates"]



def perceptual_hash(image):
    """64-bit DCT perceptual hash (pHash) of an RGB uint8 image.

    The image is turned to grey (Pillow's ``L``, ITU-R BT.601 luma), area
    averaged down to 32 x 32, transformed with an orthonormal 2-D DCT-II, and
    the 8 x 8 block of coefficients at rows and columns 1..8 (low
    frequencies, the DC term left out) is thresholded at its median [1]_.

    Parameters
    ----------
    image : numpy.ndarray
        ``(H, W, 3)`` uint8.

    Returns
    -------
    numpy.uint64
        The 64 bits, row-major, first coefficient in the highest bit.

    References
    ----------
    .. [1] C. Zauner, "Implementation and Benchmarking of Perceptual Image
       Hash Functions", Master's thesis, Upper Austria University of Applied
       Sciences, Hagenberg, 2010. (Block placement recalled from memory of
       the DCT hash described there, not checked against the text.)
    """
    return _perceptual_hash_and_spread(image)[0]


def _perceptual_hash_and_spread(image):
    """`perceptual_hash` plus the standard deviation of the 64 coefficients.

    A flat image has all those coefficients near zero, so its bits come from
    rounding noise; the spread lets callers leave such images out.
    """
    from scipy.fft import dctn

    image = np.asarray(image)
    if image.ndim != 3 or image.shape[2] != 3 or image.dtype != np.uint8:
        raise ValueError(f"expected an (H, W, 3) uint8 image; got shape {image.shape}, "
                         f"dtype {image.dtype}")
    grey = Image.fromarray(image).convert("L").resize((32, 32), Image.Resampling.BOX)
    coefficients = dctn(np.asarray(grey, dtype=np.float64), type=2, norm="ortho")
    block = coefficients[1:9, 1:9].ravel()
    bits = block > np.median(block)
    weights = np.left_shift(np.uint64(1), np.arange(63, -1, -1, dtype=np.uint64))
    return np.bitwise_or.reduce(np.where(bits, weights, np.uint64(0))), float(block.std())


_POPCOUNT_BYTE = np.array([bin(i).count("1") for i in range(256)], dtype=np.uint8)


def _popcount64(values):
    if hasattr(np, "bitwise_count"):
        return np.bitwise_count(values).astype(np.int64)
    as_bytes = values[..., None].view(np.uint8)
    return _POPCOUNT_BYTE[as_bytes].sum(axis=-1, dtype=np.int64)


def hamming_matrix(hashes_a, hashes_b):
    """Pairwise Hamming distances between two arrays of 64-bit hashes."""
    a = np.asarray(hashes_a, dtype=np.uint64)
    b = np.asarray(hashes_b, dtype=np.uint64)
    return _popcount64(np.bitwise_xor(a[:, None], b[None, :]))


def _confirm_views(path):
    """The two 64 x 64 views a candidate pair is confirmed on.

    Relative luminance (linear light, float32) for SSIM, and the grey codes
    (Pillow's ``L``, BT.601 luma of the sRGB codes, uint8) for the local
    difference: a brightness change in code values (a gain, an offset, or
    both, clipped at 0 and 255) is a straight line there.
    """
    from augplan.imaging.colour import relative_luminance

    image = Image.fromarray(decode(path, max_side=256)).resize((64, 64), Image.BILINEAR)
    return relative_luminance(np.asarray(image)), np.asarray(image.convert("L"))


def _tone_matched(source, target):
    """``source`` through the gain and offset that best predict ``target``.

    Least squares on the pixels clipped (0 or 255) in neither image, so a
    brightened copy whose highlights saturate is fitted on what the change
    left measurable; the result is clipped to [0, 1] as the copy was. Both
    are uint8 grey codes; returns float32 in [0, 1].
    """
    x = source.astype(np.float32) / 255
    y = target.astype(np.float32) / 255
    inside = (source > 0) & (source < 255) & (target > 0) & (target < 255)
    if np.count_nonzero(inside) < 2 or np.ptp(x[inside]) == 0:
        inside = np.ones(x.shape, dtype=bool)
    xs, ys = x[inside], y[inside]
    spread = float(xs.var())
    gain = float(((xs - xs.mean()) * (ys - ys.mean())).mean()) / spread if spread > 0 else 0.0
    return np.clip(gain * x + (float(ys.mean()) - gain * float(xs.mean())), 0.0, 1.0)


def local_difference(first, second):
    """Largest local difference between two grey images, as a share of contrast.

    Each image is predicted from the other by `_tone_matched`, so a change
    of brightness or contrast alone leaves no residual; the residual is
    averaged over ``NEAR_DUPLICATE_WINDOW`` x ``NEAR_DUPLICATE_WINDOW``
    windows and its largest magnitude divided by the predicted image's own
    range (max - min). The larger of the two directions is returned.

    Re-encoding and resampling leave residuals that are noise or thin lines
    along edges, which the window averages away; a stroke that is drawn
    differently leaves a patch of one sign, which it keeps. So two distinct
    handwritten 1s, whose global SSIM is inflated by the plain background
    they share, still differ here.

    Parameters
    ----------
    first, second : numpy.ndarray
        ``(H, W)`` uint8 grey codes of the same shape.

    Returns
    -------
    float
        0 for images equal up to a brightness change; about 1 when a whole
        window changes from one end of the range to the other.

    Raises
    ------
    ValueError
        The images are not uint8 grey images of one shape.
    """
    from scipy.ndimage import uniform_filter

    first, second = np.asarray(first), np.asarray(second)
    if first.ndim != 2 or first.shape != second.shape or first.dtype != np.uint8 or second.dtype != np.uint8:
        raise ValueError(f"expected two (H, W) uint8 grey images of one shape; got shapes {first.shape} and "
                         f"{second.shape}, dtypes {first.dtype} and {second.dtype}")
    worst = 0.0
    for source, target in ((first, second), (second, first)):
        residual = target.astype(np.float32) / 255 - _tone_matched(source, target)
        local = uniform_filter(residual, NEAR_DUPLICATE_WINDOW, mode="nearest")
        contrast = max(int(target.max()) - int(target.min()), 1) / 255
        worst = max(worst, float(np.abs(local).max()) / contrast)
    return worst


def _near_copies(first, second, views):
    """Whether two images are confirmed near copies of each other.

    Both tests must pass: SSIM (Wang et al. 2004) of the 64 x 64 relative
    luminance at least ``NEAR_DUPLICATE_SSIM``, and `local_difference` of
    the grey codes at most ``NEAR_DUPLICATE_LOCAL_DIFFERENCE``. ``views``
    caches each image's decoded views by path, so an image that takes part
    in many candidate pairs is read once.
    """
    from skimage.metrics import structural_similarity

    for path in (first, second):
        if path not in views:
            views[path] = _confirm_views(path)
    (luminance_a, grey_a), (luminance_b, grey_b) = views[first], views[second]
    if structural_similarity(luminance_a, luminance_b, data_range=1.0) < NEAR_DUPLICATE_SSIM:
        return False
    return local_difference(grey_a, grey_b) <= NEAR_DUPLICATE_LOCAL_DIFFERENCE


def _hash_file(path):
    # 128 px is ample for a 32 x 32 hash and lets JPEGs decode at reduced scale.
    image = decode(path, max_side=128)
    digest, spread = _perceptual_hash_and_spread(image)
    grey = np.asarray(Image.fromarray(image).convert("L").resize((16, 16), Image.Resampling.BOX),
                      dtype=np.float32).ravel()
    grey -= grey.mean()
    grey /= max(float(np.linalg.norm(grey)), 1e-6)
    return digest, spread, grey


_SPLIT_ORDER = {name: i for i, name in enumerate(SPLITS)}


def _exact_duplicates(records):
    """Pairs of records in different splits with the same file bytes (sha256)."""
    exact, by_digest = [], {}
    for record in records:
        by_digest.setdefault(record.sha256, []).append(record)
    for group in by_digest.values():
        for i, first in enumerate(group):
            for second in group[i + 1:]:
                if first.split != second.split:
                    exact.append({"kind": "exact", "a": first.relpath, "b": second.relpath,
                                  "splits": [first.split, second.split], "distance": 0})
    return exact


def find_duplicates(dataset, *, near_threshold=NEAR_DUPLICATE_BITS, workers=1):
    """Images shared between splits: exact copies and near copies.

    Only pairs in different splits are reported (a train image that is also
    in val, test or field; likewise val against test and field, test against
    field), since those leak between what a model learns and what scores it.
    ``a`` is the pair member of the earlier split (train, val, test, field).

    Parameters
    ----------
    dataset : Dataset
    near_threshold : int, default NEAR_DUPLICATE_BITS (6)
        Largest Hamming distance (of 64 bits) between perceptual hashes that
        counts as a near duplicate (common practice, no source). Negative
        turns the near search off.
    workers : int, default 1
        Processes for hashing (see `augplan.parallel.parallel_map`).

    Returns
    -------
    list of dict
        ``{"kind": "exact" | "near", "a": relpath, "b": relpath,
        "splits": [split_a, split_b], "distance": int}``; exact pairs first
        (distance 0), then near pairs, each sorted by ``(a, b)``. A near
        pair is never also an exact pair. Flat images (DCT coefficient
        spread below ``FLAT_SPREAD``) take part in the exact search only. A
        hash match is confirmed before it is reported: structural similarity
        (SSIM of the 64 x 64 luminance at least ``NEAR_DUPLICATE_SSIM``) and
        no local patch drawn differently (`local_difference` at most
        ``NEAR_DUPLICATE_LOCAL_DIFFERENCE``), which keeps distinct thin
        strokes on a plain background apart.

    References
    ----------
    .. [1] C. Zauner, "Implementation and Benchmarking of Perceptual Image
       Hash Functions", master's thesis, Upper Austria University of Applied
       Sciences, 2010.
    .. [2] Z. Wang, A. C. Bovik, H. R. Sheikh and E. P. Simoncelli, "Image
       quality assessment: from error visibility to structural similarity",
       IEEE Trans. Image Processing 13(4), 600-612, 2004.

    Raises
    ------
    BadInputError
        An image cannot be decoded (names the file).
    """
    records = sorted(dataset.records, key=lambda r: (_SPLIT_ORDER[r.split], r.relpath))
    exact = _exact_duplicates(records)
    near = _near_duplicates(records, near_threshold, workers) if near_threshold >= 0 and len(records) > 1 else []
    exact.sort(key=lambda d: (d["a"], d["b"]))
    near.sort(key=lambda d: (d["a"], d["b"]))
    return exact + near


def _near_duplicates(records, near_threshold, workers):
    """Confirmed near-copy pairs across splits among ``records`` (sorted by split, then path)."""
    from augplan.parallel import parallel_map

    results = parallel_map(_hash_file, [r.path for r in records], workers=workers, desc="hashing images")
    hashes = np.array([h for h, _, _ in results], dtype=np.uint64)
    textured = np.array([spread >= FLAT_SPREAD for _, spread, _ in results])
    thumbnails = np.stack([grey for _, _, grey in results])
    splits = np.array([_SPLIT_ORDER[r.split] for r in records])
    chunk = 256  # bounds the distance matrix to chunk x N at a time
    views = {}  # 20 kB per image that takes part in a candidate pair
    near = []
    for start in range(0, len(records), chunk):
        stop = min(start + chunk, len(records))
        # Only textured images of a later split can pair with this chunk:
        # comparing with those alone keeps train x train pairs out.
        later = np.flatnonzero(textured & (splits > splits[start:stop].min()))
        distances = hamming_matrix(hashes[start:stop], hashes[later])
        rows, cols = np.nonzero((distances <= near_threshold)
                                & (splits[start:stop, None] < splits[later][None, :])
                                & textured[start:stop, None])
        distances = distances[rows, cols]
        cols = later[cols]
        correlation = np.einsum("ij,ij->i", thumbnails[start + rows], thumbnails[cols])
        keep = correlation >= NEAR_DUPLICATE_PREFILTER_CORRELATION
        for row, col, distance in zip(rows[keep].tolist(), cols[keep].tolist(), distances[keep].tolist()):
            first, second = records[start + row], records[col]
            if first.sha256 == second.sha256 or not _near_copies(first.path, second.path, views):
                continue
            near.append({"kind": "near", "a": first.relpath, "b": second.relpath,
                         "splits": [first.split, second.split], "distance": int(distance)})
    return near
