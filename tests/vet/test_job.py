"""vet end to end on a small copy of the demo scenario (invented ground truth:
mirror-image chevrons, glazes told apart only by hue, a dim-light class)."""

import contextlib
import copy
import io
import json
import pickle
from html.parser import HTMLParser
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import yaml

import augplan
from augplan.cli import main
from augplan.demo import DEMO_RECIPE_DIR, make_demo_dataset
from augplan.results import schema_path


@pytest.fixture(scope="module")
def vetted(tmp_path_factory):
    root = tmp_path_factory.mktemp("vet")
    data = root / "data"
    make_demo_dataset(data, n_train=14, n_val=6, n_field=8)
    out = root / "out"
    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout):
        code = main(["vet", str(data), "--recipe", str(DEMO_RECIPE_DIR / "naive-draft.yaml"),
                     "-o", str(out), "--repeats", "2", "--quiet", "--ledger", str(root / "ledger.sqlite"),
                     "--json"])
    (root / "vet.json").write_text(stdout.getvalue())
    return code, out, data


def _vet_json(out):
    return json.loads((out.parent / "vet.json").read_text())


def _changes(out, name):
    evidence = json.loads((out / "evidence.json").read_text())
    entry = next(e for e in evidence["recipes"] if e["name"] == name)
    return {c["index"]: c for c in entry["vetted"]["changes"]}, entry


def test_vet_changes_the_naive_draft_and_exits_flagged(vetted):
    code, out, _ = vetted
    assert code == 1
    assert {p.name for p in out.iterdir()} >= {"report.html", "evidence.json", "vetted-recipe.yaml",
                                                "vetted-naive-draft.yaml"}


def test_breaking_flip_is_relabelled_and_hue_shift_cut_back(vetted):
    _, out, _ = vetted
    changes, entry = _changes(out, "naive-draft")
    assert changes[0]["op"] == "flip" and changes[0]["action"] == "relabel"
    assert changes[4]["op"] == "hue" and changes[4]["action"] in ("scope", "clip", "remove")
    steps = entry["vetted"]["recipe"]["transforms"]
    flip = next(step for step in steps if step["op"] == "flip")
    assert flip["relabel"] == {"chevron-left": "chevron-right", "chevron-right": "chevron-left"}
    for step in steps:
        if step["op"] == "hue":
            # The wide hue turn no longer reaches the glazes: cut back, or kept
            # only for classes whose label does not depend on hue.
            scoped_away = not {"glaze-amber", "glaze-teal"} & set(step.get("only") or ())
            assert max(abs(v) for v in np.atleast_1d(step["degrees"])) < 150 or (step.get("only") and scoped_away)


def test_safe_transforms_are_kept(vetted):
    _, out, _ = vetted
    changes, _ = _changes(out, "naive-draft")
    safe = [c for c in changes.values() if c["verdict"] == "safe"]
    # Kept, or at most clipped to the measured safe limit: never removed.
    assert safe and all(c["action"] in ("keep", "clip") for c in safe)


def test_checksum_verifies_and_one_edited_byte_fails(vetted, tmp_path, capsys):
    _, out, data = vetted
    assert main(["verify", str(out / "vetted-recipe.yaml"), "--data", str(data)]) == 0
    edited = tmp_path / "edited.yaml"
    text = (out / "vetted-recipe.yaml").read_bytes()
    position = text.index(b"copies: 4") + len("copies: ")
    edited.write_bytes(text[:position] + b"5" + text[position + 1:])
    assert main(["verify", str(edited)]) == 1
    assert "does NOT match" in capsys.readouterr().out


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.references = []

    def handle_starttag(self, tag, attrs):
        self.references += [value for name, value in attrs if name in ("src", "href")]


def test_report_is_self_contained_with_verdict_first(vetted):
    _, out, _ = vetted
    html = (out / "report.html").read_text()
    parser = _Links()
    parser.feed(html)  # html.parser of the standard library
    assert all(ref.startswith(("data:image/png;base64,", "data:image/jpeg;base64,", "#")) for ref in parser.references)
    verdict = json.loads((out / "evidence.json").read_text())["verdict"]
    assert verdict.split(";")[0] in html
    assert html.index(verdict.split(";")[0]) < html.index("<table")


def test_load_recipe_on_the_vetted_recipe(vetted):
    _, out, _ = vetted
    aug = augplan.load_recipe(out / "vetted-recipe.yaml")
    image = np.random.default_rng(0).integers(0, 256, (64, 64, 3), dtype=np.uint8)
    first = aug.apply(image, "chevron-left", np.random.default_rng(3))
    again = pickle.loads(pickle.dumps(aug)).apply(image, "chevron-left", np.random.default_rng(3))
    assert np.array_equal(first[0], again[0]) and first[1] == again[1]
    assert first[0].shape == image.shape and first[0].dtype == np.uint8
    labels = {aug.apply(image, "chevron-left", np.random.default_rng(s))[1] for s in range(40)}
    assert labels == {"chevron-left", "chevron-right"}  # the flip's relabel, applied with probability 0.5


def test_vetted_recipe_validates_against_the_shipped_schema(vetted):
    import jsonschema
    import yaml

    from augplan.recipe.parse import RECIPE_SCHEMA_PATH

    code, out, _ = vetted
    schema = json.loads(RECIPE_SCHEMA_PATH.read_text(encoding="utf-8"))
    document = yaml.safe_load((out / "vetted-recipe.yaml").read_text(encoding="utf-8"))
    assert {"checksum", "evidence"} <= set(document)
    errors = [e.message for e in jsonschema.Draft202012Validator(schema).iter_errors(document)]
    assert not errors, errors


def test_vet_json_carries_the_changes_and_the_signoff_list(vetted):
    _, out, _ = vetted
    summary = _vet_json(out)
    evidence = json.loads((out / "evidence.json").read_text())
    entry = evidence["recipes"][0]
    assert [c["recipe"] for c in summary["changes"]] == ["naive-draft"]
    assert summary["changes"][0]["transforms"] == entry["vetted"]["changes"]
    assert summary["changes"][0]["unchanged"] is False
    expected = [(c["index"], c["op"]) for c in entry["vetted"]["changes"]
                if c["verdict"] == "unverified" and c["action"] == "keep"]
    assert [(s["index"], s["op"]) for s in summary["signoff"]] == expected
    for item in summary["signoff"]:
        assert item["recipe"] == "naive-draft" and item["detail"]
        assert item["evidence_sheet"] is None or Path(item["evidence_sheet"]).is_file()


def test_vetted_file_carries_the_class_list_for_integer_labels(vetted):
    _, out, data = vetted
    aug = augplan.load_recipe(out / "vetted-recipe.yaml")
    classes = sorted(p.name for p in (data / "train").iterdir())
    assert list(aug.classes) == classes
    image = np.random.default_rng(0).integers(0, 256, (64, 64, 3), dtype=np.uint8)
    left = classes.index("chevron-left")
    labels = {aug.apply(image, left, np.random.default_rng(s))[1] for s in range(40)}
    assert labels == {left, classes.index("chevron-right")}  # the vetted relabel, on integer labels


def test_history_run_shows_the_vet_runs_scores(vetted, capsys):
    _, out, _ = vetted
    ledger = out.parent / "ledger.sqlite"
    assert main(["history", "--ledger", str(ledger)]) == 0
    listing = capsys.readouterr().out
    assert listing.splitlines()[0].split()[0] == "run"
    assert main(["history", "1", "--ledger", str(ledger), "--json"]) == 0
    document = json.loads(capsys.readouterr().out)
    schema = json.loads(schema_path("history").read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator(schema).validate(document)  # the same schema as the list's
    (run,) = document["evaluations"]
    names = [r["name"] for r in run["details"]["recipes"]]
    assert names == ["naive-draft", "naive-draft-vetted"] and run["run"] == 1
    assert main(["history", "1", "--ledger", str(ledger)]) == 0
    text = capsys.readouterr().out
    assert "naive-draft-vetted" in text and "no augmentation" in text
    assert main(["history", "99", "--ledger", str(ledger)]) == 2
    assert "no run 99" in capsys.readouterr().err


def test_vet_with_the_teams_model_names_it_everywhere(tiny_dataset, tiny_recipe, tmp_path, run_cli):
    out = tmp_path / "out"
    result = run_cli("vet", tiny_dataset, "--recipe", tiny_recipe, "-o", out, "--repeats", "1", "--sample", "3",
                     "--model", "team_training:fit_nearest_mean", "--quiet", "--json", "--ledger",
                     tmp_path / "ledger.sqlite")
    assert result.code in (0, 1), result.err
    summary = json.loads(result.out)
    assert summary["model"] == "team_training:fit_nearest_mean"
    evidence = json.loads((out / "evidence.json").read_text())
    assert evidence["evaluation"]["model"]["name"] == "team_training:fit_nearest_mean"
    assert "scored with the model team_training:fit_nearest_mean" in summary["verdict"]
    vetted = yaml.safe_load((out / "vetted-tiny.yaml").read_text(encoding="utf-8"))
    assert vetted["evidence"]["validation"]["scored_with"] == "team_training:fit_nearest_mean"
    assert "team_training:fit_nearest_mean" in (out / "report.html").read_text(encoding="utf-8")
    # vetted-recipe.yaml exists exactly when a recipe beat no augmentation.
    assert (out / "vetted-recipe.yaml").is_file() == (summary["best"] is not None)


def test_every_output_of_vet_says_which_evidence_decided(vetted):
    # Issue 26, item 1: the evaluator's decision (augplan.evaluate.ranking) reaches every output of vet.
    import html

    import yaml

    _, out, _ = vetted
    note = _vet_json(out)["decision_note"]
    assert note.startswith("The labelled field sample (")  # the demo data carry a labelled field sample
    evidence = json.loads((out / "evidence.json").read_text())
    assert evidence["evaluation"]["decision_note"] == note
    assert evidence["ranking"] == evidence["evaluation"]["ranking"]
    assert f'id="decision">{html.escape(note)}</p>' in (out / "report.html").read_text(encoding="utf-8")
    vetted_file = yaml.safe_load((out / "vetted-naive-draft.yaml").read_text(encoding="utf-8"))
    assert vetted_file["evidence"]["decided_on"] == "field"
    assert (vetted_file["evidence"].get("validation_note") == note) == bool(
        evidence["evaluation"]["val_shares_shortcut"])


def test_evidence_reads_back_as_a_typed_report_with_the_evaluations_decision(vetted):
    from augplan.results import RecipeScore, VetReport, VettedRecipe, VettingChange

    _, out, _ = vetted
    report = VetReport.from_json(json.loads((out / "evidence.json").read_text()))
    entry = report.recipes[0]
    assert isinstance(entry, VettedRecipe) and isinstance(entry.vetted.score, RecipeScore)
    assert all(isinstance(change, VettingChange) for change in entry.vetted.changes)
    # A clip carries its range as data, for the report to format.
    assert all(change.clipped_to == [float(v) for v in change.clipped_to] and len(change.clipped_to) == 2
               for change in entry.vetted.changes if change.action == "clip")
    # The ranking and the recommendation are the evaluation's, carried, never re-sorted.
    assert report.ranking == report.evaluation.ranking
    assert [row.name for row in report.evaluation.ranked()] == report.ranking
    assert report.best is None or report.recommended().vetted.name == report.evaluation.best


class _Stop(Exception):
    pass


def test_vet_gives_check_coverage_evaluation_and_sheets_their_own_streams(tmp_path, monkeypatch):
    # Issue 27: check and coverage spawned their children from the same integer, so their streams coincided.
    import augplan.vet.job as job
    from augplan.data import open_dataset
    from augplan.recipe.parse import read_recipe

    make_demo_dataset(tmp_path / "data", n_train=4, n_val=2, n_field=2)
    firsts = {}

    def spy(name, real):
        def wrapper(*args, rng, **kwargs):
            # The first draw of a copy: equal only when two purposes share a stream.
            firsts.setdefault(name, []).append(int(copy.deepcopy(rng).integers(2**63)))
            if name == "evaluate":
                raise _Stop
            return real(*args, rng=rng, **kwargs)
        return wrapper

    monkeypatch.setattr(job, "check_recipe", spy("check", job.check_recipe))
    monkeypatch.setattr(job, "analyse_coverage", spy("coverage", job.analyse_coverage))
    monkeypatch.setattr(job, "evaluate_recipes", lambda dataset, recipes, rng, **kwargs: spy("evaluate", None)(rng=rng))
    monkeypatch.setattr(job, "draws_sheet", lambda dataset, recipe, rng: firsts.setdefault("sheets", []).append(
        int(copy.deepcopy(rng).integers(2**63))))
    recipes = [read_recipe(DEMO_RECIPE_DIR / "cautious.yaml"), read_recipe(DEMO_RECIPE_DIR / "light-and-pose.yaml")]
    with pytest.raises(_Stop):
        job.vet_recipes(open_dataset(tmp_path / "data"), recipes, tmp_path / "out", rng=np.random.default_rng(0),
                        repeats=1, sample=3, model="linear", size=16)
    assert {name: len(draws) for name, draws in firsts.items()} == {"check": 2, "coverage": 2, "sheets": 2,
                                                                     "evaluate": 1}
    every = [draw for draws in firsts.values() for draw in draws]
    assert len(set(every)) == len(every)


def test_the_missing_val_folder_is_said_once_by_vet(tmp_path, tiny_recipe, run_cli):
    # Issue 27: the warning has one home (augplan.evaluate.no_val_warning); vet prints it once.
    import shutil

    from conftest import write_tiny_dataset

    root = write_tiny_dataset(tmp_path / "DATA", train=10)
    shutil.rmtree(root / "val")
    result = run_cli("vet", root, "--recipe", tiny_recipe, "-o", tmp_path / "out", "--repeats", "1",
                     "--model", "linear", "--side", "16")
    assert result.code in (0, 1), result.err
    assert result.err.count("no val/ folder") == 1
    evaluation = json.loads((tmp_path / "out" / "evidence.json").read_text())["evaluation"]
    assert sum("no val/ folder" in warning for warning in evaluation["warnings"]) == 1
