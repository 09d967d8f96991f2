"""Evaluation (`augplan evaluate`): each recipe scored against no augmentation, ranked once.

Modules: `evaluate` (the entry point, `evaluate_recipes`), `training` (each
arm trained; the only place a recipe is applied), `scoring` (one arm's
statistics and the verdict word), `ranking` (the ranking and the
recommendation, `BEST_RULE`), `ledger` (the results ledger and its history)
and `feature_cache` (features of original images on disk).
"""

from augplan.evaluate.evaluate import evaluate_recipes, no_val_warning
from augplan.evaluate.ledger import StoredResult, history, list_history, run_details
from augplan.evaluate.ranking import BEST_RULE, Decision, decide
from augplan.evaluate.scoring import GAIN_RULE, VERDICT_RULE, gain_verdict

__all__ = ["evaluate_recipes", "no_val_warning", "BEST_RULE", "Decision", "decide", "GAIN_RULE", "VERDICT_RULE",
           "gain_verdict", "StoredResult", "history", "list_history", "run_details"]
