"""Tests of the verdict rows' suggestions (augplan/check/verdicts.py).

Ground truth by construction: confirmed swaps written so that the right
relabel or class scope is known.
"""

import pytest

from augplan.check.confirm import PairChange
from augplan.check.verdicts import suggestion as suggest
from augplan.recipe.parse import Transform
from augplan.thresholds import RELABEL_TYPICAL_SHARE


# --------------------------------------------------------------------------


def _passing(*pairs):
    return [PairChange(source, target, 40, 0.0, 0.6, 0.6, 0.4, 0.8, 24) for source, target in pairs]


@pytest.mark.parametrize("transform, pairs, relabel", [
    (Transform("flip", {"axis": "horizontal"}), [(0, 1), (1, 0)], {"a": "b", "b": "a"}),
    (Transform("rotate", {"degrees": 180}), [(0, 1), (1, 0)], {"a": "b", "b": "a"}),
    # A fixed hue turn does the same to every image: a relabel can undo it.
    (Transform("hue", {"degrees": 120}), [(0, 1), (1, 0)], {"a": "b", "b": "a"}),
    # A hue range also draws small turns that keep the label: never relabelled.
    (Transform("hue", {"degrees": (-150, 150)}), [(0, 1), (1, 0)], None),
    # A rotation range, zoom or shift only widens a class: never relabelled.
    (Transform("rotate", {"degrees": (-10, 10)}), [(0, 1), (1, 0)], None),
    (Transform("zoom", {"factor": (0.9, 1.1)}), [(0, 1), (1, 0)], None),
    # A one-way move is no swap: no relabel either.
    (Transform("flip", {"axis": "horizontal"}), [(0, 1)], None),
])
def test_relabel_only_for_two_way_swaps_of_ops_that_can_swap(transform, pairs, relabel):
    entries = {0: {"verdict": "breaks"}, 1: {"verdict": "breaks"}, 2: {"verdict": "safe"}}
    typical = {(a, b): 0.9 for a in range(3) for b in range(3)}
    suggestion = suggest(transform, [0, 1, 2], entries, _passing(*pairs), ("a", "b", "c"), typical)
    assert (suggestion or {}).get("relabel") == relabel


@pytest.mark.parametrize("typical, relabel, only", [
    ({(0, 1): 0.9, (1, 0): 0.9}, {"a": "b", "b": "a"}, ["a", "b", "c"]),
    # Typical one way only: a's mirror images look like b's, b's do not look
    # like a's, so the swap is no exchange of classes; both are scoped out.
    ({(0, 1): 0.9, (1, 0): RELABEL_TYPICAL_SHARE - 0.01}, None, ["c"]),
    ({(0, 1): 0.3, (1, 0): 0.3}, None, ["c"]),
    ({}, None, ["c"]),
])
def test_relabel_needs_typical_moves_in_both_directions(typical, relabel, only):
    entries = {0: {"verdict": "breaks"}, 1: {"verdict": "breaks"}, 2: {"verdict": "safe"}}
    suggestion = suggest(Transform("flip", {"axis": "horizontal"}), [0, 1, 2], entries,
                             _passing((0, 1), (1, 0)), ("a", "b", "c"), typical)
    assert suggestion.get("relabel") == relabel
    assert suggestion.get("only", ["a", "b", "c"]) == only



def test_swap_rows_read_in_the_transforms_direction_and_round_trip_their_json():
    # A rise of the confusion b -> a on originals: a's transformed images took b's look.
    import json

    from augplan.check.verdicts import swap_rows
    from augplan.results import Swap, TransformVerdict

    (row,) = swap_rows([PairChange(1, 0, 40, 0.05, 0.65, 0.6, 0.4, 0.8, 26)], ("a", "b"))
    assert isinstance(row, Swap) and (row["from"], row["to"], row["confusion"]) == ("a", "b", "b -> a")
    assert list(row)[:3] == ["from", "to", "confusion"] and "from_" not in row
    fields = {"index": 0, "op": "flip", "params": {"axis": "horizontal"}, "change_rate": 0.6,
              "change_rate_ci": [0.5, 0.7], "leave_rate": 0.0, "leave_rate_ci": [0.0, 0.1], "n": 40,
              "magnitudes": [], "screen_swaps": [], "evidence_sheet": None, "verdict": "breaks",
              "decided_by": "confirmation", "swaps": [row], "other_swaps": [], "classes": {}, "safe_limit": None,
              "suggestion": None}
    document = json.loads(json.dumps(TransformVerdict(**fields)))
    again = TransformVerdict.from_json(document)
    assert again == document and isinstance(again.swaps[0], Swap) and again.swaps[0].from_ == "a"
