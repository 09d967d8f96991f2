"""The random streams of a vetting run: one child of the run's generator per purpose.

``vet`` splits its `numpy.random.Generator` once (`augplan.seeding`): the
label-safety checks, the re-checks of rewritten steps, the coverage
analyses, the evaluation and the draws sheets each get their own child, so no two of them share a stream; each
recipe then gets a child of each.
"""

from dataclasses import dataclass

from augplan.seeding import require_generator

__all__ = ["VetStreams", "vet_streams"]


@dataclass(frozen=True)
class VetStreams:
    """The generators of one vetting run.

    Attributes
    ----------
    check, recheck, coverage, sheets : list of numpy.random.Generator
        One per recipe, in the order given: its label-safety check, the
        re-check of its rewritten steps, its coverage, its draws sheet.
    evaluate : numpy.random.Generator
        The evaluation of every recipe together (its own per-recipe streams
        are keyed, `augplan.evaluate.evaluate_recipes`).
    """

    check: list
    recheck: list
    coverage: list
    evaluate: object
    sheets: list


def vet_streams(rng, n_recipes):
    """Split ``rng`` once into the `VetStreams` of a run of ``n_recipes`` recipes."""
    check, recheck, coverage, evaluate, sheets = require_generator(rng).spawn(5)
    return VetStreams(check=check.spawn(n_recipes), recheck=recheck.spawn(n_recipes),
                      coverage=coverage.spawn(n_recipes), evaluate=evaluate, sheets=sheets.spawn(n_recipes))
