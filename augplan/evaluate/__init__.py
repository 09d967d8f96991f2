"""Evaluation (`augplan evaluate`): augmented against baseline, the ledger and the feature cache."""
