"""Tests of the results ledger and the feature cache of original images."""

import sqlite3

import numpy as np
import pytest

from augplan.evaluate import ledger
from augplan.errors import BadInputError
from augplan.evaluate.feature_cache import FeatureCache, default_cache_dir, feature_settings_key

KEYS = dict(fingerprint="f" * 64, settings_key="s" * 24, seed=0, repeats=5)


def _entry(name, digest, gain):
    return {"recipe_hash": digest, "name": name, "copies": 2, "augmented_training_images": 10,
            "scores": {"val": {"gain": gain, "confusion": {"classes": ["a", "b"], "counts": [[1, 0], [0, 1]]}}}}


def test_stored_results_come_back_only_when_every_key_matches(tmp_path):
    path = tmp_path / "sub" / "ledger.sqlite"
    baseline = {"val": {"accuracy": 0.8, "confusion": None}}
    results = [_entry("a", "1" * 64, 0.02), _entry("b", "2" * 64, -0.01)]
    ledger.store_results(path, baseline=baseline, results=results, **KEYS)

    stored = ledger.lookup_results(path, recipe_hashes=["2" * 64, "1" * 64], **KEYS)
    assert stored == (baseline, [results[1], results[0]])
    assert all(isinstance(row, ledger.StoredResult) for row in stored[1])
    for changed in ({"seed": 1}, {"repeats": 3}, {"fingerprint": "e" * 64}, {"settings_key": "t" * 24}):
        assert ledger.lookup_results(path, recipe_hashes=["1" * 64], **{**KEYS, **changed}) is None
    # One recipe missing: the whole comparison is recomputed.
    assert ledger.lookup_results(path, recipe_hashes=["1" * 64, "3" * 64], **KEYS) is None


def test_rows_of_older_versions_are_migrated_when_read(tmp_path):
    # Rows stored before each split's confusion was kept lack it: read back, it is None, the one migration.
    path = tmp_path / "old.sqlite"
    old = _entry("a", "1" * 64, 0.02)
    del old["scores"]["val"]["confusion"]
    ledger.store_results(path, baseline={"val": {"accuracy": 0.8}}, results=[old], **KEYS)
    baseline, (row,) = ledger.lookup_results(path, recipe_hashes=["1" * 64], **KEYS)
    assert row.scores["val"] == {"gain": 0.02, "confusion": None} and row.name == "a"
    assert baseline == {"val": {"accuracy": 0.8, "confusion": None}}


def test_missing_ledger_is_empty(tmp_path):
    path = tmp_path / "none.sqlite"
    assert ledger.lookup_results(path, recipe_hashes=["1" * 64], **KEYS) is None
    assert ledger.list_history(path) == []
    assert not path.exists()


def test_history_lists_runs_in_order_and_filters_by_data(tmp_path):
    path = tmp_path / "ledger.sqlite"
    for fingerprint, names, gain in (("a" * 64, ["x", "y"], 0.03), ("b" * 64, ["z"], None)):
        ledger.record_run(path, fingerprint=fingerprint, data_root="/data", settings_key="k",
                          seed=0, repeats=5, recipe_names=names, best_recipe=names[0],
                          best_gain=gain, from_ledger=False)
    rows = ledger.list_history(path)
    assert [r["recipes"] for r in rows] == [["x", "y"], ["z"]]
    assert rows[0]["fingerprint"] == "a" * 12
    assert rows[0]["best_gain"] == pytest.approx(0.03)
    assert rows[1]["best_gain"] is None
    assert [r["recipes"] for r in ledger.list_history(path, fingerprint="b" * 64)] == [["z"]]
    # The file is a plain SQLite database (stdlib sqlite3 reads it back).
    with sqlite3.connect(path) as connection:
        assert connection.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 2


def test_a_file_that_is_not_a_ledger_is_named(tmp_path):
    path = tmp_path / "notes.sqlite"
    path.write_bytes(b"this is not a database, just some text " * 20)
    with pytest.raises(BadInputError, match="notes.sqlite"):
        ledger.list_history(path)


def test_feature_cache_round_trip_and_counts(tmp_path):
    cache = FeatureCache(tmp_path, "k" * 24)
    digest = "ab" * 32
    assert cache.get(digest) is None
    row = np.linspace(0, 1, 7, dtype=np.float32)
    cache.put(digest, row)
    np.testing.assert_array_equal(cache.get(digest), row)
    assert (cache.hits, cache.misses) == (1, 1)
    # Rows of other settings never mix.
    assert FeatureCache(tmp_path, "m" * 24).get(digest) is None
    # No temporary files are left behind by the atomic write.
    assert [p.name for p in (tmp_path / ("k" * 24)).rglob("*")] == ["ab", f"{digest}.npy"]


def test_disabled_cache_stores_nothing(tmp_path):
    cache = FeatureCache(None, "k" * 24)
    cache.put("cd" * 32, np.ones(3))
    assert cache.get("cd" * 32) is None
    assert list(tmp_path.iterdir()) == []


def test_corrupt_cache_row_is_recomputed(tmp_path):
    cache = FeatureCache(tmp_path, "k" * 24)
    digest = "ef" * 32
    cache.put(digest, np.ones(3))
    (tmp_path / ("k" * 24) / "ef" / f"{digest}.npy").write_bytes(b"garbage")
    assert cache.get(digest) is None


def _features_a(images):
    return images.reshape(len(images), -1)


def _features_b(images):
    return images.reshape(len(images), -1) / 2


def test_settings_key_changes_with_function_and_size(tmp_path):
    assert feature_settings_key(_features_a, 64) == feature_settings_key(_features_a, 64)
    assert feature_settings_key(_features_a, 64) != feature_settings_key(_features_a, 32)
    assert feature_settings_key(_features_a, 64) != feature_settings_key(_features_b, 64)
    assert default_cache_dir(tmp_path / "DATA") == tmp_path.resolve() / ".augplan" / "features"


def test_ledger_carries_its_schema_version(tmp_path):
    path = tmp_path / "ledger.sqlite"
    ledger.store_results(path, baseline={}, results=[_entry("a", "1" * 64, 0.0)], **KEYS)
    with sqlite3.connect(path) as connection:
        assert connection.execute("PRAGMA user_version").fetchone()[0] == ledger.LEDGER_VERSION


def test_ledger_of_another_version_is_refused_untouched(tmp_path):
    path = tmp_path / "ledger.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute(f"PRAGMA user_version = {ledger.LEDGER_VERSION + 1}")
    with pytest.raises(BadInputError, match="schema version"):
        ledger.store_results(path, baseline={}, results=[_entry("a", "1" * 64, 0.0)], **KEYS)
    with sqlite3.connect(path) as connection:
        assert connection.execute("SELECT count(*) FROM sqlite_master").fetchone()[0] == 0


@pytest.mark.parametrize("row", [np.zeros(3, np.float32), np.full(5, np.nan, np.float32),
                                 np.zeros((5, 1), np.float32)], ids=["wrong-length", "all-nan", "two-d"])
def test_damaged_cache_row_is_a_miss_and_recorded(tmp_path, row):
    cache = FeatureCache(tmp_path, "k" * 24, row_length=5)
    cache.put("ab" * 32, row)
    assert cache.get("ab" * 32) is None
    assert cache.misses == 1 and len(cache.damaged) == 1
    cache.put("ab" * 32, np.ones(5, np.float32))  # recomputed and rewritten
    assert np.array_equal(cache.get("ab" * 32), np.ones(5, np.float32))


def test_cache_row_of_garbage_bytes_is_a_miss(tmp_path):
    cache = FeatureCache(tmp_path, "k" * 24, row_length=5)
    cache.put("cd" * 32, np.ones(5, np.float32))
    next(cache.folder.rglob("*.npy")).write_bytes(b"\x93NUMPY garbage")
    assert cache.get("cd" * 32) is None and len(cache.damaged) == 1


def test_run_details_come_back_by_run_number(tmp_path):
    path = tmp_path / "ledger.sqlite"
    details = {"scored_on": "val", "recipes": [{"name": "x", "gain": 0.02, "gain_ci": [-0.01, 0.05]}]}
    for names in (["x"], ["y"]):
        ledger.record_run(path, fingerprint="a" * 64, data_root="/data", settings_key="k", seed=0, repeats=5,
                          recipe_names=names, best_recipe=names[0], best_gain=0.02, from_ledger=False,
                          details=details if names == ["x"] else None)
    assert [row["run"] for row in ledger.list_history(path)] == [1, 2]
    first, second = ledger.run_details(path, 1), ledger.run_details(path, 2)
    assert first["details"] == details and first["fingerprint"] == "a" * 64 and first["recipes"] == ["x"]
    assert second["details"] is None
    with pytest.raises(BadInputError, match="no run 3 .*holds 2 runs"):
        ledger.run_details(path, 3)


def test_a_ledger_from_before_run_details_is_upgraded(tmp_path):
    path = tmp_path / "ledger.sqlite"
    with sqlite3.connect(path) as connection:  # the runs table as ledgers wrote it before details
        connection.execute("CREATE TABLE runs (id INTEGER PRIMARY KEY AUTOINCREMENT, created TEXT NOT NULL, "
                           "fingerprint TEXT NOT NULL, data_root TEXT, settings_key TEXT NOT NULL, seed INTEGER "
                           "NOT NULL, repeats INTEGER NOT NULL, recipes_json TEXT NOT NULL, best_recipe TEXT, "
                           "best_gain REAL, from_ledger INTEGER NOT NULL)")
        connection.execute("INSERT INTO runs (created, fingerprint, data_root, settings_key, seed, repeats, "
                           "recipes_json, best_recipe, best_gain, from_ledger) VALUES "
                           "('2026-01-01 00:00:00', ?, '/d', 'k', 0, 5, '[\"old\"]', 'old', 0.0, 0)", ("c" * 64,))
    assert ledger.run_details(path, 1)["details"] is None
    ledger.record_run(path, fingerprint="c" * 64, data_root="/d", settings_key="k", seed=0, repeats=5,
                      recipe_names=["new"], best_recipe="new", best_gain=0.0, from_ledger=False, details={"a": 1})
    assert ledger.run_details(path, 2)["details"] == {"a": 1}


def test_missing_ledger_has_no_run(tmp_path):
    with pytest.raises(BadInputError, match="no results ledger"):
        ledger.run_details(tmp_path / "absent.sqlite", 1)


@pytest.mark.parametrize("columns", [80, 132])
def test_history_uses_the_terminals_width(tmp_path, run_cli, monkeypatch, columns):
    # shutil.get_terminal_size reads $COLUMNS first (Python's documented order).
    monkeypatch.setenv("COLUMNS", str(columns))
    path = tmp_path / "ledger.sqlite"
    ledger.record_run(path, fingerprint="f" * 64, data_root=tmp_path, settings_key="k", seed=0, repeats=5,
                      recipe_names=["relight-and-tilt-for-the-night-shift"],
                      best_recipe="relight-and-tilt-for-the-night-shift", best_gain=0.05, from_ledger=True)
    result = run_cli("history", "--ledger", path)
    lines = result.out.splitlines()
    assert result.code == 0 and max(len(line) for line in lines) <= columns
    assert ("relight-and-tilt-for-the-night-shift" in result.out) == (columns > 80)
    assert any(line.endswith("\u2026") for line in lines) == (columns == 80)
