"""The results ledger: every evaluation stored in a local SQLite database.

Two tables. ``evaluations`` holds one row per recipe result, keyed by
(recipe content hash, data fingerprint, model settings key, seed, repeats),
with the recipe's result and the baseline it was compared against as JSON.
``runs`` holds one row per comparison (date, data, recipes, best gain) for
``augplan history``. Standard library ``sqlite3`` only; each call opens and
closes its own connection, so a crash never leaves the database locked.
"""

import json
import sqlite3
from collections.abc import Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from augplan.errors import BadInputError
from augplan.results import Record

__all__ = ["StoredResult", "lookup_stored", "lookup_results", "store_results", "record_run", "list_history", "history",
           "run_details"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS evaluations (
    recipe_hash TEXT NOT NULL,
    fingerprint TEXT NOT NULL,
    settings_key TEXT NOT NULL,
    seed INTEGER NOT NULL,
    repeats INTEGER NOT NULL,
    recipe_name TEXT NOT NULL,
    result_json TEXT NOT NULL,
    baseline_json TEXT NOT NULL,
    created TEXT NOT NULL,
    PRIMARY KEY (recipe_hash, fingerprint, settings_key, seed, repeats)
);
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    created TEXT NOT NULL,
    fingerprint TEXT NOT NULL,
    data_root TEXT,
    settings_key TEXT NOT NULL,
    seed INTEGER NOT NULL,
    repeats INTEGER NOT NULL,
    recipes_json TEXT NOT NULL,
    best_recipe TEXT,
    best_gain REAL,
    from_ledger INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS run_details (
    run_id INTEGER PRIMARY KEY,
    details_json TEXT NOT NULL
);
"""


#: Schema version, kept in SQLite's ``user_version``; a ledger of another
#: version (or another program's database) is refused, never altered.
LEDGER_VERSION = 1
_TABLES = {"evaluations", "runs", "run_details"}


def _migrate_score(score):
    """One split's score as this version reads it: rows stored before confusions were kept get None."""
    return {**score, "confusion": score.get("confusion")}


@dataclass(frozen=True, eq=False)
class StoredResult(Record):
    """One recipe's result as the ledger stores it (the ``result_json`` of an ``evaluations`` row).

    Attributes
    ----------
    recipe_hash, name : str
    copies : int
    augmented_training_images : int
    scores : dict
        Split (``val``, ``confirm``, ``field``) -> its score: accuracy and its
        interval, per-class recall, the confusion, and the gain over the
        baseline with its interval and p.
    """

    recipe_hash: str
    name: str
    copies: int
    augmented_training_images: int
    scores: Mapping

    @classmethod
    def from_json(cls, document):
        """Read a stored row, migrating the shapes older versions stored (the one place that accepts them).

        Rows stored before the confusion of each split was kept lack its
        ``confusion``: it reads as None.
        """
        scores = {split: _migrate_score(score) for split, score in document["scores"].items()}
        return super().from_json({**document, "scores": scores})

    @staticmethod
    def baseline_from_json(document):
        """The stored baseline (split -> score), migrated like a recipe's scores."""
        return {split: _migrate_score(score) for split, score in document.items()}


def _unusable(path, problem):
    return BadInputError(f"{path}: {problem}; pass another --ledger path, or move this file away "
                         "to start a new ledger.")


def _connect(ledger_path, *, create):
    """An open ledger. Without ``create`` it is opened read-only and never
    altered: a missing file, or an empty one, is no ledger (None)."""
    path = Path(ledger_path)
    if not create and not path.exists():
        return None
    if path.is_dir():
        raise _unusable(path, "is a folder, not a ledger file")
    if create:
        path.parent.mkdir(parents=True, exist_ok=True)
    connection = None
    try:
        if create:
            connection = sqlite3.connect(path, timeout=30)
        else:
            # Reading never writes: no schema added, no journal left beside the file.
            connection = sqlite3.connect(f"{path.absolute().as_uri()}?mode=ro", uri=True, timeout=30)
        version = connection.execute("PRAGMA user_version").fetchone()[0]
        tables = {row[0] for row in connection.execute(
            "SELECT name FROM sqlite_master WHERE type='table' AND name NOT LIKE 'sqlite_%'")}
        if version == 0 and tables and not tables <= _TABLES:
            raise _unusable(path, f"an SQLite database of another program (tables: {', '.join(sorted(tables))}), "
                                  "not an augplan ledger")
        if version not in (0, LEDGER_VERSION):
            raise _unusable(path, f"a ledger of schema version {version}; this augplan reads version "
                                  f"{LEDGER_VERSION}")
        if not create and not tables:
            connection.close()
            return None  # an empty file: no ledger yet
        if version == 0 or "run_details" not in tables:
            # A new file, a ledger from before versions were kept (same tables), or
            # one from before runs kept their scores: the missing tables are added
            # (for reading, in a temporary schema that leaves the file as it is).
            with connection:
                if create:
                    connection.executescript(_SCHEMA)
                    connection.execute(f"PRAGMA user_version = {LEDGER_VERSION}")
                else:
                    for statement in _SCHEMA.split(";"):
                        words = statement.split()
                        if words[:5] == ["CREATE", "TABLE", "IF", "NOT", "EXISTS"] and words[5] not in tables:
                            connection.execute(statement.replace("CREATE TABLE", "CREATE TEMP TABLE", 1))
        check = connection.execute("PRAGMA quick_check").fetchone()[0]
        if check != "ok":
            raise _unusable(path, f"the ledger is damaged (SQLite's check: {check})")
    except sqlite3.DatabaseError as error:
        if connection is not None:
            connection.close()
        raise _unusable(path, f"not a usable augplan ledger (SQLite said: {error})") from None
    except BadInputError:
        connection.close()
        raise
    return connection


@contextmanager
def _session(ledger_path, *, create):
    """A connection for one operation (None when the file is missing and
    ``create`` is False); a database fault mid-way is bad input, not a crash."""
    connection = _connect(ledger_path, create=create)
    try:
        yield connection
    except sqlite3.DatabaseError as error:
        raise _unusable(Path(ledger_path), f"not a usable augplan ledger (SQLite said: {error})") from None
    finally:
        if connection is not None:
            connection.close()


def _now():
    return datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M:%S")


def lookup_stored(ledger_path, *, fingerprint, settings_key, seed, repeats, recipe_hashes):
    """Whatever is stored for the recipes of a comparison.

    Returns
    -------
    baseline : dict or None
        The baseline stored with any of them (it depends only on the keys).
    results : dict
        ``{recipe_hash: StoredResult}`` for the recipes found.
    """
    baseline, results = None, {}
    with _session(ledger_path, create=False) as connection:
        if connection is None:
            return None, {}
        for recipe_hash in recipe_hashes:
            row = connection.execute(
                "SELECT result_json, baseline_json FROM evaluations WHERE recipe_hash=? AND "
                "fingerprint=? AND settings_key=? AND seed=? AND repeats=?",
                (recipe_hash, fingerprint, settings_key, int(seed), int(repeats)),
            ).fetchone()
            if row is not None:
                results[recipe_hash] = StoredResult.from_json(json.loads(row[0]))
                if baseline is None:
                    baseline = StoredResult.baseline_from_json(json.loads(row[1]))
    return baseline, results


def lookup_results(ledger_path, *, fingerprint, settings_key, seed, repeats, recipe_hashes):
    """Stored results for every recipe of a comparison, or ``None``.

    Parameters
    ----------
    ledger_path : str or Path
        The SQLite file (a missing file means nothing is stored).
    fingerprint, settings_key : str
        Data fingerprint and model settings key of the comparison.
    seed, repeats : int
        Seed and number of repeats of the comparison.
    recipe_hashes : sequence of str
        Content hashes of the recipes, in run order.

    Returns
    -------
    tuple of (dict, list of dict) or None
        ``(baseline, results)`` with ``results`` in the order of
        ``recipe_hashes``, only when every recipe is stored under the same
        keys; ``None`` otherwise (the comparison is then computed afresh).
    """
    baseline, found = lookup_stored(ledger_path, fingerprint=fingerprint, settings_key=settings_key,
                                    seed=seed, repeats=repeats, recipe_hashes=recipe_hashes)
    if len(found) < len(set(recipe_hashes)):
        return None
    return baseline, [found[h] for h in recipe_hashes]


def store_results(ledger_path, *, fingerprint, settings_key, seed, repeats, baseline, results):
    """Store (or replace) the results of one comparison.

    Parameters
    ----------
    ledger_path : str or Path
        The SQLite file; created with its folder if missing.
    fingerprint, settings_key, seed, repeats
        The keys, as in `lookup_results`.
    baseline : dict
        The baseline entry (JSON-able).
    results : sequence of dict
        Per-recipe entries, each with at least ``"recipe_hash"`` and ``"name"``.
    """
    baseline_text = json.dumps(baseline, sort_keys=True)
    created = _now()
    with _session(ledger_path, create=True) as connection, connection:
        connection.executemany(
            "INSERT OR REPLACE INTO evaluations VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            [
                (entry["recipe_hash"], fingerprint, settings_key, int(seed), int(repeats),
                 entry["name"], json.dumps(entry, sort_keys=True), baseline_text, created)
                for entry in results
            ],
        )


def record_run(ledger_path, *, fingerprint, data_root, settings_key, seed, repeats,
               recipe_names, best_recipe, best_gain, from_ledger, details=None):
    """Append one comparison to the history (see `list_history` and `run_details`).

    ``details`` is a JSON-able summary of the comparison (scores per recipe)
    that `run_details` returns.
    """
    with _session(ledger_path, create=True) as connection, connection:
        cursor = connection.execute(
            "INSERT INTO runs (created, fingerprint, data_root, settings_key, seed, repeats, "
            "recipes_json, best_recipe, best_gain, from_ledger) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (_now(), fingerprint, None if data_root is None else str(data_root), settings_key,
             int(seed), int(repeats), json.dumps(list(recipe_names)), best_recipe,
             None if best_gain is None else float(best_gain), int(bool(from_ledger))),
        )
        if details is not None:
            connection.execute("INSERT INTO run_details (run_id, details_json) VALUES (?, ?)",
                               (cursor.lastrowid, json.dumps(details, allow_nan=False)))


def list_history(ledger_path, fingerprint=None):
    """Past comparisons, oldest first.

    Parameters
    ----------
    ledger_path : str or Path
        The SQLite file. A missing file gives an empty history.
    fingerprint : str, optional
        Keep only comparisons on data with this fingerprint.

    Returns
    -------
    list of dict
        ``{"date", "fingerprint" (first 12 characters), "data", "recipes"
        (names), "best_recipe", "best_gain", "seed", "repeats",
        "from_ledger"}`` per comparison; ``date`` is UTC.
    """
    query = ("SELECT id, created, fingerprint, data_root, recipes_json, best_recipe, best_gain, seed, "
             "repeats, from_ledger FROM runs")
    arguments = ()
    if fingerprint is not None:
        query += " WHERE fingerprint=?"
        arguments = (fingerprint,)
    with _session(ledger_path, create=False) as connection:
        if connection is None:
            return []
        rows = connection.execute(query + " ORDER BY id", arguments).fetchall()
    return [_run_row(row) for row in rows]


def _run_row(row):
    run, created, fp, data_root, names, best_recipe, best_gain, seed, repeats, from_ledger = row
    return {"run": run, "date": created, "fingerprint": fp[:12], "data": data_root, "recipes": json.loads(names),
            "best_recipe": best_recipe, "best_gain": best_gain, "seed": seed, "repeats": repeats,
            "from_ledger": bool(from_ledger)}


#: SQLite's largest integer key: no run number can be larger.
_LARGEST_RUN = 2**63 - 1


def run_details(ledger_path, run):
    """One past comparison with its scores.

    Parameters
    ----------
    ledger_path : str or Path
    run : int
        The run number `list_history` shows.

    Returns
    -------
    dict
        The `list_history` row plus ``"fingerprint"`` in full, ``"settings_key"``
        and ``"details"`` (the scores recorded with the run; None for a run
        recorded before runs kept them).

    Raises
    ------
    BadInputError
        No ledger at the path, or no run with that number.
    """
    if isinstance(run, bool) or not isinstance(run, int) or not 1 <= run <= _LARGEST_RUN:
        raise BadInputError(f"{ledger_path}: no run {run} in the ledger; run numbers are whole numbers from 1 "
                            f"to {_LARGEST_RUN} ('augplan history' lists them).")
    with _session(ledger_path, create=False) as connection:
        if connection is None:
            raise BadInputError(f"{ledger_path}: no results ledger here (or an empty file); pass --ledger or run "
                                "'augplan evaluate' first.")
        found = connection.execute(
            "SELECT id, created, fingerprint, data_root, recipes_json, best_recipe, best_gain, seed, repeats, "
            "from_ledger, settings_key, details_json FROM runs LEFT JOIN run_details ON run_details.run_id = runs.id "
            "WHERE id=?", (int(run),)).fetchone()
        count = connection.execute("SELECT COUNT(*) FROM runs").fetchone()[0]
    if found is None:
        raise BadInputError(f"{ledger_path}: no run {run} in the ledger (it holds {count} runs; "
                            "'augplan history' lists them).")
    entry = _run_row(found[:10])
    entry.update(fingerprint=found[2], settings_key=found[10],
                 details=None if found[11] is None else json.loads(found[11]))
    return entry


def history(ledger_path, fingerprint=None):
    """The ``history --json`` result: the ledger's path and its past comparisons.

    Parameters are those of `list_history`.

    Returns
    -------
    augplan.results.HistoryResult
    """
    from augplan.results import HistoryResult

    return HistoryResult(ledger=str(ledger_path), evaluations=list_history(ledger_path, fingerprint=fingerprint))
