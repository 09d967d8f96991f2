"""Plain-text tables: every line fits an 80-column terminal."""

import pytest

from augplan.render.text import check_table, coverage_table, format_range, format_table, leaderboard_table
from augplan.results import CheckResult, CoverageResult, EvaluateResult
from render._evidence import check, coverage, evaluation, swap, transform

LONG = "a-rather-long-class-name"

def _check():
    swaps = [swap(LONG, LONG + "-2", 0.35, 31, 89)] * 3
    entry = transform(0, "brightness", {"factor": [0.3, 1.3]}, "unverified", change_rate=0.25,
                      change_rate_ci=(0.22, 0.28), swaps=swaps, safe_limit=[0.625, 1.3],
                      suggestion={"only": [LONG, LONG + "-3"]})
    return CheckResult.from_json({**check("tiles", [{**entry, "note": "a person must look"}]),
                                  "model": {"cv_accuracy": 0.97, "chance": 0.2, "weak": False, "folds": 5,
                                            "confirmation": "cnn", "side": 32}})


def _evaluation(**changes):
    document = evaluation("x", LONG, "a", "b")
    row = {**document["recipes"][1], "accuracy": 0.867, "accuracy_ci": [0.77, 0.93], "gain": -0.133,
           "gain_ci": [-0.207, -0.067], "p_holm": 3.8e-6, "verdict": "loses", "flagged": True,
           "field": {"n_images": 90, "accuracy": 0.57, "accuracy_ci": [0.46, 0.66], "gain": -0.13,
                     "gain_ci": [-0.22, -0.05], "p_value": 0.01}}
    document.update(model={"name": "cnn", "description": "a small network", "note": None}, recipes=[row],
                    ranking=[LONG], best=None,
                    baseline={"n_images": 75, "accuracy": 1.0, "accuracy_ci": [0.951, 1.0]},
                    field={"source": "field", "n_images": 90, "note": "labelled field sample",
                           "baseline": {"n_images": 90, "accuracy": 0.7, "accuracy_ci": [0.6, 0.78]}})
    for key, value in changes.items():
        if key == "row":
            document["recipes"] = [{**row, **value}]
        else:
            document[key] = value
    return EvaluateResult.from_json(document)


def _coverage():
    document = coverage("tiles", None)
    document.pop("plots")
    factor = document["factors"]["brightness"]
    factor["original"].update(std=0.101, p05=0.177, p95=0.501)
    factor["augmented"].update(std=0.128, p05=0.139, p95=0.517)
    factor["field"]["coverage"] = 1.0
    document["shortcuts"][0].update(original=0.44, augmented=0.24, val=0.44, field=0.14, chance=0.2)
    document["field_coverage"].update(coverage_before=0.89, coverage_after=0.96)
    return CoverageResult.from_json(document)


CHECK, EVALUATION, COVERAGE = _check(), _evaluation(), _coverage()


@pytest.mark.parametrize("text", [check_table(CHECK), leaderboard_table(EVALUATION),
                                  coverage_table(COVERAGE)], ids=["check", "leaderboard", "coverage"])
def test_table_lines_fit_80_columns(text):
    assert max(len(line) for line in text.splitlines()) <= 80


def test_leaderboard_flags_a_losing_recipe_and_shows_the_field():
    text = leaderboard_table(EVALUATION)
    assert "LOSES" in text and "labelled field sample (90 images" in text
    assert "a-rather-long-class-n\u2026" in text  # long names are cut, not the flags


def test_leaderboard_names_its_model_and_never_calls_a_proxy_loss_harm():
    linear = _evaluation(model={"name": "linear", "description": "proxy", "note": "biased"},
                         row={"flagged": False})
    text = leaderboard_table(linear)
    assert text.startswith("scored with the linear proxy on val")
    assert "no augmentation: accuracy 1.00 [0.95, 1.00]" in text
    assert "lower (proxy)" in text and "LOSES" not in text
    assert "best: none (no recipe clearly beat no augmentation, by the linear proxy)" in text
    assert leaderboard_table(EVALUATION).startswith("scored with the cnn model on val")


def test_cells_are_aligned_under_their_header():
    text = format_table(["a", "bb"], [["x", "y"], ["long", "z"]])
    header, rule, *rows = text.splitlines()
    assert header.index("bb") == rule.rindex(" ") + 1 == rows[1].index("z")


@pytest.mark.parametrize("value,expected", [([-15.0, 15.0], "-15 to 15"), ([1.0, 1.0], "1"),
                                            (None, "-"), ("horizontal", "horizontal")],
                         ids=["range", "fixed", "none", "text"])
def test_format_range(value, expected):
    assert format_range(value) == expected


def test_history_table_fits_and_marks_reused_results():
    from augplan.render.text import history_table

    rows = [{"date": "2026-12-01 22:33:10", "fingerprint": "053b80240e6f", "data": "/a/very/long/path" * 5,
             "recipes": ["cautious", "naive-draft"], "best_recipe": "cautious", "best_gain": 0.031,
             "seed": 0, "repeats": 2, "from_ledger": True}]
    text = history_table(rows)
    assert max(len(line) for line in text.splitlines()) <= 80
    assert "ledger" in text.splitlines()[-1] and "cautious" in text and "+3.1" in text  # a gain of 0.031 reads +3.1 points
    assert history_table([]) == "no evaluations in the ledger yet"


def test_one_safe_limit_reads_the_same_everywhere():
    # Table, HTML report and vetted-recipe note spell one limit one way.
    from augplan.render.safety import _limit_text
    from augplan.results import range_text
    from augplan.vet import vet_transforms
    from augplan.recipe.parse import parse_recipe

    limit = [-6.6667, 6.6667]
    recipe = parse_recipe("name: r\ntransforms:\n  - op: rotate\n    degrees: [-20, 20]\n")
    check = {"transforms": [{"index": 0, "op": "rotate", "verdict": "breaks", "safe_limit": limit}]}
    _, changes = vet_transforms(recipe, check)
    spelled = {format_range(limit), _limit_text({"safe_limit": limit}), changes[0]["detail"].split("limit ")[-1]}
    assert spelled == {range_text(limit)} == {"-6.67 to 6.67"}


@pytest.mark.parametrize("name, low, high, expected", [
    ("hue", -75.2, 163.0, "285 to 163 (through 0)"),
    ("hue", 220.0, 379.0, "220 to 19 (through 0)"),
    ("orientation", -55.9, 93.0, "124 to 93 (through 0)"),
    ("brightness", 0.2, 0.5, "0.2 to 0.5"),
], ids=["hue-negative", "hue-past-360", "orientation", "linear"])
def test_angle_ranges_print_on_their_circle(name, low, high, expected):
    from augplan.render.text import factor_range

    assert factor_range(name, low, high) == expected


@pytest.mark.parametrize("gain", [0.0, -0.015], ids=["zero", "negative"])
def test_history_never_calls_a_recipe_without_a_gain_best(gain):
    # Runs recorded before the best rule stored the largest gain, even below zero.
    from augplan.render.text import history_table

    row = {"date": "2026-12-01 22:33:10", "fingerprint": "053b80240e6f", "recipes": ["a", "b"],
           "best_recipe": "a", "best_gain": gain, "seed": 0, "repeats": 2, "from_ledger": False}
    last = history_table([row]).splitlines()[-1]
    assert "none gained" in last and " a " not in last


@pytest.mark.parametrize("value, interval, expected", [
    (0.291, (0.195, 0.386), "+29.1 [+19.5, +38.6]"),
    (-0.0104, (-0.026, 0.0056), "-1.0 [-2.6, +0.6]"),
    (0.0, None, "+0.0"),
    (None, None, "-"),
], ids=["gain", "loss", "no-interval", "missing"])
def test_gains_read_in_percentage_points_everywhere(value, interval, expected):
    # The example: +0.29 [+0.20, +0.39] as a fraction is +29.1 points.
    from augplan.render.text import format_points, leaderboard_table

    assert format_points(value, interval) == expected
    result = _evaluation(row={"name": "relight", "accuracy": 0.99, "gain": 0.291, "gain_ci": [0.195, 0.386],
                              "p_holm": 0.001, "verdict": "gains", "flagged": False, "field": None},
                         ranking=["relight"], field=None)
    table = leaderboard_table(result)
    assert "+29.1 [+19.5, +38.6]" in table and "points" in table
