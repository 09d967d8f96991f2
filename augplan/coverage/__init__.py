"""Coverage (`augplan coverage`) and the draft recipe (`augplan draft`).

Modules: `coverage` (widening, field coverage, the shortcut audit's rows and
suggestions for one recipe) and `draft` (a candidate recipe from the data).
"""

from augplan.coverage.coverage import (
    CoverageSamples,
    analyse_coverage,
    circular_mean,
    circular_wasserstein,
    factor_wasserstein,
    measure_coverage_samples,
    naeem_density_coverage,
)
from augplan.coverage.draft import draft_ranges, draft_recipe_text, field_lighting

__all__ = [
    "analyse_coverage",
    "measure_coverage_samples",
    "CoverageSamples",
    "circular_mean",
    "circular_wasserstein",
    "factor_wasserstein",
    "naeem_density_coverage",
    "draft_recipe_text",
    "draft_ranges",
    "field_lighting",
]
