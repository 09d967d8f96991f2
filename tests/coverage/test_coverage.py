"""Tests for augplan.coverage.coverage: circular statistics, Wasserstein, Naeem metrics, the analysis."""

import json

import numpy as np
import pytest
import scipy.stats
from PIL import Image

from augplan.coverage import coverage
from augplan.imaging.colour import encode_linear_to_uint8
from augplan.data import open_dataset
from augplan.measure.factors import FACTORS
from augplan.measure.shortcuts import ALL_FACTORS
from augplan.recipe.parse import parse_recipe


# ------------------------------------------------------------ circular maths


@pytest.mark.parametrize("period", [360.0, 180.0], ids=["period-360", "period-180"])
def test_circular_mean_matches_scipy_circmean(period):
    rng = np.random.default_rng(1)
    values = (rng.normal(0.9 * period, 0.1 * period, 50)) % period  # straddles the wrap
    expected = scipy.stats.circmean(values, high=period, low=0.0)
    assert coverage.circular_mean(values, period) == pytest.approx(expected, abs=1e-9)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_linear_wasserstein_is_scipy(seed):
    rng = np.random.default_rng(seed)
    u, v = rng.normal(0, 1, 40), rng.normal(0.5, 2, 25)
    got = coverage.factor_wasserstein(u, v, FACTORS["brightness"])
    assert got == pytest.approx(scipy.stats.wasserstein_distance(u, v), rel=1e-12)


@pytest.mark.parametrize("offset", [100.0, 355.0], ids=["inside-arc", "across-zero"])
def test_circular_wasserstein_equals_linear_on_a_short_arc(offset):
    # Rabin, Delon & Gousseau 2011: on an arc shorter than half the circle the
    # circular transport cost is the linear one (scipy.stats.wasserstein_distance).
    rng = np.random.default_rng(7)
    u, v = rng.uniform(0, 20, 30), rng.uniform(10, 40, 17)
    expected = scipy.stats.wasserstein_distance(u, v)
    got = coverage.circular_wasserstein((u + offset) % 360, (v + offset) % 360, 360.0)
    assert got == pytest.approx(expected, rel=1e-9)


def test_circular_wasserstein_takes_the_short_way_round():
    # Two point masses at 350 and 10 degrees are 20 degrees apart, not 340.
    assert coverage.circular_wasserstein([350.0], [10.0], 360.0) == pytest.approx(20.0)
    assert coverage.circular_wasserstein([5.0], [175.0], 180.0) == pytest.approx(10.0)


# --------------------------------------------------------- Naeem et al. 2020


def _naeem_brute_force(real, fake, k):
    # Naeem et al. 2020, eqs. (3)-(4), written loop by loop.
    radii = []
    for i in range(len(real)):
        distances = sorted(np.linalg.norm(real[i] - real[j]) for j in range(len(real)) if j != i)
        radii.append(distances[k - 1])
    density_count, covered = 0, 0
    for i in range(len(real)):
        hit = False
        for j in range(len(fake)):
            if np.linalg.norm(fake[j] - real[i]) < radii[i]:
                density_count += 1
                hit = True
        covered += hit
    return density_count / (k * len(fake)), covered / len(real)


@pytest.mark.parametrize("shift", [0.0, 0.7, 2.0], ids=["overlap", "shifted", "far"])
def test_naeem_matches_brute_force(shift):
    rng = np.random.default_rng(11)
    real, fake = rng.normal(size=(30, 3)), rng.normal(shift, 1.0, size=(25, 3))
    expected = _naeem_brute_force(real, fake, 5)
    assert coverage.naeem_density_coverage(real, fake, k=5) == pytest.approx(expected)


def test_naeem_identical_samples_cover_and_disjoint_do_not():
    rng = np.random.default_rng(4)
    points = rng.normal(size=(200, 4))
    density, cover = coverage.naeem_density_coverage(points, points.copy())
    assert cover == 1.0 and density == pytest.approx(1.0, abs=0.05)
    same_law = rng.normal(size=(200, 4))
    assert coverage.naeem_density_coverage(points, same_law)[1] > 0.9
    assert coverage.naeem_density_coverage(points, points + 50.0) == (0.0, 0.0)


# ---------------------------------------------- ground truth: a lighting shortcut

LIT, DIM = 0.25, 0.05  # linear-light background levels, a factor of 5 apart


def _tile(rng, label, level):
    # Class cue: stripe direction (horizontal or vertical); nuisance: lighting level.
    size = 40
    rows, cols = np.mgrid[0:size, 0:size]
    axis = rows if label == "horizontal" else cols
    pattern = np.sin(2 * np.pi * (axis / 8.0 + rng.uniform()))
    linear = level * (1.0 + 0.4 * pattern)
    tint = np.array([1.0, 0.95, 0.9])
    return encode_linear_to_uint8(linear[..., None] * tint)


def _write_split(root, split, per_class, level_of, rng):
    for label in ("horizontal", "vertical"):
        folder = root / split / label
        folder.mkdir(parents=True)
        for i in range(per_class):
            image = _tile(rng, label, level_of(label, rng))
            Image.fromarray(image).save(folder / f"{i:03d}.png")


@pytest.fixture(scope="module")
def lighting_shortcut(tmp_path_factory):
    root = tmp_path_factory.mktemp("shortcut")
    rng = np.random.default_rng(2024)

    def trained(label, rng):
        return (LIT if label == "horizontal" else DIM) * rng.uniform(0.9, 1.1)

    def mixed(label, rng):
        return LIT * np.exp(rng.uniform(np.log(DIM / LIT), 0.0))

    _write_split(root, "train", 24, trained, rng)
    _write_split(root, "val", 12, trained, rng)
    _write_split(root, "field", 16, mixed, rng)
    return open_dataset(root)


NO_AUGMENTATION = parse_recipe("name: none\ntransforms: []\n")
BREAK_LIGHTING = parse_recipe(
    "name: relight\n"
    "transforms:\n"
    "  - op: brightness\n    factor: [0.2, 1.0]\n    only: [horizontal]\n"
    "  - op: brightness\n    factor: [1.0, 5.0]\n    only: [vertical]\n"
)


@pytest.fixture(scope="module")
def reports(lighting_shortcut):
    return {
        "none": coverage.analyse_coverage(lighting_shortcut, NO_AUGMENTATION, size=32,
                                          rng=np.random.default_rng(0)),
        "relight": coverage.analyse_coverage(lighting_shortcut, BREAK_LIGHTING, size=32,
                                             rng=np.random.default_rng(0)),
    }


def _row(report, name):
    return next(r for r in report["shortcuts"] if r["factor"] == name)


def test_lighting_shortcut_is_flagged_and_shared_by_val(reports):
    row = _row(reports["none"], "brightness")
    assert row["original"] > 0.9 and row["flagged"] and row["persists"]
    assert row["val"] > 0.9 and row["chance"] == 0.5
    # Lighting is mixed in the labelled field sample: no shortcut there.
    assert row["field"] < 0.75
    assert "brightness" in reports["none"]["val_shares_shortcut"]
    assert any("validation score cannot reveal it" in m for m in reports["none"]["messages"])


def test_relighting_recipe_breaks_the_shortcut(reports):
    row = _row(reports["relight"], "brightness")
    assert row["flagged"] and not row["persists"]
    assert row["augmented"] < 0.7
    combined = _row(reports["relight"], ALL_FACTORS)
    assert combined["combined"] and not combined["flagged"]


def test_relighting_improves_field_coverage(reports):
    before = reports["relight"]["field_coverage"]
    assert before["coverage_after"] > before["coverage_before"]
    field = reports["relight"]["factors"]["brightness"]["field"]
    assert field["wasserstein_after"] < field["wasserstein_before"]
    assert field["coverage"] >= 0.9


def test_brightness_suggestion_spans_both_lighting_levels(reports):
    suggestion = next(s for s in reports["none"]["suggestions"] if s["factor"] == "brightness")
    assert suggestion["op"] == "brightness"
    low, high = suggestion["range"]
    # Class levels differ by about 5x, so the range must reach about 1/5 and 5.
    assert low <= 0.25 and high >= 4.0


def test_document_is_json_and_deterministic(reports, lighting_shortcut):
    text = json.dumps(reports["relight"], sort_keys=True, allow_nan=False)
    again = coverage.analyse_coverage(lighting_shortcut, BREAK_LIGHTING, size=32, rng=np.random.default_rng(0))
    assert json.dumps(again, sort_keys=True) == json.dumps(reports["relight"], sort_keys=True)
    assert set(json.loads(text)["factors"]) == set(FACTORS)


def test_the_analysis_returns_histograms_and_writes_no_figure(reports):
    assert "plots" not in reports["relight"]
    for name in FACTORS:
        factor = reports["relight"]["factors"][name]
        original, augmented = factor["original"]["histogram"], factor["augmented"]["histogram"]
        assert original["edges"] == augmented["edges"]  # shared bins, so the panels compare
        assert sum(original["counts"]) == factor["original"]["n"]


@pytest.fixture(scope="module")
def lighting_cue(tmp_path_factory):
    """Ground truth: lighting defines the class everywhere, the field included."""
    root = tmp_path_factory.mktemp("cue")
    rng = np.random.default_rng(7)

    def defining(label, rng):
        return (LIT if label == "horizontal" else DIM) * rng.uniform(0.9, 1.1)

    for split, per_class in (("train", 24), ("val", 12), ("field", 16)):
        _write_split(root, split, per_class, defining, rng)
    return open_dataset(root)


def test_a_factor_the_field_confirms_is_a_cue_not_a_shortcut(lighting_cue):
    report = coverage.analyse_coverage(lighting_cue, NO_AUGMENTATION, size=32, rng=np.random.default_rng(0))
    row = _row(report, "brightness")
    assert row["original"] > 0.9 and row["field"] > 0.9
    assert row["field_confirms"] and not row["flagged"] and not row["persists"]
    assert any("cue that defines the class" in message for message in report["messages"])


def test_demo_lighting_shortcut_is_shared_by_val_and_cleared_by_the_relighting_recipe(tmp_path):
    # The demo scenario (augplan/demo.py) is invented ground truth: cracked
    # tiles photographed dim in train and val, every class under wide lighting
    # in the labelled field sample.
    from augplan.demo import DEMO_RECIPE_DIR, make_demo_dataset
    from augplan.recipe.parse import read_recipe

    make_demo_dataset(tmp_path, n_train=16, n_val=8, n_field=10)
    dataset = open_dataset(tmp_path)
    cautious = coverage.analyse_coverage(dataset, read_recipe(DEMO_RECIPE_DIR / "cautious.yaml"),
                                         rng=np.random.default_rng(0))
    relit = coverage.analyse_coverage(dataset, read_recipe(DEMO_RECIPE_DIR / "light-and-pose.yaml"),
                                      rng=np.random.default_rng(0))
    row = _row(cautious, "brightness")
    assert row["flagged"] and row["class"] == "hairline-crack" and row["val_shares"] and row["persists"]
    assert "brightness" in cautious["val_shares_shortcut"]
    assert not _row(relit, "brightness")["persists"]
    assert relit["field_coverage"]["coverage_after"] > relit["field_coverage"]["coverage_before"]


# ------------------------------------------- grey images: hue has no value

def test_grey_images_report_hue_as_not_defined_in_text_json_and_report(tmp_path, run_cli):
    # scikit-learn's digits, written as grey RGB PNGs: no pixel has a hue
    # (HSV saturation 0), so hue is undefined for every image.
    import jsonschema

    from types import SimpleNamespace

    from augplan.render.coverage import coverage_section
    from augplan.results import CoverageResult, schema_path
    from conftest import TINY_RECIPE, write_digits_dataset

    data = write_digits_dataset(tmp_path / "DATA", {"train": 6, "val": 3}, size=16)
    recipe = tmp_path / "recipe.yaml"
    recipe.write_text(TINY_RECIPE, encoding="utf-8")
    text = run_cli("coverage", data, "--recipe", recipe, "--quiet")
    assert text.code in (0, 1), text.err
    hue_lines = [line for line in text.out.splitlines() if line.startswith("hue ")]
    assert len(hue_lines) == 2 and all("not defined for grey images" in line for line in hue_lines)

    result = run_cli("coverage", data, "--recipe", recipe, "--quiet", "--json")
    document = json.loads(result.out)
    schema = json.loads(schema_path("coverage").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(schema).validate(document)
    assert document["factors"]["hue"]["note"] == "not defined for grey images"
    hue_row = next(r for r in document["shortcuts"] if r["factor"] == "hue")
    assert hue_row["note"] == "not defined for grey images"
    assert hue_row["original"] is None and hue_row["val"] is None and not hue_row["flagged"]
    assert "note" not in document["factors"]["brightness"]

    # The report's coverage section of a recipe holding this result (the factor table and the audit).
    section = coverage_section(SimpleNamespace(name="tiny", coverage=CoverageResult.from_json(document)), 0, None)
    assert section.count("not defined for grey images") >= 2


# --------------------------------- suggestions within the reader's bounds

@pytest.mark.parametrize("name, op", [("brightness", "brightness"), ("contrast", "contrast")])
def test_a_suggestion_spanning_a_wide_gap_stays_inside_the_bounds_and_the_cap(name, op):
    # Invented ground truth: two classes whose medians differ 15-fold, wider
    # than the reader's bound of 10 allows for a ratio taken both ways.
    labels = np.repeat(["dim", "lit"], 20)
    values = {name: np.where(labels == "dim", 0.02, 0.3) * np.linspace(0.95, 1.05, 40)}
    suggestion, _ = coverage._suggestion(name, values, labels, None, True, False, None)
    low, high = suggestion["range"]
    # The recipe reader accepts the suggestion as it is written.
    recipe = parse_recipe(f"name: s\ntransforms:\n  - op: {op}\n    factor: [{low}, {high}]\n")
    assert recipe.transforms[0].params["factor"] == (low, high)
    from augplan.thresholds import PLAUSIBLE_FACTOR

    cap = PLAUSIBLE_FACTOR[op]
    assert 1.0 / cap <= low < 1.0 < high <= cap
    assert "capped at the plausible" in suggestion["reason"]


def test_suggestions_are_typed_rows_whose_json_keeps_its_keys(reports):
    from augplan.results import Suggestion

    suggestions = reports["none"]["suggestions"]
    assert suggestions and all(isinstance(s, Suggestion) for s in suggestions)
    brightness = next(s for s in suggestions if s.factor == "brightness")
    assert list(json.loads(json.dumps(brightness))) == ["factor", "op", "parameter", "range", "reason"]
    assert brightness.range == brightness["range"]


def test_each_images_draws_do_not_depend_on_how_the_images_are_chunked(lighting_shortcut, monkeypatch):
    # Keyed streams (augplan.seeding): an image's draws follow its position alone.
    def augmented():
        samples = coverage.measure_coverage_samples(lighting_shortcut, BREAK_LIGHTING, size=16,
                                                    rng=np.random.default_rng(4))
        return samples.augmented["brightness"]

    whole = augmented()
    monkeypatch.setattr(coverage, "_CHUNK", 5)
    np.testing.assert_array_equal(augmented(), whole)
    other = coverage.measure_coverage_samples(lighting_shortcut, BREAK_LIGHTING, size=16,
                                              rng=np.random.default_rng(5)).augmented["brightness"]
    assert not np.array_equal(other, whole)
