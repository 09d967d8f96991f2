"""Tests of the HTML report of ``augplan vet`` (augplan.report).

The page is parsed with the standard library's `html.parser` (an outside
HTML tokenizer, not ours) and every embedded image is decoded with `base64`
and opened with Pillow (outside references for RFC 2397 data URIs and the
PNG format).
"""

import base64
import copy
import io
from html.parser import HTMLParser

import pytest
from PIL import Image

from augplan.render import embed_png, render_report
from augplan.recipe.parse import parse_recipe
from augplan.vet.vetted_file import vet_transforms

HOSTILE = "<script>alert('x')</script>"


class _Page(HTMLParser):
    """Collects tags, attributes, text, tables and images of a page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags = []            # (tag, attrs dict) in document order
        self.text = []            # (position in self.tags, text)
        self.tables = []          # each: list of rows, each a list of cell texts
        self._cell = None
        self._in_style = False
        self.style = ""

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif tag == "style":
            self._in_style = True

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None and self.tables and self.tables[-1]:
            self.tables[-1][-1].append(" ".join("".join(self._cell).split()))
            self._cell = None
        elif tag == "style":
            self._in_style = False

    def handle_data(self, data):
        if self._in_style:
            self.style += data
            return
        self.text.append((len(self.tags), data))
        if self._cell is not None:
            self._cell.append(data)

    @property
    def all_text(self):
        return " ".join(" ".join(t for _, t in self.text).split())

    def table_with(self, heading):
        """The first table whose header row has a cell containing ``heading``."""
        for table in self.tables:
            if table and any(heading in cell for cell in table[0]):
                return table
        raise AssertionError(f"no table with a column {heading!r}; headers: {[t[0] for t in self.tables if t]}")


def _parse(page):
    parser = _Page()
    parser.feed(page)
    parser.close()
    return parser


def _png(path, size=(6, 4), colour=(200, 30, 30)):
    Image.new("RGB", size, colour).save(path, format="PNG")
    return str(path)


def _evidence(tmp_path, *, class_a="chip-left", class_b="chip-right", name="tiles-draft"):
    """A small evidence document of the shape `augplan.vet` builds (invented values)."""
    sheet = _png(tmp_path / "sheet.png")
    plot = _png(tmp_path / "brightness.png", size=(8, 5), colour=(20, 90, 200))
    check = {
        "recipe": name,
        "model": {"cv_accuracy": 0.97, "chance": 0.5, "weak": False},
        "transforms": [
            {"index": 0, "op": "flip", "params": {"axis": "horizontal"}, "verdict": "breaks",
             "change_rate": 0.81, "change_rate_ci": [0.74, 0.86], "leave_rate": 0.02,
             "leave_rate_ci": [0.0, 0.05], "n": 80,
             "swaps": [{"from": class_a, "to": class_b, "rate": 0.93, "moved": 37, "n": 40}],
             "classes": {class_a: {"verdict": "breaks", "change_rate": 0.93}},
             "magnitudes": [], "safe_limit": None,
             "suggestion": {"relabel": {class_a: class_b, class_b: class_a}}, "evidence_sheet": sheet},
            {"index": 1, "op": "rotate", "params": {"degrees": [-10.0, 10.0]}, "verdict": "safe",
             "change_rate": 0.03, "change_rate_ci": [0.01, 0.07], "swaps": [],
             "magnitudes": [{"value": 0.0, "verdict": "safe"}], "safe_limit": [-10.0, 10.0],
             "suggestion": None, "evidence_sheet": None},
        ],
        "warnings": ["classes with fewer than 20 training images give wide intervals"],
        "decision_rule": "A class breaks when the lower bound exceeds its baseline by 0.10.",
    }
    coverage = {
        "factors": {"brightness": {"unit": "mean relative luminance",
                                   "original": {"std": 0.05, "p05": 0.2, "p95": 0.4},
                                   "augmented": {"std": 0.11, "p05": 0.1, "p95": 0.6},
                                   "field": {"coverage": 0.93, "wasserstein_before": 0.12,
                                             "wasserstein_after": 0.03}}},
        "field_coverage": {"density_before": 0.41, "coverage_before": 0.55, "density_after": 0.83,
                           "coverage_after": 0.9, "k": 5},
        "shortcuts": [{"factor": "brightness", "original": 0.98, "augmented": 0.61, "val": 0.97,
                       "field": None, "chance": 0.5, "flagged": True, "persists": False}],
        "shortcut_rule": "Flagged when balanced accuracy reaches the threshold.",
        "messages": ["The validation split carries the same shortcut (brightness)."],
        "suggestions": [{"factor": "brightness", "op": "brightness", "parameter": "factor",
                         "range": [0.5, 1.6], "reason": "shortcut"}],
        "plots": [plot],
    }
    vetted_name = f"{name}-vetted"
    evaluation = {
        "baseline": {"accuracy": 0.91, "accuracy_ci": [0.89, 0.93]},
        "recipes": [
            {"name": name, "accuracy": 0.88, "accuracy_ci": [0.85, 0.9], "gain": -0.03,
             "gain_ci": [-0.05, -0.01], "p_value": 0.002, "p_holm": 0.004,
             "per_class_gain": {class_a: -0.1, class_b: 0.0}, "flagged": True, "confirm": None, "field": None},
            {"name": vetted_name, "accuracy": 0.93, "accuracy_ci": [0.9, 0.95], "gain": 0.02,
             "gain_ci": [0.005, 0.035], "p_value": 0.01, "p_holm": 0.02,
             "per_class_gain": {class_a: 0.05, class_b: 0.01}, "flagged": False, "confirm": None,
             "field": None},
        ],
        "scored_on": "val", "augmented_validation_images": 0, "repeats": 5,
        "warnings": ["an evaluation warning"], "confirm": None, "field": None,
        # The evaluator's order (augplan.evaluate.ranking); the report never re-sorts.
        "ranking": [vetted_name, name], "decided_on": "val",
    }
    return {
        "augplan_version": "0.1.0",
        "created": "2024-05-01T10:00:00+00:00",
        "verdict": f"augplan had to change {name} to make it label-safe.",
        "data": {"root": "/data/tiles", "fingerprint": "sha256:0123456789abcdef0123",
                 "classes": [class_a, class_b], "counts": {"train": 80, "val": 40, "test": 0, "field": 0},
                 "val_from_train": False, "split_seed": None,
                 "skipped": [["train/notes.txt", "not an image"]],
                 "leaks": [{"kind": "exact", "a": "train/a/1.png", "b": "val/a/9.png",
                            "splits": ["train", "val"], "distance": 0}]},
        "recipes": [{
            "name": name, "source": "recipes/tiles.yaml",
            "recipe": {"name": name, "transforms": [{"op": "flip", "axis": "horizontal", "probability": 0.5},
                                                    {"op": "rotate", "degrees": [-10.0, 10.0]}]},
            "recipe_hash": "abc123def4567890", "check": check, "coverage": coverage,
            "vetted": {"name": vetted_name, "recipe": {}, "unchanged": False, "recheck": None,
                       "changes": [{"index": 0, "op": "flip", "verdict": "breaks", "action": "relabel",
                                    "detail": f"label follows the image: {class_a} <-> {class_b}"},
                                   {"index": 1, "op": "rotate", "verdict": "safe", "action": "keep",
                                    "detail": ""}],
                       "score": evaluation["recipes"][1]},
        }],
        "evaluation": evaluation, "best": name,
        "cautions": ["A domain expert signs off on every recipe before it is used."],
        "seed": 0,
    }


# --------------------------------------------------------------------------
# self-contained page


def test_page_loads_nothing_from_outside(tmp_path):
    page = _parse(render_report(_evidence(tmp_path)))
    for tag, attrs in page.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed", "base"), tag
        for name, value in attrs.items():
            assert not name.startswith("on"), f"event handler {name} on <{tag}>"
            if name in ("href", "xlink:href"):
                assert value.startswith("#"), f"<{tag} {name}={value!r}> leaves the page"
            if name in ("src", "srcset", "poster", "data", "action", "formaction"):
                assert value.startswith("data:image/png;base64,"), f"<{tag} {name}> loads {value[:40]!r}"
    # The inline style sheet imports nothing and fetches no fonts or images.
    assert page.style
    assert "@import" not in page.style and "url(" not in page.style and "@font-face" not in page.style


def test_anchors_point_at_ids_on_the_page(tmp_path):
    page = _parse(render_report(_evidence(tmp_path)))
    ids = {attrs["id"] for _, attrs in page.tags if "id" in attrs}
    targets = [attrs["href"][1:] for tag, attrs in page.tags if tag == "a" and "href" in attrs]
    assert targets
    assert set(targets) <= ids


def test_every_image_is_a_png_data_uri_that_decodes(tmp_path):
    evidence = _evidence(tmp_path)
    page = _parse(render_report(evidence))
    images = [attrs for tag, attrs in page.tags if tag == "img"]
    # One evidence sheet (transform 0) and one factor plot.
    assert len(images) == 2
    sizes = set()
    for attrs in images:
        prefix = "data:image/png;base64,"
        assert attrs["src"].startswith(prefix)
        data = base64.b64decode(attrs["src"][len(prefix):], validate=True)
        with Image.open(io.BytesIO(data)) as image:  # Pillow, an outside PNG decoder
            assert image.format == "PNG"
            image.load()
            sizes.add(image.size)
        assert attrs.get("alt")
    assert sizes == {(6, 4), (8, 5)}


@pytest.mark.parametrize("content", [b"", b"GIF89a not a png", b"\xff\xd8\xff\xe0 jpeg bytes"],
                         ids=["empty", "gif-header", "jpeg-header"])
def test_a_file_that_is_not_a_png_is_never_embedded(tmp_path, content):
    path = tmp_path / "figure.png"
    path.write_bytes(content)
    assert embed_png(path) is None
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["check"]["transforms"][0]["evidence_sheet"] = str(path)
    page = _parse(render_report(evidence))
    assert len([1 for tag, _ in page.tags if tag == "img"]) == 1  # only the plot is left
    assert "Figure not available" in page.all_text


def test_missing_figure_is_named_not_fatal(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["coverage"]["plots"] = {"brightness": str(tmp_path / "gone.png")}
    page = _parse(render_report(evidence))
    assert "gone.png" in page.all_text


def test_relative_figure_paths_resolve_against_base_dir(tmp_path):
    (tmp_path / "figures").mkdir()
    _png(tmp_path / "figures" / "sheet.png", size=(3, 3))
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["check"]["transforms"][0]["evidence_sheet"] = "figures/sheet.png"
    evidence["recipes"][0]["coverage"]["plots"] = []
    without = _parse(render_report(evidence))
    with_base = _parse(render_report(evidence, base_dir=tmp_path))
    assert [t for t, _ in without.tags].count("img") == 0
    assert [t for t, _ in with_base.tags].count("img") == 1


# --------------------------------------------------------------------------
# content, in reading order


def test_verdict_comes_first_with_fingerprint_date_and_version(tmp_path):
    evidence = _evidence(tmp_path)
    page = _parse(render_report(evidence))
    body_start = next(i for i, (tag, _) in enumerate(page.tags) if tag == "body")
    first_table = next(i for i, (tag, _) in enumerate(page.tags) if tag == "table")
    verdict_tag = next(i for i, (tag, attrs) in enumerate(page.tags) if attrs.get("id") == "verdict")
    assert body_start < verdict_tag < first_table
    # The verdict paragraph holds exactly the verdict sentence.
    verdict_text = "".join(t for pos, t in page.text if pos == verdict_tag + 1)
    assert verdict_text == evidence["verdict"]
    text = page.all_text
    assert "0123456789ab" in text and "2024-05-01" in text and "0.1.0" in text
    # Cautions come before the first table too.
    cautions = next(i for i, (_, attrs) in enumerate(page.tags) if attrs.get("id") == "cautions")
    assert verdict_tag < cautions < first_table
    assert evidence["cautions"][0] in text


def test_transform_table_has_one_row_per_transform(tmp_path):
    page = _parse(render_report(_evidence(tmp_path)))
    table = page.table_with("safe limit")
    header, rows = table[0], table[1:]
    assert len(rows) == 2
    column = {name: header.index(name) for name in ("verdict", "confirmed swaps", "safe limit", "what vetting did")}
    assert "breaks" in rows[0][column["verdict"]] and "safe" in rows[1][column["verdict"]]
    assert rows[0][1].startswith("flip") and "axis=horizontal" in rows[0][1]
    # 0.81 with interval [0.74, 0.86] as percentages.
    moved = next(i for i, name in enumerate(header) if name.startswith("moved"))
    assert rows[0][moved] == "81% (74\u201386%)"
    assert "chip-left \u2192 chip-right 93%" in rows[0][column["confirmed swaps"]]
    # The count that moved, of the images checked: not the class size (issue: "120 images moved" for 36).
    assert "37 of 40 images moved" in rows[0][column["confirmed swaps"]]
    assert ", 40 images moved" not in rows[0][column["confirmed swaps"]]
    assert rows[1][column["safe limit"]] == "-10 to 10"
    assert rows[0][column["what vetting did"]].startswith("relabel")
    assert "keep" in rows[1][column["what vetting did"]]


def test_rule_warnings_shortcuts_and_field_coverage_are_shown(tmp_path):
    evidence = _evidence(tmp_path)
    text = _parse(render_report(evidence)).all_text
    assert evidence["recipes"][0]["check"]["decision_rule"] in text
    assert evidence["recipes"][0]["check"]["warnings"][0] in text
    assert evidence["recipes"][0]["coverage"]["messages"][0] in text
    page = _parse(render_report(evidence))
    shortcuts = page.table_with("chance")
    assert shortcuts[1][0] == "brightness" and "shortcut" in shortcuts[1][-1]
    field = page.table_with("measure")
    by_measure = {row[0]: row[1:] for row in field[1:]}
    assert by_measure["coverage"] == ["0.55", "0.9"] and by_measure["density"] == ["0.41", "0.83"]
    widening = page.table_with("spread widened")
    assert widening[1][3] == "\u00d72.20"  # 0.11 / 0.05


def test_leaderboard_baseline_first_then_in_the_evaluators_ranking(tmp_path):
    page = _parse(render_report(_evidence(tmp_path)))
    board = page.table_with("p (Holm)")
    header, rows = board[0], board[1:]
    assert "baseline" in rows[0][1]
    assert [row[1] for row in rows[1:]] == ["tiles-draft-vetted", "tiles-draft"]
    gain = header.index("validation gain, points [95% CI]")
    assert rows[1][gain] == "+2.0 [+0.5, +3.5]"
    assert rows[1][header.index("p (Holm)")] == "0.020"
    assert "recommended" in rows[1][-1] and "loses accuracy" in rows[2][-1]
    text = page.all_text
    assert "augmented validation images: 0" in text and "Scored on val" in text


def test_data_notes_list_skipped_files_and_leaks(tmp_path):
    page = _parse(render_report(_evidence(tmp_path)))
    assert page.table_with("reason")[1] == ["train/notes.txt", "not an image"]
    leaks = page.table_with("splits")
    assert leaks[1][:4] == ["exact", "train/a/1.png", "val/a/9.png", "train / val"]


def test_val_from_train_is_said(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["data"].update(val_from_train=True, split_seed=11)
    assert "stratified split of train/ (seed 11)" in _parse(render_report(evidence)).all_text


def test_hostile_names_are_escaped(tmp_path):
    evidence = _evidence(tmp_path, class_a=HOSTILE, name='x"><img src=http://evil/>')
    evidence["data"]["skipped"] = [[HOSTILE + ".png", HOSTILE]]
    page_text = render_report(evidence)
    page = _parse(page_text)
    assert [tag for tag, _ in page.tags].count("script") == 0
    assert all(attrs.get("src", "data:").startswith("data:") for _, attrs in page.tags)
    # The names come back as text, unchanged, after the parser unescapes them.
    assert HOSTILE in page.all_text
    assert 'x"><img src=http://evil/>' in page.all_text
    assert HOSTILE not in page_text


def test_same_document_gives_the_same_page(tmp_path):
    evidence = _evidence(tmp_path)
    assert render_report(evidence) == render_report(copy.deepcopy(evidence))


def test_print_and_narrow_screen_rules(tmp_path):
    page_text = render_report(_evidence(tmp_path))
    page = _parse(page_text)
    assert "@media print" in page.style and "max-width" in page.style
    assert "break-inside: avoid" in page.style
    # Every table sits in a wrapper that scrolls sideways on a narrow screen.
    for index, (tag, _) in enumerate(page.tags):
        if tag == "table":
            assert page.tags[index - 1] == ("div", {"class": "scroll"})
    viewport = [attrs for tag, attrs in page.tags if tag == "meta" and attrs.get("name") == "viewport"]
    assert viewport


# --------------------------------------------------------------------------
# robustness to missing optional keys

_OPTIONAL = [
    ("cautions",), ("best",), ("seed",), ("created",), ("augplan_version",), ("data",),
    ("data", "leaks"), ("data", "skipped"), ("data", "counts"), ("data", "fingerprint"),
    ("evaluation",), ("evaluation", "baseline"), ("evaluation", "confirm"), ("evaluation", "warnings"),
    ("recipes",), ("recipes", 0, "check"), ("recipes", 0, "coverage"), ("recipes", 0, "vetted"),
    ("recipes", 0, "recipe"), ("recipes", 0, "check", "model"), ("recipes", 0, "check", "decision_rule"),
    ("recipes", 0, "coverage", "plots"), ("recipes", 0, "coverage", "field_coverage"),
    ("recipes", 0, "coverage", "factors"), ("recipes", 0, "coverage", "shortcuts"),
    ("recipes", 0, "vetted", "score"), ("recipes", 0, "vetted", "changes"),
]
_TRANSFORM_KEYS = ["change_rate_ci", "swaps", "safe_limit", "suggestion", "evidence_sheet", "verdict",
                   "params", "index", "magnitudes", "leave_rate"]
_ROW_KEYS = ["accuracy_ci", "gain", "gain_ci", "p_value", "p_holm", "per_class_gain", "flagged", "name"]


@pytest.mark.parametrize("path", _OPTIONAL, ids=["/".join(map(str, p)) for p in _OPTIONAL])
def test_missing_optional_key_does_not_crash(tmp_path, path):
    evidence = _evidence(tmp_path)
    holder = evidence
    for key in path[:-1]:
        holder = holder[key]
    del holder[path[-1]]
    page = _parse(render_report(evidence))
    assert evidence["verdict"] in page.all_text


@pytest.mark.parametrize("key", _TRANSFORM_KEYS)
def test_missing_transform_field_does_not_crash(tmp_path, key):
    evidence = _evidence(tmp_path)
    for transform in evidence["recipes"][0]["check"]["transforms"]:
        transform.pop(key, None)
    page = _parse(render_report(evidence))
    assert len(page.table_with("safe limit")) == 3


@pytest.mark.parametrize("key", _ROW_KEYS)
def test_missing_leaderboard_field_does_not_crash(tmp_path, key):
    evidence = _evidence(tmp_path)
    for row in evidence["evaluation"]["recipes"]:
        row.pop(key, None)
    page = _parse(render_report(evidence))
    assert len(page.table_with("p (Holm)")) == 4


@pytest.mark.parametrize("evidence", [{}, {"verdict": "only a verdict"}, {"recipes": [{}], "evaluation": {}},
                                      {"recipes": None, "data": None, "cautions": None}],
                         ids=["empty", "verdict-only", "empty-entries", "nulls"])
def test_bare_documents_render(evidence):
    page = _parse(render_report(evidence))
    assert any(tag == "body" for tag, _ in page.tags)
    if evidence.get("verdict"):
        assert evidence["verdict"] in page.all_text


def test_null_and_non_finite_numbers_print_as_dashes(tmp_path):
    evidence = _evidence(tmp_path)
    row = evidence["evaluation"]["recipes"][0]
    row.update(gain=float("nan"), gain_ci=[None, None], p_value=float("inf"), p_holm=float("inf"),
               accuracy=None, accuracy_ci=None)
    board = _parse(render_report(evidence)).table_with("p (Holm)")
    drafted = next(r for r in board[1:] if r[1] == "tiles-draft")
    assert drafted[2] == drafted[3] == drafted[4] == "\u2013"


def test_a_document_that_is_not_a_dict_is_refused():
    with pytest.raises(TypeError, match="dict"):
        render_report([("verdict", "x")])


def test_a_long_leak_list_is_summarised(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["data"]["leaks"] = [{"kind": "near", "a": f"train/a/{i}.png", "b": f"val/a/{i}.png",
                                  "splits": ["train", "val"], "distance": 4} for i in range(60)]
    page = _parse(render_report(evidence))
    assert len(page.table_with("splits")) == 1 + 25
    assert "60 near pairs across train / val" in page.all_text
    assert "first 25 of 60 pairs" in page.all_text


# --------------------------------------------------------------------------
# summary first: recommendation, changes, sign-off, cautions; then the detail


def _with_summary_data(tmp_path):
    evidence = _evidence(tmp_path)
    entry = evidence["recipes"][0]
    # The changes come from the real vetting policy, as vet writes them.
    recipe = parse_recipe("name: tiles-draft\ntransforms:\n  - op: flip\n    axis: horizontal\n"
                          "  - op: rotate\n    degrees: [-10, 10]\n  - op: hue\n    degrees: [-30, 30]\n")
    check = {"transforms": [
        {"index": 0, "op": "flip", "verdict": "breaks", "safe_limit": None,
         "suggestion": {"relabel": {"chip-left": "chip-right", "chip-right": "chip-left"}}},
        {"index": 1, "op": "rotate", "verdict": "safe", "safe_limit": [-10.0, 10.0]},
        {"index": 2, "op": "hue", "verdict": "breaks", "safe_limit": [-10.0, 10.0]}]}
    _, changes = vet_transforms(recipe, check)
    entry["vetted"]["changes"] = [change.to_json() for change in changes]
    entry["vetted"]["signoff"] = [{"index": 0, "op": "flip", "detail": "unverified, kept: approved"}]
    confusion = {"classes": ["chip-left", "chip-right"], "counts": [[9, 1], [3, 7]], "repeats": 5}
    evidence["evaluation"]["recipes"][1].update(
        confusion=confusion, per_class_recall={"chip-left": 0.9, "chip-right": 0.7},
        field={"n_images": 30, "accuracy": 0.8, "accuracy_ci": [0.6, 0.9], "gain": 0.1, "gain_ci": [0.02, 0.2]})
    evidence["evaluation"]["baseline"]["per_class_recall"] = {"chip-left": 0.8, "chip-right": 0.75}
    evidence["data"]["class_counts"] = {"chip-left": {"train": 40, "val": 20, "field": 15},
                                        "chip-right": {"train": 40, "val": 20, "field": 15}}
    return evidence


def _section_of(page, tag_id):
    start = next(i for i, (_, attrs) in enumerate(page.tags) if attrs.get("id") == tag_id)
    return start


def test_summary_holds_the_verdict_changes_sign_off_and_cautions_before_any_table(tmp_path):
    evidence = _with_summary_data(tmp_path)
    page = _parse(render_report(evidence))
    first_table = next(i for i, (tag, _) in enumerate(page.tags) if tag == "table")
    for tag_id in ("summary", "verdict", "signoff", "cautions"):
        assert _section_of(page, tag_id) < first_table
    text = page.all_text
    # A clipped transform shows its range (issue: it read "hue clipped" once ranges printed as "a to b").
    assert "tiles-draft \u2192 tiles-draft-vetted: flip relabelled; hue clipped to -10 to 10; 1 kept" in text
    assert "tiles-draft, transform 0 (flip)" in text and "unverified, kept: approved" in text
    assert "Evidence: the accuracy gain of the linear proxy, trained with each recipe, over the same model" in text
    assert "linear trained" not in text
    assert "the labelled field sample (30 images) and validation, 5 training repeats" in text


def test_sign_off_links_to_the_evidence_sheet_of_its_transform(tmp_path):
    page = _parse(render_report(_with_summary_data(tmp_path)))
    ids = {attrs["id"] for _, attrs in page.tags if "id" in attrs}
    links = [attrs["href"] for tag, attrs in page.tags if tag == "a" and "Sign" not in attrs.get("href", "")]
    assert "#evidence-0-0" in links and "evidence-0-0" in ids
    figure = next(i for i, (_, attrs) in enumerate(page.tags) if attrs.get("id") == "evidence-0-0")
    assert page.tags[figure][0] == "figure" and page.tags[figure + 1][0] == "img"


def test_no_sign_off_is_said_plainly(tmp_path):
    text = _parse(render_report(_evidence(tmp_path))).all_text
    assert "Sign-off needed None: every transform kept is verified safe" in text


def test_leaderboard_follows_the_recorded_ranking_and_shows_field_beside_validation(tmp_path):
    evidence = _with_summary_data(tmp_path)
    evidence["evaluation"]["ranking"] = ["tiles-draft", "tiles-draft-vetted"]  # not the order of the validation gain
    evidence["ranking_rule"] = "a stated rule."
    page = _parse(render_report(evidence))
    board = page.table_with("field gain, points [95% CI]")
    header, rows = board[0], board[1:]
    assert [row[1] for row in rows[1:]] == ["tiles-draft", "tiles-draft-vetted"]
    vetted = rows[2]
    assert vetted[header.index("validation gain, points [95% CI]")] == "+2.0 [+0.5, +3.5]"
    assert vetted[header.index("field gain, points [95% CI]")] == "+10.0 [+2.0, +20.0]"
    assert vetted[header.index("field accuracy [95% CI]")] == "80.0% [60.0%, 90.0%]"
    assert "Ordered by the rule that makes the recommendation: a stated rule." in page.all_text


def test_per_class_table_has_images_and_recall_under_baseline_and_recipe(tmp_path):
    page = _parse(render_report(_with_summary_data(tmp_path)))
    table = page.table_with("recall, no augmentation")
    assert table[0][5] == "recall, tiles-draft-vetted"
    assert table[1] == ["chip-left", "40", "20", "15", "80.0%", "90.0%", "+10.0"]
    assert table[2] == ["chip-right", "40", "20", "15", "75.0%", "70.0%", "-5.0"]


def test_confusion_matrix_of_the_recommended_recipe(tmp_path):
    page = _parse(render_report(_with_summary_data(tmp_path)))
    table = page.table_with("true \\ predicted")
    assert table == [["true \\ predicted", "chip-left", "chip-right"], ["chip-left", "9", "1"],
                     ["chip-right", "3", "7"]]
    assert "summed over 5 training repeats" in page.all_text


def test_each_recipe_collapses_and_the_rules_appear_once(tmp_path):
    evidence = _evidence(tmp_path)
    second = copy.deepcopy(evidence["recipes"][0])
    second["name"] = "second"
    evidence["recipes"].append(second)
    page_text = render_report(evidence)
    page = _parse(page_text)
    details = [attrs for tag, attrs in page.tags if tag == "details"]
    assert len(details) == 2 and all("open" not in attrs for attrs in details)
    rule = evidence["recipes"][0]["check"]["decision_rule"]
    assert page.all_text.count(rule) == 1
    assert page.all_text.count(evidence["recipes"][0]["coverage"]["shortcut_rule"]) == 1
    appendix = _section_of(page, "appendix")
    assert appendix > max(i for i, (tag, _) in enumerate(page.tags) if tag == "details")


def test_factor_histograms_are_one_figure_of_small_multiples(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["coverage"].pop("plots")
    block = {"histogram": {"edges": [0.0, 0.5, 1.0], "counts": [3, 1]}}
    evidence["recipes"][0]["coverage"]["factors"] = {
        name: {"unit": "u", "original": block, "augmented": block, "field": {"summary": block}}
        for name in ("brightness", "contrast", "hue")}
    page = _parse(render_report(evidence))
    grids = [attrs for tag, attrs in page.tags if tag == "img" and "nuisance factors" in attrs.get("alt", "")]
    assert len(grids) == 1
    data = base64.b64decode(grids[0]["src"].split(",", 1)[1])
    with Image.open(io.BytesIO(data)) as image:
        assert image.format == "PNG" and image.mode == "P"  # palette: line art needs no more


def test_the_shortcut_line_stands_beside_the_recommendation_on_the_first_screen(tmp_path):
    # Issue 26, item 5: "the validation split carries the same shortcut" was only inside a
    # collapsed section. The line comes from the evaluator's decision (augplan.evaluate.ranking).
    from augplan.evaluate.ranking import decide

    evidence = _with_summary_data(tmp_path)
    rows = [{**row, "n_transforms": 2} for row in evidence["evaluation"]["recipes"]]
    decision = decide(rows, val_shares_shortcut=["brightness"], n_field=30)
    evidence["evaluation"].update(decided_on=decision.decided_on, ranking=list(decision.ranking),
                                  val_shares_shortcut=["brightness"], decision_note=decision.note)
    page = _parse(render_report(evidence))
    first_table = next(i for i, (tag, _) in enumerate(page.tags) if tag == "table")
    first_details = next(i for i, (tag, _) in enumerate(page.tags) if tag == "details")
    line = _section_of(page, "decision")
    assert _section_of(page, "verdict") < line < min(first_table, first_details)
    assert "The validation split carries the same brightness shortcut" in page.all_text



def test_with_nothing_recommended_no_table_says_recommended(tmp_path):
    # Issue 26, item 7: one voice; the top-ranked recipe is named, never called recommended.
    evidence = _with_summary_data(tmp_path)
    evidence["best"] = None
    page = _parse(render_report(evidence))
    assert page.table_with("recall, no augmentation")[0][5] == "recall, tiles-draft-vetted"
    assert "recommended:" not in page.all_text
    assert all("recommended" not in row[-1] for row in page.table_with("p (Holm)")[1:])
    assert "the labelled field sample (30 images) and validation" in page.all_text
