"""Tests of the HTML report of ``augplan vet`` (augplan.render.page and the sections it assembles).

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
from render._evidence import document, png as _png, report, summary, swap, transform

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


def _evidence(tmp_path, **kwargs):
    return document(tmp_path, **kwargs)


# --------------------------------------------------------------------------
# self-contained page


def test_page_loads_nothing_from_outside(tmp_path):
    page = _parse(render_report(report(_evidence(tmp_path))))
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
    page = _parse(render_report(report(_evidence(tmp_path))))
    ids = {attrs["id"] for _, attrs in page.tags if "id" in attrs}
    targets = [attrs["href"][1:] for tag, attrs in page.tags if tag == "a" and "href" in attrs]
    assert targets
    assert set(targets) <= ids


def test_every_image_is_a_png_data_uri_that_decodes(tmp_path):
    evidence = _evidence(tmp_path)
    page = _parse(render_report(report(evidence)))
    images = [attrs for tag, attrs in page.tags if tag == "img"]
    # One evidence sheet (transform 0), the factors' histograms drawn by the report, and one factor plot file.
    assert len(images) == 3
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
    assert {(6, 4), (8, 5)} < sizes


@pytest.mark.parametrize("content", [b"", b"GIF89a not a png", b"\xff\xd8\xff\xe0 jpeg bytes"],
                         ids=["empty", "gif-header", "jpeg-header"])
def test_a_file_that_is_not_a_png_is_never_embedded(tmp_path, content):
    path = tmp_path / "figure.png"
    path.write_bytes(content)
    assert embed_png(path) is None
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["check"]["transforms"][0]["evidence_sheet"] = str(path)
    page = _parse(render_report(report(evidence)))
    assert len([1 for tag, _ in page.tags if tag == "img"]) == 2  # only the histograms and the plot are left
    assert "Figure not available" in page.all_text


def test_missing_figure_is_named_not_fatal(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["coverage"]["plots"] = [str(tmp_path / "gone.png")]
    page = _parse(render_report(report(evidence)))
    assert "gone.png" in page.all_text


def test_relative_figure_paths_resolve_against_base_dir(tmp_path):
    (tmp_path / "figures").mkdir()
    _png(tmp_path / "figures" / "sheet.png", size=(3, 3))
    evidence = _evidence(tmp_path)
    evidence["recipes"][0]["check"]["transforms"][0]["evidence_sheet"] = "figures/sheet.png"
    evidence["recipes"][0]["coverage"]["plots"] = []
    without = _parse(render_report(report(evidence)))
    with_base = _parse(render_report(report(evidence), base_dir=tmp_path))
    # The histograms are drawn into the page; the sheet is the one file read.
    assert [t for t, _ in without.tags].count("img") == 1
    assert [t for t, _ in with_base.tags].count("img") == 2


# --------------------------------------------------------------------------
# content, in reading order


def test_verdict_comes_first_with_fingerprint_date_and_version(tmp_path):
    evidence = _evidence(tmp_path)
    page = _parse(render_report(report(evidence)))
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
    page = _parse(render_report(report(_evidence(tmp_path))))
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
    text = _parse(render_report(report(evidence))).all_text
    assert evidence["recipes"][0]["check"]["decision_rule"] in text
    assert evidence["recipes"][0]["check"]["warnings"][0] in text
    assert evidence["recipes"][0]["coverage"]["messages"][0] in text
    page = _parse(render_report(report(evidence)))
    shortcuts = page.table_with("chance")
    assert shortcuts[1][0] == "brightness" and "shortcut" in shortcuts[1][-1]
    field = page.table_with("measure")
    by_measure = {row[0]: row[1:] for row in field[1:]}
    assert by_measure["coverage"] == ["0.55", "0.9"] and by_measure["density"] == ["0.41", "0.83"]
    widening = page.table_with("spread widened")
    assert widening[1][3] == "\u00d72.20"  # 0.11 / 0.05


def test_leaderboard_baseline_first_then_in_the_evaluators_ranking(tmp_path):
    page = _parse(render_report(report(_evidence(tmp_path))))
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
    page = _parse(render_report(report(_evidence(tmp_path))))
    assert page.table_with("reason")[1] == ["train/notes.txt", "not an image"]
    leaks = page.table_with("splits")
    assert leaks[1][:4] == ["exact", "train/a/1.png", "val/a/9.png", "train / val"]


def test_val_from_train_is_said(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["data"].update(val_from_train=True, split_seed=11)
    assert "stratified split of train/ (seed 11)" in _parse(render_report(report(evidence))).all_text


def test_hostile_names_are_escaped(tmp_path):
    evidence = _evidence(tmp_path, class_a=HOSTILE)
    # A recipe's name cannot hold these characters (parse_recipe refuses them); a document read back can.
    evidence["recipes"][0]["name"] = 'x"><img src=http://evil/>'
    evidence["data"]["skipped"] = [[HOSTILE + ".png", HOSTILE]]
    page_text = render_report(report(evidence))
    page = _parse(page_text)
    assert [tag for tag, _ in page.tags].count("script") == 0
    assert all(attrs.get("src", "data:").startswith("data:") for _, attrs in page.tags)
    # The names come back as text, unchanged, after the parser unescapes them.
    assert HOSTILE in page.all_text
    assert 'x"><img src=http://evil/>' in page.all_text
    assert HOSTILE not in page_text


def test_same_document_gives_the_same_page(tmp_path):
    evidence = _evidence(tmp_path)
    assert render_report(report(evidence)) == render_report(report(copy.deepcopy(evidence)))


def test_print_and_narrow_screen_rules(tmp_path):
    page_text = render_report(report(_evidence(tmp_path)))
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
# typed input only


def test_null_and_non_finite_numbers_print_as_dashes(tmp_path):
    evidence = _evidence(tmp_path)
    row = evidence["evaluation"]["recipes"][0]
    row.update(gain=float("nan"), gain_ci=[None, None], p_value=float("inf"), p_holm=float("inf"),
               accuracy=None, accuracy_ci=None)
    board = _parse(render_report(report(evidence))).table_with("p (Holm)")
    drafted = next(r for r in board[1:] if r[1] == "tiles-draft")
    assert drafted[2] == drafted[3] == drafted[4] == "\u2013"


@pytest.mark.parametrize("given", [[("verdict", "x")], {"verdict": "a plain dict"}], ids=["list", "plain-dict"])
def test_anything_but_a_typed_report_is_refused(given):
    # The report reads typed results only; a plain evidence.json is typed once, by VetReport.from_json.
    with pytest.raises(TypeError, match="VetReport"):
        render_report(given)


def test_a_long_leak_list_is_summarised(tmp_path):
    evidence = _evidence(tmp_path)
    evidence["data"]["leaks"] = [{"kind": "near", "a": f"train/a/{i}.png", "b": f"val/a/{i}.png",
                                  "splits": ["train", "val"], "distance": 4} for i in range(60)]
    page = _parse(render_report(report(evidence)))
    assert len(page.table_with("splits")) == 1 + 25
    assert "60 near pairs across train / val" in page.all_text
    assert "first 25 of 60 pairs" in page.all_text


# --------------------------------------------------------------------------
# summary first: recommendation, changes, sign-off, cautions; then the detail


CLIPPED_RECIPE = ("name: tiles-draft\ntransforms:\n  - op: flip\n    axis: horizontal\n"
                  "  - op: rotate\n    degrees: [-20, 20]\n  - op: hue\n    degrees: [-30, 30]\n")


def _clipped_transforms(tmp_path):
    """A check of CLIPPED_RECIPE: the flip breaks (relabel), the rotate breaks beyond about 6.67 degrees,
    the hue shift is unverified (a person approves it)."""
    return [
        transform(0, "flip", {"axis": "horizontal"}, "breaks", change_rate=0.81, change_rate_ci=(0.74, 0.86),
                  swaps=[swap("chip-left", "chip-right", 0.93, 37, 40)],
                  suggestion={"relabel": {"chip-left": "chip-right", "chip-right": "chip-left"}}),
        transform(1, "rotate", {"degrees": [-20.0, 20.0]}, "breaks", safe_limit=[-6.6667, 6.6667]),
        transform(2, "hue", {"degrees": [-30.0, 30.0]}, "unverified", sheet=_png(tmp_path / "hue-sheet.png")),
    ]


def _with_summary_data(tmp_path):
    # The changes and the sign-off come from the real vetting policy, as vet writes them.
    evidence = _evidence(tmp_path, recipe_text=CLIPPED_RECIPE, transforms=_clipped_transforms(tmp_path),
                         approve=(2,))
    confusion = {"classes": ["chip-left", "chip-right"], "counts": [[9, 1], [3, 7]], "repeats": 5}
    evidence["evaluation"]["recipes"][1].update(
        confusion=confusion, per_class_recall={"chip-left": 0.9, "chip-right": 0.7},
        field={"n_images": 30, "accuracy": 0.8, "accuracy_ci": [0.6, 0.9], "gain": 0.1, "gain_ci": [0.02, 0.2]})
    evidence["recipes"][0]["vetted"]["score"] = evidence["evaluation"]["recipes"][1]
    evidence["evaluation"]["baseline"]["per_class_recall"] = {"chip-left": 0.8, "chip-right": 0.75}
    evidence["data"]["class_counts"] = {"chip-left": {"train": 40, "val": 20, "field": 15},
                                        "chip-right": {"train": 40, "val": 20, "field": 15}}
    return evidence


def _section_of(page, tag_id):
    start = next(i for i, (_, attrs) in enumerate(page.tags) if attrs.get("id") == tag_id)
    return start


def test_summary_holds_the_verdict_changes_sign_off_and_cautions_before_any_table(tmp_path):
    evidence = _with_summary_data(tmp_path)
    page = _parse(render_report(report(evidence)))
    first_table = next(i for i, (tag, _) in enumerate(page.tags) if tag == "table")
    for tag_id in ("summary", "verdict", "signoff", "cautions"):
        assert _section_of(page, tag_id) < first_table
    text = page.all_text
    # A clipped transform shows its range (issue 27: it read "rotate clipped" once ranges printed as "a to b").
    assert "tiles-draft \u2192 tiles-draft-vetted: flip relabelled; rotate clipped to -6.67 to 6.67; 1 kept" in text
    assert "tiles-draft, transform 2 (hue)" in text and "unverified, kept: approved by a person" in text
    assert "Evidence: the accuracy gain of the linear proxy, trained with each recipe, over the same model" in text
    assert "linear trained" not in text
    assert "the labelled field sample (30 images) and validation (40 images), 5 training repeats" in text


def test_sign_off_links_to_the_evidence_sheet_of_its_transform(tmp_path):
    page = _parse(render_report(report(_with_summary_data(tmp_path))))
    ids = {attrs["id"] for _, attrs in page.tags if "id" in attrs}
    links = [attrs["href"] for tag, attrs in page.tags if tag == "a" and "Sign" not in attrs.get("href", "")]
    assert "#evidence-0-2" in links and "evidence-0-2" in ids
    figure = next(i for i, (_, attrs) in enumerate(page.tags) if attrs.get("id") == "evidence-0-2")
    assert page.tags[figure][0] == "figure" and page.tags[figure + 1][0] == "img"


def test_no_sign_off_is_said_plainly(tmp_path):
    text = _parse(render_report(report(_evidence(tmp_path)))).all_text
    assert "Sign-off needed None: every transform kept is verified safe" in text


def test_leaderboard_follows_the_recorded_ranking_and_shows_field_beside_validation(tmp_path):
    evidence = _with_summary_data(tmp_path)
    evidence["evaluation"]["ranking"] = ["tiles-draft", "tiles-draft-vetted"]  # not the order of the validation gain
    evidence["ranking_rule"] = "a stated rule."
    page = _parse(render_report(report(evidence)))
    board = page.table_with("field gain, points [95% CI]")
    header, rows = board[0], board[1:]
    assert [row[1] for row in rows[1:]] == ["tiles-draft", "tiles-draft-vetted"]
    vetted = rows[2]
    assert vetted[header.index("validation gain, points [95% CI]")] == "+2.0 [+0.5, +3.5]"
    assert vetted[header.index("field gain, points [95% CI]")] == "+10.0 [+2.0, +20.0]"
    assert vetted[header.index("field accuracy [95% CI]")] == "80.0% [60.0%, 90.0%]"
    assert "Ordered by the rule that makes the recommendation: a stated rule." in page.all_text


def test_per_class_table_has_images_and_recall_under_baseline_and_recipe(tmp_path):
    page = _parse(render_report(report(_with_summary_data(tmp_path))))
    table = page.table_with("recall, no augmentation")
    assert table[0][5] == "recall, tiles-draft-vetted"
    assert table[1] == ["chip-left", "40", "20", "15", "80.0%", "90.0%", "+10.0"]
    assert table[2] == ["chip-right", "40", "20", "15", "75.0%", "70.0%", "-5.0"]


def test_confusion_matrix_of_the_recommended_recipe(tmp_path):
    page = _parse(render_report(report(_with_summary_data(tmp_path))))
    table = page.table_with("true \\ predicted")
    assert table == [["true \\ predicted", "chip-left", "chip-right"], ["chip-left", "9", "1"],
                     ["chip-right", "3", "7"]]
    assert "summed over 5 training repeats" in page.all_text


def test_each_recipe_collapses_and_the_rules_appear_once(tmp_path):
    evidence = _evidence(tmp_path)
    second = copy.deepcopy(evidence["recipes"][0])
    second["name"] = "second"
    evidence["recipes"].append(second)
    page_text = render_report(report(evidence))
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
    block = summary(0.2, 0.6, 0.1)
    evidence["recipes"][0]["coverage"]["factors"] = {
        name: {"kind": "k", "unit": "u", "original": block, "augmented": block,
               "field": {"coverage": 1.0, "wasserstein_before": 0.0, "wasserstein_after": 0.0, "summary": block}}
        for name in ("brightness", "contrast", "hue")}
    page = _parse(render_report(report(evidence)))
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
    page = _parse(render_report(report(evidence)))
    first_table = next(i for i, (tag, _) in enumerate(page.tags) if tag == "table")
    first_details = next(i for i, (tag, _) in enumerate(page.tags) if tag == "details")
    line = _section_of(page, "decision")
    assert _section_of(page, "verdict") < line < min(first_table, first_details)
    assert "The validation split carries the same brightness shortcut" in page.all_text



def test_with_nothing_recommended_no_table_says_recommended(tmp_path):
    # Issue 26, item 7: one voice; the top-ranked recipe is named, never called recommended.
    evidence = _with_summary_data(tmp_path)
    evidence["best"] = evidence["evaluation"]["best"] = None
    page = _parse(render_report(report(evidence)))
    assert page.table_with("recall, no augmentation")[0][5] == "recall, tiles-draft-vetted"
    assert "recommended:" not in page.all_text
    assert all("recommended" not in row[-1] for row in page.table_with("p (Holm)")[1:])
    assert "the labelled field sample (30 images) and validation (40 images)" in page.all_text
