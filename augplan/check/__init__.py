"""The label-safety check (`augplan check`): would training with a transform teach wrong labels?

The public entry point is `check_recipe`; the rule's words are
`DECISION_RULE` and its predicates live in `augplan.check.rules`.
"""

from augplan.check.check import check_recipe
from augplan.check.regions import class_distances, locate
from augplan.check.rules import DECISION_RULE, nested_ranges, screen_clears, typical_share, witness_holds

__all__ = ["check_recipe", "DECISION_RULE", "class_distances", "locate", "nested_ranges", "screen_clears",
           "typical_share", "witness_holds"]
