"""Tests of the evidence examples as data (augplan/check/evidence.py).

Ground truth by construction: screen moves written so that the right
examples and title are known.
"""

import numpy as np

from augplan.check.evidence import _swap_examples, sheet_title
from augplan.check.regions import OUTSIDE
from augplan.recipe.parse import Transform


def test_evidence_sheet_shows_and_names_the_confirmed_swap_not_every_screen_move():
    classes = ("coat", "pullover", "tshirt")
    labels = np.array([0, 1, 1, 2])
    # Screen moves (source image, destination class, magnitude) at two magnitudes.
    groups = [[(0, 2, 1.0), (1, 2, 1.0), (3, OUTSIDE, 1.0)], [(2, 2, 2.0), (2, 0, 2.0)]]
    swaps = [{"from": "pullover", "to": "tshirt"}]
    assert _swap_examples(groups, swaps, labels, classes) == [[(1, 2, 1.0)], [(2, 2, 2.0)]]
    assert _swap_examples(groups, [], labels, classes) == groups
    # A confirmed swap the screen never saw: the sheet falls back to every move.
    assert _swap_examples(groups, [{"from": "coat", "to": "pullover"}], labels, classes) == groups
    flip = Transform("flip", {"axis": "horizontal"})
    assert sheet_title(2, flip, "breaks", swaps) == "transform 2 (flip): breaks; confirmed swap pullover -> tshirt"
    assert sheet_title(2, flip, "unverified", []) == "transform 2 (flip): unverified"



def test_items_carry_the_final_verdict_and_the_image_that_moved(tmp_path):
    # The rows are final when the examples are taken, so a sheet's heading says
    # what the row says (here the shortcut pass's "unverified", not "breaks").
    from augplan.check.plan import Plan
    from augplan.check.screen import Outcome
    from augplan.check.shortcut import ShortcutFinding
    from augplan.check.evidence import evidence_items
    from augplan.check.verdicts import transform_verdict
    from augplan.data import ImageRecord

    fields = {"index": 0, "op": "brightness", "params": {"factor": 0.35}, "change_rate": 0.8,
              "change_rate_ci": [0.7, 0.9], "leave_rate": 0.0, "leave_rate_ci": [0.0, 0.1], "n": 2,
              "magnitudes": [], "screen_swaps": [], "evidence_sheet": None, "verdict": "breaks",
              "decided_by": "confirmation", "swaps": [], "other_swaps": [], "classes": {}, "safe_limit": None,
              "suggestion": None}
    row = transform_verdict(fields, ShortcutFinding({"factor": "brightness", "class": "b"}, "note"))
    records = [ImageRecord(tmp_path / f"{i}.png", f"a/{i}.png", "a", "train", "") for i in range(2)]
    plan = Plan(np.array([0, 1]), np.array([0, 1]), [0.35], [[0.35]], [np.array([0, 0])])
    screen = {(0, 0): Outcome(np.array([1, 0]), [(0, 1, 0.35)], None, None, None)}
    items = evidence_items([row], screen, [plan], [Transform("brightness", {"factor": 0.35})],
                           (records, np.array([0, 0]), ("a", "b")), "reflect", np.random.default_rng(0))
    (item,) = items
    assert item.title == "transform 0 (brightness): unverified"
    assert (item.source, item.before, item.after, item.magnitude) == ("a/0.png", "a", "b", 0.35)
    assert item.record is records[0] and "record" not in item
    # A safe row has no examples.
    assert evidence_items([transform_verdict({**fields, "verdict": "safe"})], screen, [plan],
                          [Transform("brightness", {"factor": 0.35})], (records, np.array([0, 0]), ("a", "b")),
                          "reflect", np.random.default_rng(0)) == []
