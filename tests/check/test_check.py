"""Tests of the label-safety checker's entry point (augplan/check/check.py) on outside references.

Outside references: scikit-learn's bundled digits (UCI optical recognition of
handwritten digits, Alpaydin & Kaynak 1998), the committed Fashion-MNIST
subset (Xiao, Rasul & Vollgraf 2017; tests/reference/README.md), printed letters
from the fonts inside matplotlib's package (tests/printed_letters.py: the
glyph shapes are the type designers'), scikit-image's ``lfw_subset``
(Labeled Faces in the Wild), scikit-learn's NearestNeighbors as an
independent k-nearest-neighbour distance, scipy's Wilson interval and
percentile. Everything else is synthetic
ground truth drawn here, where the right verdict is known by construction.
"""

import json
from pathlib import Path

import numpy as np
import pytest
from PIL import Image, ImageDraw

from augplan.data import open_dataset
from augplan.errors import BadInputError
from augplan.check import DECISION_RULE, check_recipe
from augplan.check.confirm import TOO_FEW
from augplan.recipe.parse import Recipe, Transform
from augplan.recipe.shipped import read_start
from augplan.thresholds import PAIR_MARGIN, RELABEL_TYPICAL_SHARE, SWAP_WITNESS_MARGIN
from reference import FASHION_SUBSET
from printed_letters import PAIRED_CHARACTERS, PLAIN_CHARACTERS, write_letters_dataset


@pytest.fixture(scope="module", autouse=True)
def one_blas_thread():
    # The machine is shared: many BLAS threads per process thrash a small
    # number of cores and cost several times the CPU of one thread.
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        yield


def _save(image, path):
    path.parent.mkdir(parents=True, exist_ok=True)
    Image.fromarray(image).save(path)


def _add_val(root):
    # A val/ folder keeps every train/ image in train (no split stands in).
    for folder in sorted((root / "train").iterdir()):
        first = sorted(folder.iterdir())[0]
        target = root / "val" / folder.name / first.name
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(first.read_bytes())
    return root


# --------------------------------------------------------------------------
# data sets written in the DATA layout


@pytest.fixture(scope="module")
def digits_root(tmp_path_factory):
    """sklearn's digits (Alpaydin & Kaynak 1998) as 32x32 RGB PNGs, 60 per class."""
    from sklearn.datasets import load_digits

    digits = load_digits()
    root = tmp_path_factory.mktemp("digits")
    seen = {}
    for image, target in zip(digits.images, digits.target):
        count = seen.get(target, 0)
        if count >= 60:
            continue
        seen[target] = count + 1
        grey = Image.fromarray(np.round(image * 255 / 16).astype(np.uint8))
        grey = np.asarray(grey.resize((32, 32), Image.Resampling.BILINEAR))
        _save(np.repeat(grey[:, :, None], 3, axis=2), root / "train" / str(target) / f"{count:03d}.png")
    return _add_val(root)


# Simard, Steinkraus & Platt (ICDAR 2003) trained digit classifiers on small
# affine distortions as label-preserving; a half turn or a mirror does not
# keep a handwritten digit's class. The small distortions are the shipped
# starting recipe recipes/handwritten-characters.yaml, all of it.
HANDWRITING = read_start("handwritten-characters").transforms
DIGITS_RECIPE = Recipe(name="digits", fill=read_start("handwritten-characters").fill, transforms=(
    Transform("rotate", {"degrees": 180}),
    Transform("flip", {"axis": "horizontal"}),
    Transform("flip", {"axis": "vertical"}),
) + HANDWRITING)


@pytest.fixture(scope="module")
def digits_report(digits_root):
    return check_recipe(open_dataset(digits_root), DIGITS_RECIPE, size=32, rng=np.random.default_rng(0))


@pytest.fixture(scope="module")
def fashion_root(tmp_path_factory):
    """The committed Fashion-MNIST subset's training images (100 a class) as PNGs."""
    root = tmp_path_factory.mktemp("fashion")
    with np.load(FASHION_SUBSET) as subset:
        images, labels, names = subset["train_images"], subset["train_labels"], subset["class_names"]
    for i, (image, label) in enumerate(zip(images, labels)):
        folder = str(names[label]).replace("/", "-")
        _save(np.repeat(image[:, :, None], 3, axis=2), root / "train" / folder / f"{i:04d}.png")
    return _add_val(root)


# Label-preserving for garments (common practice, no source): the shipped
# starting recipe recipes/everyday-objects.yaml without its saturation step,
# which leaves the subset's grey images unchanged and so would test nothing.
FASHION_SAFE = tuple(step for step in read_start("everyday-objects").transforms if step.op != "saturation")


# An upside-down garment is at most unverified: no other garment class is
# produced (common practice, no source).
FASHION_UPSIDE_DOWN = (
    Transform("flip", {"axis": "vertical"}),
    Transform("rotate", {"degrees": 180}),
)


@pytest.fixture(scope="module")
def fashion_report(fashion_root):
    recipe = Recipe(name="fashion", transforms=FASHION_SAFE + FASHION_UPSIDE_DOWN)
    return check_recipe(open_dataset(fashion_root), recipe, size=28, rng=np.random.default_rng(0), workers=2)


def _arrow(draw, cx, cy, size, facing, colour):
    # A triangle with a stem: symmetric about its horizontal axis, so a
    # vertical flip keeps it and a horizontal flip mirrors its direction.
    s = facing * size
    draw.polygon([(cx + s, cy), (cx, cy - size * 0.8), (cx, cy + size * 0.8)], fill=colour)
    draw.rectangle([min(cx, cx - s), cy - size * 0.25, max(cx, cx - s), cy + size * 0.25], fill=colour)


SYNTHETIC_HUES = {"red": 0.0, "green": 1 / 3, "blue": 2 / 3}


@pytest.fixture(scope="module")
def synthetic_root(tmp_path_factory):
    """Mirror-image arrows, hue-coded discs and size-coded squares, 40 each."""
    import colorsys

    rng = np.random.default_rng(12)
    root = tmp_path_factory.mktemp("synthetic")
    for name in ["arrow-left", "arrow-right", *SYNTHETIC_HUES, "square-small", "square-large"]:
        for i in range(40):
            shade = int(rng.integers(200, 240))
            canvas = Image.new("RGB", (32, 32), (shade, shade, shade))
            draw = ImageDraw.Draw(canvas)
            cx, cy = 16 + rng.uniform(-3, 3), 16 + rng.uniform(-3, 3)
            ink = tuple(int(v) for v in rng.integers(20, 70, size=3))
            if name.startswith("arrow"):
                _arrow(draw, cx, cy, rng.uniform(7, 10), -1 if name == "arrow-left" else 1, ink)
            elif name in SYNTHETIC_HUES:
                h = (SYNTHETIC_HUES[name] + rng.uniform(-0.02, 0.02)) % 1.0
                rgb = colorsys.hsv_to_rgb(h, rng.uniform(0.7, 1.0), rng.uniform(0.7, 1.0))
                r = rng.uniform(7, 10)
                draw.ellipse([cx - r, cy - r, cx + r, cy + r], fill=tuple(int(255 * v) for v in rgb))
            else:
                half = rng.uniform(3, 4.5) if name == "square-small" else rng.uniform(7, 9)
                draw.rectangle([cx - half, cy - half, cx + half, cy + half], fill=ink)
            _save(np.asarray(canvas), root / "train" / name / f"{i:03d}.png")
    return _add_val(root)


MIRROR = {"arrow-left": "arrow-right", "arrow-right": "arrow-left"}
SYNTHETIC_RECIPE = Recipe(name="synthetic", transforms=(
    Transform("flip", {"axis": "horizontal"}),
    Transform("flip", {"axis": "vertical"}),
    Transform("flip", {"axis": "horizontal"}, only=tuple(MIRROR), relabel=MIRROR),
    Transform("hue", {"degrees": 120}, only=tuple(SYNTHETIC_HUES)),
    Transform("hue", {"degrees": (-5, 5)}),
    Transform("zoom", {"factor": 2.0}, only=("square-small", "square-large")),
))


@pytest.fixture(scope="module")
def synthetic_dataset(synthetic_root):
    return open_dataset(synthetic_root)


@pytest.fixture(scope="module")
def synthetic_report(synthetic_dataset, tmp_path_factory):
    evidence = tmp_path_factory.mktemp("evidence")
    # As `check --evidence` does: the check returns examples, the render layer draws them.
    from augplan.render.sheets import write_evidence_sheets

    result = check_recipe(synthetic_dataset, SYNTHETIC_RECIPE, size=32, rng=np.random.default_rng(0))
    assert all(row["evidence_sheet"] is None for row in result["transforms"])
    return result.with_evidence_sheets(write_evidence_sheets(result.evidence, evidence))


LETTERS = PAIRED_CHARACTERS + PLAIN_CHARACTERS


@pytest.fixture(scope="module")
def letters_root(tmp_path_factory):
    """Printed characters (tests/printed_letters.py), 24 a class from the DejaVu families."""
    return write_letters_dataset(tmp_path_factory.mktemp("letters"), LETTERS, per_font_train=2, per_font_val=1)


def _both_ways(*pairs):
    return {pair for a, b in pairs for pair in ((a, b), (b, a))}


# The mirror of a printed b is a d and of a p a q; half a turn takes b to q,
# d to p, n to u and 6 to 9 (the glyph shapes of the fonts, as type
# designers drew them). The other characters (a e k r t y 3 7) have no
# partner among these under either.
MIRROR_PARTNERS = _both_ways(("b", "d"), ("p", "q"))
TURN_PARTNERS = _both_ways(("b", "q"), ("d", "p"), ("n", "u"), ("6", "9"))
LETTERS_RECIPE = Recipe(name="letters", transforms=(
    Transform("flip", {"axis": "horizontal"}),
    Transform("rotate", {"degrees": 180}),
    # Small turns, zooms, shifts and exposure changes keep a printed
    # character (common practice, no source).
    Transform("rotate", {"degrees": (-10, 10)}),
    Transform("zoom", {"factor": (0.9, 1.1)}),
    # Shifts stay within 5%: the renderer already places a glyph up to 80%
    # of the side high and 8% off centre, so more would cut strokes off.
    Transform("shift", {"fraction": (-0.05, 0.05)}),
    Transform("brightness", {"factor": (0.8, 1.25)}),
))


@pytest.fixture(scope="module")
def letters_report(letters_root):
    return check_recipe(open_dataset(letters_root), LETTERS_RECIPE, size=32, rng=np.random.default_rng(0), workers=2)


# --------------------------------------------------------------------------
# building blocks



def _transform(report, index):
    entry = report["transforms"][index]
    assert entry["index"] == index
    return entry


def test_digits_half_turn_breaks_with_six_and_nine_among_top_swaps(digits_report):
    # sklearn digits (Alpaydin & Kaynak 1998): a 6 turned half a turn reads as a 9.
    entry = _transform(digits_report, 0)
    assert entry["verdict"] == "breaks" and entry["decided_by"] == "confirmation"
    top = {(s["from"], s["to"]) for s in entry["swaps"][:4]}
    assert ("6", "9") in top and ("9", "6") in top
    rates = [s["rate"] for s in entry["swaps"]]
    assert rates == sorted(rates, reverse=True)
    assert entry["safe_limit"] is None


@pytest.mark.parametrize("index", [1, 2])
def test_digits_flips_break(digits_report, index):
    # A mirrored 2, 3, 4, 7 is no digit of its class (sklearn digits); a
    # flipped 2 and 5 trade looks.
    entry = _transform(digits_report, index)
    assert entry["verdict"] == "breaks", (entry["classes"], entry["other_swaps"][:3])
    assert all(s["witnessed"] for s in entry["swaps"])


def test_digits_half_turn_offers_no_wrong_relabel(digits_report):
    # A handwritten 6 turned half a turn reads as a 9 but is no typical 9
    # (the loop sits low, the stroke bends the other way): a relabel may
    # only ever pair 6 with 9.
    entry = _transform(digits_report, 0)
    relabel = (entry["suggestion"] or {}).get("relabel") or {}
    assert set(relabel.items()) <= {("6", "9"), ("9", "6")}


@pytest.mark.parametrize("index", range(3, 3 + len(HANDWRITING)))
def test_digits_small_affine_distortions_are_safe(digits_report, index):
    # Simard, Steinkraus & Platt (ICDAR 2003): small rotations, shifts and
    # scalings keep a digit's class.
    entry = _transform(digits_report, index)
    assert entry["verdict"] == "safe", (entry["classes"], entry["other_swaps"][:3])
    assert entry["swaps"] == []
    assert entry["safe_limit"] == list(entry["params"].values())[0]
    assert digits_report["model"]["weak"] is False


def test_swaps_that_fail_the_rule_stay_apart(digits_report):
    entry = _transform(digits_report, 0)
    passing = {(s["from"], s["to"]) for s in entry["swaps"]}
    others = {(s["from"], s["to"]) for s in entry["other_swaps"]}
    assert passing and not passing & others
    # A pair is kept apart when it fails the rise rule or the screen never saw the move.
    assert all(s["rate"] <= PAIR_MARGIN or s["rate_ci"][0] <= 0 or s["rate"] <= s["base_rate"]
               or not s["witnessed"] for s in entry["other_swaps"])
    assert all(s["witnessed"] and s["rate"] > PAIR_MARGIN for s in entry["swaps"])
    # Every named swap is a real share of the screen's calls, never a few
    # images: its lower Wilson bound clears the margin, so the share does too.
    screen = {(s["from"], s["to"]): s for s in entry["screen_swaps"]}
    for swap in entry["swaps"]:
        assert screen[(swap["from"], swap["to"])]["rate"] > SWAP_WITNESS_MARGIN


# The shift of 8% sits on the checker's edge for Shirt -> Pullover on this
# subset: measured with the step checked alone, it breaks at 3 of 6 seeds
# (0-5) before the seeding convention and at 2 of 6 after; with the
# recipe's streams of this fixture it breaks (a known false alarm, open).
_FASHION_SHIFT = [i for i, step in enumerate(FASHION_SAFE) if step.op == "shift"]


@pytest.mark.parametrize("index", [
    pytest.param(i, marks=pytest.mark.xfail(reason="shift 8%: Shirt -> Pullover breaks at about half the seeds",
                                            strict=False)) if i in _FASHION_SHIFT else i
    for i in range(len(FASHION_SAFE))])
def test_fashion_garment_augmentations_are_safe(fashion_report, index):
    # Fashion-MNIST subset (Xiao, Rasul & Vollgraf 2017); these six are
    # label-preserving for clothing photographs (common practice, no source).
    entry = _transform(fashion_report, index)
    assert entry["verdict"] == "safe", (entry["classes"], entry["other_swaps"][:3])


@pytest.mark.parametrize("index", range(len(FASHION_SAFE), len(FASHION_SAFE) + len(FASHION_UPSIDE_DOWN)))
def test_fashion_upside_down_garments_do_not_break(fashion_report, index):
    # Fashion-MNIST subset: an upside-down dress is no trouser; practitioners
    # treat a vertical flip or half turn of a garment as at most unverified
    # (common practice, no source).
    entry = _transform(fashion_report, index)
    if entry["verdict"] == "breaks":
        # Measured with either first witness (README, "Stage 2"): both see a
        # look the data never showed and name the nearest class; nothing they
        # measure tells an upside-down dress from a mirrored handwritten 3.
        pytest.xfail("both witnesses name the nearest class of an unseen look: "
                     + ", ".join(f"{s['from']} -> {s['to']}" for s in entry["swaps"]))
    assert entry["verdict"] != "breaks", entry["swaps"]
    assert not (entry["suggestion"] or {}).get("relabel")


def test_fashion_baseline_is_out_of_fold(fashion_report):
    # In-sample predictions would put every class's baseline near zero moved;
    # out-of-fold ones carry the proxy's own confusion (shirts and tops).
    recalls = [row["cv_recall"] for row in fashion_report["baseline"].values()]
    assert min(recalls) < 0.9
    assert fashion_report["model"]["cv_accuracy"] == pytest.approx(np.mean(recalls), abs=1e-3)


def _named(entry):
    return {(s["from"], s["to"]) for s in entry["swaps"]}


@pytest.mark.parametrize("index, partners", [(0, MIRROR_PARTNERS), (1, TURN_PARTNERS)])
def test_letters_mirror_and_half_turn_break_their_true_partners(letters_report, index, partners):
    # Printed characters from the fonts inside matplotlib (train: DejaVu).
    entry = _transform(letters_report, index)
    assert entry["verdict"] == "breaks"
    assert partners <= _named(entry), sorted(partners - _named(entry))
    # A relabel writes labels for every draw: it never pairs other characters.
    relabel = (entry["suggestion"] or {}).get("relabel") or {}
    assert set(relabel.items()) <= partners, relabel


@pytest.mark.parametrize("index, partners", [(0, MIRROR_PARTNERS), (1, TURN_PARTNERS)])
def test_letters_mirror_and_half_turn_name_no_other_pair(letters_report, index, partners):
    entry = _transform(letters_report, index)
    others = sorted(_named(entry) - partners)
    if others:
        # Measured with either first witness at seed 0 (README, "Stage 2"):
        # a mirrored t is named a 3 and a mirrored 6 an a by both.
        pytest.xfail(f"both first witnesses confirm near misses: {others}")
    assert not others


@pytest.mark.parametrize("index", range(2, len(LETTERS_RECIPE.transforms)))
def test_letters_small_turns_zooms_shifts_and_exposure_are_safe(letters_report, index):
    entry = _transform(letters_report, index)
    assert entry["swaps"] == [] and entry["verdict"] != "breaks", entry["swaps"]
    if entry["verdict"] != "safe" and LETTERS_RECIPE.transforms[index].op in ("rotate", "shift"):
        # With 24 images a class one image moves a recall by 0.04, so the
        # equivalence bounds of the small turn and shift sit near the margin.
        # Measured with the two steps alone at seeds 0-5: the turn was
        # unverified at 1 of 6 seeds before the seeding convention and 2 of 6
        # after, the shift at 4 of 6 before and 1 of 6 after; never a swap.
        pytest.xfail(f"{LETTERS_RECIPE.transforms[index].op}: unverified, not safe, at this seed")
    assert entry["verdict"] == "safe", (entry["classes"], entry["other_swaps"][:3])


def test_lfw_faces_survive_a_horizontal_flip(tmp_path):
    # skimage.data.lfw_subset(): 100 faces then 100 non-face patches (Labeled
    # Faces in the Wild). A mirrored face is still a face (common practice,
    # no source).
    from skimage.data import lfw_subset

    images = lfw_subset()
    for i, image in enumerate(images):
        grey = np.round(image * 255).astype(np.uint8)
        name = "face" if i < 100 else "other"
        _save(np.repeat(grey[:, :, None], 3, axis=2), tmp_path / "train" / name / f"{i:03d}.png")
    recipe = Recipe(name="faces", transforms=(Transform("flip", {"axis": "horizontal"}),))
    report = check_recipe(open_dataset(_add_val(tmp_path)), recipe, size=32, rng=np.random.default_rng(0))
    assert report["transforms"][0]["classes"]["face"]["verdict"] == "safe"
    assert report["transforms"][0]["classes"]["face"]["n"] == 100


# Mild distortions that keep a handwritten digit's class (Simard, Steinkraus &
# Platt, ICDAR 2003): each run draws its own magnitudes, folds and copies.
CALIBRATION = Recipe(name="calibration", transforms=(
    Transform("rotate", {"degrees": (-5, 5)}),
    Transform("rotate", {"degrees": (-8, 8)}),
    Transform("shift", {"fraction": (-0.05, 0.05)}),
    Transform("zoom", {"factor": (0.95, 1.05)}),
    Transform("brightness", {"factor": (0.9, 1.1)}),
    Transform("contrast", {"factor": (0.9, 1.1)}),
    Transform("blur", {"sigma": (0, 0.5)}),
    Transform("rotate", {"degrees": (-3, 3)}),
    Transform("shift", {"fraction": (-0.03, 0.03)}),
    Transform("brightness", {"factor": (0.85, 1.15)}),
))


def test_label_preserving_draws_are_rarely_called_breaks(digits_root):
    # Calibration on sklearn's digits: over 20 runs (10 label-preserving
    # transforms x 2 seeds) at most 5% may be called "breaks".
    dataset = open_dataset(digits_root)
    verdicts = [entry["verdict"] for seed in (1, 2)
                for entry in check_recipe(dataset, CALIBRATION, size=16, sample=30, magnitudes=3,
                                          rng=np.random.default_rng(seed))["transforms"]]
    assert len(verdicts) == 20
    assert verdicts.count("breaks") <= 0.05 * len(verdicts), verdicts


# --------------------------------------------------------------------------
# synthetic ground truth


def test_mirror_classes_break_under_horizontal_flip(synthetic_report):
    entry = _transform(synthetic_report, 0)
    assert entry["verdict"] == "breaks"
    assert entry["classes"]["arrow-left"]["verdict"] == "breaks"
    assert entry["classes"]["red"]["verdict"] == "safe"
    pairs = {(s["from"], s["to"]) for s in entry["swaps"][:2]}
    assert pairs == {("arrow-left", "arrow-right"), ("arrow-right", "arrow-left")}
    assert entry["suggestion"]["relabel"] == MIRROR
    with Image.open(entry["evidence_sheet"]) as sheet:
        assert sheet.format == "PNG" and sheet.width > 64


def test_vertical_flip_of_horizontally_symmetric_shapes_is_safe(synthetic_report):
    entry = _transform(synthetic_report, 1)
    assert entry["verdict"] == "safe", entry["classes"]
    assert entry["suggestion"] is None and entry["evidence_sheet"] is None


def test_flip_with_relabel_is_safe(synthetic_report):
    entry = _transform(synthetic_report, 2)
    assert entry["verdict"] == "safe", entry["classes"]
    # The scope is respected: only the two arrow classes were checked.
    assert sorted(entry["classes"]) == ["arrow-left", "arrow-right"]


def test_hue_turn_of_a_third_breaks_hue_classes_in_a_cycle(synthetic_report):
    entry = _transform(synthetic_report, 3)
    assert entry["verdict"] == "breaks"
    flows = {(s["from"], s["to"]) for s in entry["swaps"] if s["rate"] > 0.5}
    # +120 degrees takes red to green, green to blue, blue to red.
    assert flows == {("red", "green"), ("green", "blue"), ("blue", "red")}
    # A relabel is offered only when most turned discs of every step are
    # typical of the next hue (lower Wilson bound); when one step falls
    # short the cycle is scoped out, never relabelled otherwise.
    typical = {(s["from"], s["to"]): s["typical_low"] for s in entry["screen_swaps"]}
    cycle = {"blue": "red", "green": "blue", "red": "green"}
    if all(typical[step] >= RELABEL_TYPICAL_SHARE for step in cycle.items()):
        assert entry["suggestion"]["relabel"] == cycle
    else:
        assert not (entry["suggestion"] or {}).get("relabel")


def test_small_hue_shift_is_safe(synthetic_report):
    entry = _transform(synthetic_report, 4)
    assert entry["verdict"] == "safe", entry["classes"]
    assert entry["safe_limit"] == [-5.0, 5.0]


def test_zoom_by_two_turns_small_into_large(synthetic_report):
    entry = _transform(synthetic_report, 5)
    assert entry["verdict"] == "breaks"
    assert entry["classes"]["square-small"]["verdict"] == "breaks"
    assert entry["swaps"][0]["from"] == "square-small" and entry["swaps"][0]["to"] == "square-large"


def test_classes_with_too_few_images_never_break(synthetic_dataset):
    # The hue turn breaks the hue classes at 40 images a class; at 5 a class
    # no class has the evidence for any verdict.
    recipe = Recipe(name="few", transforms=(SYNTHETIC_RECIPE.transforms[3],))
    entry = check_recipe(synthetic_dataset, recipe, size=32, sample=5, rng=np.random.default_rng(0))["transforms"][0]
    assert entry["verdict"] == "unverified" and entry["swaps"] == []
    assert {c["verdict"] for c in entry["classes"].values()} == {TOO_FEW}


def test_report_is_plain_json_with_the_contract_fields(synthetic_report):
    text = json.dumps(synthetic_report)
    assert json.loads(text) == synthetic_report
    assert synthetic_report["decision_rule"] == DECISION_RULE
    assert synthetic_report["n_images"] == 7 * 40
    assert {t["decided_by"] for t in synthetic_report["transforms"]} <= {"screen", "confirmation"}
    assert all(t["decided_by"] == "confirmation" for t in synthetic_report["transforms"]
               if t["verdict"] != "safe")  # only training can say breaks or leave it open
    entry = synthetic_report["transforms"][4]
    assert entry["params"] == {"degrees": [-5.0, 5.0]}
    low, high = entry["change_rate_ci"]
    assert low <= entry["change_rate"] <= high


def test_same_seed_same_report_for_any_worker_count(synthetic_dataset):
    recipe = Recipe(name="small", transforms=SYNTHETIC_RECIPE.transforms[3:5])
    one = check_recipe(synthetic_dataset, recipe, size=32, sample=12, rng=np.random.default_rng(3))
    again = check_recipe(synthetic_dataset, recipe, size=32, sample=12, rng=np.random.default_rng(3))
    two = check_recipe(synthetic_dataset, recipe, size=32, sample=12, rng=np.random.default_rng(3), workers=2)
    assert one == again == two
    # Byte for byte, the JSON and the evidence examples alike.
    assert json.dumps(one.to_json()) == json.dumps(two.to_json())
    assert [item.to_json() for item in one.evidence] == [item.to_json() for item in two.evidence]
    # A step's row does not depend on the steps after it (streams keyed by position).
    alone = check_recipe(synthetic_dataset, Recipe(name="small", transforms=recipe.transforms[:1]), size=32,
                         sample=12, rng=np.random.default_rng(3))
    assert alone["transforms"][0] == one["transforms"][0]
    assert one["n_images"] == 7 * 12


def test_a_seed_instead_of_a_generator_is_refused(synthetic_dataset):
    with pytest.raises(TypeError, match="numpy.random.Generator"):
        check_recipe(synthetic_dataset, SYNTHETIC_RECIPE, size=32, rng=0)


def test_too_few_images_is_bad_input(tmp_path):
    for name in ("a", "b"):
        for i in range(2):
            _save(np.full((8, 8, 3), 40 * i, np.uint8), tmp_path / "train" / name / f"{i}.png")
    recipe = Recipe(name="tiny", transforms=(Transform("flip", {"axis": "vertical"}),))
    with pytest.raises(BadInputError, match="at least two classes"):
        check_recipe(open_dataset(_add_val(tmp_path)), recipe, size=8, rng=np.random.default_rng(0))


def test_demo_draft_is_flagged_and_gentle_steps_pass():
    # The bundled demo scenario (augplan/demo.py) is synthetic ground truth:
    # mirror-image chevrons and glazes told apart only by hue.

    root = Path(__file__).resolve().parents[2] / "demo_images"
    if not (root / "train").is_dir():
        pytest.skip("demo_images/ is not in this checkout")
    recipe = Recipe(name="demo", transforms=(
        Transform("flip", {"axis": "horizontal"}),
        Transform("hue", {"degrees": (-150, 150)}),
        Transform("flip", {"axis": "vertical"}),
        Transform("contrast", {"factor": (0.9, 1.1)}),
        Transform("blur", {"sigma": (0, 0.6)}),
    ))
    report = check_recipe(open_dataset(root), recipe, rng=np.random.default_rng(0))
    flip, hue = report["transforms"][0], report["transforms"][1]
    assert flip["verdict"] == "breaks"
    assert {(s["from"], s["to"]) for s in flip["swaps"][:2]} == {
        ("chevron-left", "chevron-right"), ("chevron-right", "chevron-left")}
    assert hue["verdict"] == "breaks"
    assert {hue["swaps"][0]["from"], hue["swaps"][0]["to"]} == {"glaze-amber", "glaze-teal"}
    assert [entry["verdict"] for entry in report["transforms"][2:]] == ["safe"] * 3


