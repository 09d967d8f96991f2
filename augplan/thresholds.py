"""Every named threshold behind a verdict, each with where it comes from.

One home for the numbers that turn measurements into words ("weak", "breaks",
"shortcut", "duplicate"), so the rule texts printed in reports are written from
the same constants the code compares against. A value without a published
source says "common practice, no source".
"""

__all__ = [
    "CHANCE_GAP_SHARE",
    "CONFIDENCE",
    "beyond_chance",
    "REGION_NEIGHBOURS",
    "REGION_REFERENCE_LIMIT",
    "REGION_PERCENTILE",
    "BREAK_MARGIN",
    "PCA_VARIANCE_KEPT",
    "MIN_IMAGES_PER_CLASS",
    "MIN_AUDIT_IMAGES",
    "SCREEN_MARGIN",
    "MIN_EVIDENCE",
    "PAIR_MARGIN",
    "EQUIVALENCE_MARGIN",
    "CONFIRM_CONFIDENCE",
    "TURN_DEGREES",
    "SWAP_WITNESS_MARGIN",
    "TYPICAL_PERCENTILE",
    "RELABEL_TYPICAL_SHARE",
    "ONE_VS_REST_THRESHOLD",
    "LINK_BROKEN_SHARE",
    "COVERAGE_NEIGHBOURS",
    "COVERAGE_FLOOR",
    "NEAR_DUPLICATE_BITS",
    "NEAR_DUPLICATE_SSIM",
    "NEAR_DUPLICATE_WINDOW",
    "NEAR_DUPLICATE_LOCAL_DIFFERENCE",
    "MANY_RECIPES_WARNING_LIMIT",
    "SATURATED_ACCURACY",
    "MAX_FOLDS",
]

# Confidence of every interval reported (Wilson, gain intervals): the usual 95 %
# (common practice, no source).
CONFIDENCE = 0.95

# A score counts as clearly above chance when it closes at least this share of
# the gap from chance to perfect: 0.75 for two balanced classes, 0.55 for ten
# (common practice, no source). Used by the feature model's "weak" check and by
# the shortcut audit's flag.
CHANCE_GAP_SHARE = 0.5

# Cross-validation folds: at most this many, fewer when the smallest class is
# smaller (common practice, no source; scikit-learn's default is also 5).
MAX_FOLDS = 5


def beyond_chance(chance, share=CHANCE_GAP_SHARE):
    """The score that closes ``share`` of the gap from ``chance`` to 1.

    Parameters
    ----------
    chance : float
        The score of guessing (for example 1 / n_classes, or the majority share).
    share : float, default `CHANCE_GAP_SHARE`

    Returns
    -------
    float
        ``chance + share * (1 - chance)``.
    """
    return chance + share * (1.0 - chance)


# --- label-safety check (augplan check)
# Neighbours averaged for the distance to a class (Cover & Hart's k-NN idea;
# the 5 is common practice, no source).
REGION_NEIGHBOURS = 5
# Most originals of one class that stand as the reference points of its
# region; a larger class is represented by a seeded draw of this many, so the
# screen's distance work grows linearly with the images, not with their
# square (a bound on work, common practice, no source: a 95th percentile of
# 5-neighbour distances is well estimated from a few hundred points).
REGION_REFERENCE_LIMIT = 300
# Percentile of held-out own-class distances that bounds a class's region
# (common practice, no source).
REGION_PERCENTILE = 95.0
# Excess over the held-out baseline that a rate's lower bound must pass
# (common practice, no source: a 10-point margin ignores small leaks).
BREAK_MARGIN = 0.10
# Share of feature variance the checker's PCA keeps (common practice, no source).
PCA_VARIANCE_KEPT = 0.95
# Fewest training images a class needs for the check's leave-one-out regions
# (common practice, no source).
MIN_IMAGES_PER_CLASS = 3
# Fewest training images a class needs for the shortcut audit: with two, each
# cross-validation fold fits on one image of the class, a score of noise
# (common practice, no source).
MIN_AUDIT_IMAGES = 3
# The screen clears a transform when the upper bounds of its moved and
# outside shares stay within this of the held-out originals' shares (common
# practice, no source).
SCREEN_MARGIN = 0.10
# Fewest images of a class for any verdict about it (common practice, no
# source: below ten one image moves a share by more than a margin).
MIN_EVIDENCE = 10
# Rise of one confusion A -> B on originals that counts as a label change
# (common practice, no source: ten points of one class is what a user notices
# in a confusion matrix).
PAIR_MARGIN = 0.10
# Safe: the upper bounds of every class's recall fall and every confusion rise
# stay below this (an equivalence margin; common practice, no source: a small
# linear proxy loses a few points to any widening it cannot represent).
EQUIVALENCE_MARGIN = 0.15
# Two-sided level of the confirmation's intervals: each bound a one-sided 95%
# bound, as in Schuirmann's two one-sided tests (J. Pharmacokinetics and
# Biopharmaceutics 15(6), 1987).
CONFIRM_CONFIDENCE = 0.90
# A rotation by a fixed angle at least this large is a turn, which may swap
# classes as a whole (common practice, no source).
TURN_DEGREES = 45.0
# The screen witnesses a swap A -> B when the lower Wilson 95% bound of the
# share of A's transformed images that the out-of-fold proxy calls B exceeds
# the share of A's held-out originals it calls B by more than this: a real
# share of the class, never one image (one image of 60 has a lower bound of
# 0.003; 24 images a class need 6 of them). Chosen here, no source; the same
# ten points as PAIR_MARGIN. Calibration (benchmarks/calibrate_swaps.py): the
# true partners' lower bounds are 0.55-0.86 on printed letters (mirror and
# half turn, three renderings) and 0.16 / 0.91 for a digit 9 -> 6 / 6 -> 9
# turned half a turn (scikit-learn digits, 60 a class, dark ink); the swaps
# one to three images had witnessed (lower bounds 0.003-0.03) no longer count.
SWAP_WITNESS_MARGIN = 0.10
# A transformed image of A is *typical* of B when its distance to B's
# originals (the check's region distance d_B) is at most this percentile of
# the same distance for B's own held-out originals, so 75% of B's own are
# typical by construction (common practice, no source: the upper quartile).
TYPICAL_PERCENTILE = 75.0
# A relabel A -> B is offered only when most of A's transformed images are
# typical of B, for every step of the swap (both directions of a pair): the
# lower Wilson 95% bound of the typical share at least this. "Most" is more
# than half; the bound, not the share, because a class of 24 images moves a
# share by 0.04 an image. Chosen here, no source. Calibration
# (benchmarks/calibrate_swaps.py, linear proxy features, the worse direction
# of each pair): pairs that are not each other's mirror or turn reach at most
# 0.47 on printed letters (a / e turned half a turn; 24 a class, three
# renderings), 0.00 for an upside-down dress / trouser (Fashion-MNIST subset)
# and a turned handwritten 6 / 9 (scikit-learn digits: no typical 9, so no
# relabel); true turn partners of printed letters reach 0.39-0.64, so a
# relabel is offered for 8 of their 12 pair-renderings and scoped out
# otherwise (never wrong, sometimes withheld), and mirror partners 0.31-0.47
# (never offered). Mirrored arrows pass (0.57;
# tests/test_invariance.py); a 120 degree hue turn of drawn discs falls
# short at one step (0.45), so its classes are scoped out.
RELABEL_TYPICAL_SHARE = 0.5

# --- shortcut audit (augplan coverage, augplan check)
# With more than two classes, a factor that tells one class from all the
# others this well is flagged even when the overall score is low; stricter
# than the two-class 0.75 because every class gets a try (common practice,
# no source).
ONE_VS_REST_THRESHOLD = 0.9
# A recipe "breaks the link" of a shortcut only when the upper end of the 95 %
# interval of the augmented score lies within this share of the gap from chance
# to perfect above chance (0.55 for two classes, 0.28 for five); a lower score
# that does not reach it only weakens the link (common practice, no source).
LINK_BROKEN_SHARE = 0.1

# --- coverage of a field sample (Naeem et al. 2020, "Reliable fidelity and
# diversity metrics for generative models", ICML; k = 5 is the paper's choice)
COVERAGE_NEIGHBOURS = 5
# Share of field images inside the augmented range below which coverage is
# reported as short (common practice, no source).
COVERAGE_FLOOR = 0.9
# Plausibility caps of the ranges `coverage` and `draft` suggest, on top of
# the recipe reader's bounds: a multiplicative factor at most this far from 1
# either way (the range [1/cap, cap]). Brightness multiplies linear light, so
# 4 is two photographic stops each way, about the exposure compensation a
# camera offers (recalled from memory, no source); contrast and saturation
# beyond 3x, and a zoom beyond 2x, turn an image into a caricature rather
# than a plausible photo (common practice, no source). A wider gap between
# classes than the cap is a shortcut no single recipe range should span.
PLAUSIBLE_FACTOR = {"brightness": 4.0, "contrast": 3.0, "saturation": 3.0, "zoom": 2.0}

# --- near duplicates (augplan.data)
# Hamming distance (of 64 bits) at or below which two perceptual hashes are
# called near duplicates. Common practice, no source; the tests check that a
# JPEG-recompressed, noised copy lands well below it and an unrelated sample
# image well above it.
NEAR_DUPLICATE_BITS = 6
# A perceptual-hash match is only a candidate: drawn or templated images
# (a conveyor of near-identical parts) share low-frequency structure, so a
# candidate pair is confirmed when the structural similarity (Wang et al.
# 2004) of their 64 x 64 relative luminance reaches this value (common
# practice, no source; a noised JPEG copy of skimage's camera scores 0.997,
# distinct drawn tiles of the demo at most 0.87).
NEAR_DUPLICATE_SSIM = 0.9
# SSIM alone passes distinct thin strokes on a plain background: the shared
# background fills most windows, so two different handwritten 1s score up to
# 0.95. A candidate must also show no patch drawn differently: after the
# best gain-and-offset match of grey codes, the residual averaged over every
# NEAR_DUPLICATE_WINDOW x NEAR_DUPLICATE_WINDOW window (of the 64 x 64 view:
# wider than the thin lines that re-encoding and resampling leave along
# edges, about one cell of an 8 x 8 digit) stays at most
# NEAR_DUPLICATE_LOCAL_DIFFERENCE of the image's own range (max - min).
# Chosen here, no source; measured on scikit-learn's digits (UCI optdigits,
# 8 x 8 upscaled to 8-64 px, nearest/bilinear/bicubic, both polarities):
# every distinct pair that passes the hash and SSIM scores at least 0.144,
# while copies re-encoded as JPEG quality 90, resized by 2-4 % or brightened
# by 5 % (gain or offset) score at most 0.085 for digits and 0.122 for
# scikit-image's sample images (a 64 px silhouette resized).
NEAR_DUPLICATE_WINDOW = 9
NEAR_DUPLICATE_LOCAL_DIFFERENCE = 0.13

# --- evaluation
# More recipes than this compared on validation alone draws a warning that
# choosing the best overfits validation (common practice, no source).
MANY_RECIPES_WARNING_LIMIT = 3

# --- vetting
# A validation accuracy without augmentation at or above this is called
# saturated in the verdict: little room is left for any recipe to show a gain
# (common practice, no source).
SATURATED_ACCURACY = 0.99
