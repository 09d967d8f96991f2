"""Every ``--json`` document validates against the JSON Schema shipped with the package.

The commands run in-process on a small copy of the demo scenario (invented
data, augplan/demo.py); the schemas are read from the installed package
(augplan.results.schema_path) and checked with the jsonschema library's
Draft 2020-12 validator.
"""

import contextlib
import io
import json

import jsonschema
import pytest

from augplan.cli import main
from augplan.demo import DEMO_RECIPE_DIR, make_demo_dataset
from augplan.results import RESULT_TYPES, schema_path


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    root = tmp_path_factory.mktemp("json")
    data = root / "data"
    make_demo_dataset(data, n_train=8, n_val=4, n_field=6)
    recipe = DEMO_RECIPE_DIR / "naive-draft.yaml"
    ledger = root / "ledger.sqlite"
    commands = {
        "check": ["check", data, "--recipe", recipe, "--sample", "3"],
        "coverage": ["coverage", data, "--recipe", recipe],
        "evaluate": ["evaluate", data, "--recipe", recipe, "--repeats", "1", "--ledger", ledger],
        "history": ["history", "--ledger", ledger],
        "vet": ["vet", data, "--recipe", recipe, "-o", root / "out", "--repeats", "1", "--sample", "3",
                "--ledger", ledger],
        "verify": ["verify", root / "out" / "vetted-naive-draft.yaml", "--data", data],
    }
    documents = {}
    for command, argv in commands.items():
        stdout = io.StringIO()
        with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(io.StringIO()):
            code = main([str(a) for a in argv] + ["--json", "--quiet"])
        documents[command] = (code, json.loads(stdout.getvalue()))
    return documents


def _validator(command):
    schema = json.loads(schema_path(command).read_text(encoding="utf-8"))
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


@pytest.mark.parametrize("command", sorted(RESULT_TYPES))
def test_json_output_matches_its_schema(outputs, command):
    code, document = outputs[command]
    assert code in (0, 1)
    errors = [f"{list(e.absolute_path)}: {e.message}" for e in _validator(command).iter_errors(document)]
    assert errors == []


@pytest.mark.parametrize("command", sorted(RESULT_TYPES))
def test_exit_code_is_the_results_flag(outputs, command):
    # The command line's exit code is the typed result's `flagged`, rebuilt here from the JSON.
    code, document = outputs[command]
    assert code == int(RESULT_TYPES[command].from_json(document).flagged)


@pytest.mark.parametrize("command", sorted(RESULT_TYPES))
def test_schema_rejects_a_document_missing_a_key(outputs, command):
    _, document = outputs[command]
    broken = dict(document)
    broken.pop(next(iter(broken)))
    assert not _validator(command).is_valid(broken)


@pytest.mark.parametrize("command", sorted(RESULT_TYPES))
def test_result_round_trips_its_document(outputs, command):
    _, document = outputs[command]
    result = RESULT_TYPES[command].from_json(document)
    assert result.to_json() == document and list(result.to_json()) == list(document)
    assert dict(result) == document and json.loads(json.dumps(result)) == document
