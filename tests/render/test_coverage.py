"""The report's coverage section (augplan.render.coverage)."""

from augplan.render.coverage import plot_items


def test_plot_captions_name_the_factor_of_vets_figure_files():
    # vet names factor plots <number>-<recipe>-<factor>.png; the caption names the factor alone.
    plots = ["figures/0-naive-draft-centroid_x.png", "figures/0-naive-draft-hue.png", "plots/area.png"]
    factors = {"centroid_x": {}, "hue": {}, "area": {}}
    assert [factor for factor, _ in plot_items(plots, factors)] == ["centroid_x", "hue", "area"]
