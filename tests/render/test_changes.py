"""What vetting changed, in the report's words (augplan.render.changes).

Every change here is made by the real vetting policy (`vet_transforms`) from a
recipe and a check of the shape ``check`` writes, never written by hand.
"""

import pytest

from augplan.recipe.parse import parse_recipe
from augplan.render import render_report
from augplan.render.changes import change_phrase, vetting_text
from augplan.results import VettingChange, range_text
from augplan.vet import vet_transforms
from render._evidence import document, report, transform

RECIPE = ("name: mixed\ntransforms:\n  - op: flip\n    axis: horizontal\n"
          "  - op: rotate\n    degrees: [-20, 20]\n  - op: hue\n    degrees: [-30, 30]\n"
          "  - op: brightness\n    factor: [0.5, 1.5]\n  - op: blur\n    sigma: [0, 1]\n")


def _check():
    return {"transforms": [
        transform(0, "flip", {"axis": "horizontal"}, "breaks", suggestion={"relabel": {"a": "b", "b": "a"}}),
        # Safe only within about 6.67 degrees: clipped (the limit rounds inward to 3 decimals).
        transform(1, "rotate", {"degrees": [-20.0, 20.0]}, "breaks", safe_limit=[-6.6667, 6.6667]),
        transform(2, "hue", {"degrees": [-30.0, 30.0]}, "breaks", suggestion={"only": ["a"]}),
        transform(3, "brightness", {"factor": [0.5, 1.5]}, "breaks"),
        transform(4, "blur", {"sigma": [0.0, 1.0]}, "safe"),
    ]}


@pytest.fixture(scope="module")
def changes():
    _, made = vet_transforms(parse_recipe(RECIPE), _check())
    return made


def test_each_action_is_worded_from_the_typed_change(changes):
    assert [change.action for change in changes] == ["relabel", "clip", "scope", "remove", "keep"]
    assert [change_phrase(change) for change in changes] == [
        "flip relabelled",
        "rotate clipped to -6.67 to 6.67",
        "hue scoped (applied only to a)",
        "brightness removed (breaks)",
        "blur kept",
    ]


def test_a_clip_reads_its_recorded_range_not_the_detail_text(changes):
    # Issue 27: the range was parsed back from the detail, looking for "[". The phrase reads clipped_to
    # through range_text, so it holds whatever the detail says.
    clip = changes[1]
    assert clip.clipped_to == [-6.666, 6.666]
    reworded = VettingChange(clip.index, clip.op, clip.verdict, clip.action, "", clipped_to=clip.clipped_to)
    assert change_phrase(reworded) == f"rotate clipped to {range_text(clip.clipped_to)}"


def test_the_table_cell_names_the_action_and_a_suggestion_it_did_not_apply(changes):
    assert vetting_text(changes[0], {"relabel": {"a": "b"}}).startswith("<strong>relabel</strong>: label follows")
    kept = vetting_text(changes[4], {"only": ["a"]})
    assert "<strong>keep</strong>" in kept and "checker suggests only [a]" in kept
    assert vetting_text(None, None) == "\u2013"


def test_the_page_says_rotate_clipped_with_its_range(tmp_path):
    evidence = document(tmp_path, class_a="a", class_b="b", name="mixed", recipe_text=RECIPE,
                        transforms=_check()["transforms"])
    page = render_report(report(evidence))
    assert "mixed-vetted: flip relabelled; rotate clipped to -6.67 to 6.67; hue scoped (applied only to a); " \
           "brightness removed (breaks); 1 kept" in page
