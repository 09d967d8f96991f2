"""Vetting (`augplan vet`): verdicts applied to recipes, the vetted files, the report's evidence.

Modules: `job` (the whole run, `vet_recipes`), `policy` (the vetting rule:
`vet_transforms`, the re-check fallback, the sign-off items; it makes the
typed `VettingChange` rows), `streams` (the run's generators, one per
purpose), `verdict` (the run's one-sentence verdict), `evidence` (the vetted
file's evidence block and the `VetReport`), `outputs` (the files, gathered
before any is written), `vetted_file` (the vetted recipe file: text,
checksum, write, read, verify) and `start` (a draft adapted from a starting
recipe).
"""

from augplan.vet.job import prepare_output, vet_recipes
from augplan.vet.policy import settle_rewrites, signoff_items, vet_recipe, vet_transforms
from augplan.vet.start import draft_from_start
from augplan.vet.vetted_file import read_vetted, verify_vetted, vetted_checksum, vetted_text, write_vetted

__all__ = ["vet_recipes", "prepare_output", "vet_transforms", "vet_recipe", "settle_rewrites", "signoff_items",
           "draft_from_start", "read_vetted", "verify_vetted", "vetted_checksum", "vetted_text", "write_vetted"]
