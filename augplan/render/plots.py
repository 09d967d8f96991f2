"""Figures of the coverage analysis: one histogram PNG per nuisance factor."""

import dataclasses
import io
from pathlib import Path

import numpy as np

from augplan.atomic import write_bytes_atomic
from augplan.coverage.coverage import histogram_edges
from augplan.measure.factors import FACTORS

__all__ = ["factor_plot_pngs", "write_factor_plots", "with_factor_plots"]


def factor_plot_pngs(samples):
    """One PNG per factor with the original, augmented and field histograms overlaid.

    Parameters
    ----------
    samples : dict
        ``{"original": {name: values}, "augmented": {...}, "field": {...} or None}``
        (``CoverageResult.samples``).

    Returns
    -------
    dict of str -> bytes
        ``{"<factor>.png": PNG bytes}`` in `FACTORS` order.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    pngs = {}
    for name, factor in FACTORS.items():
        field = samples.get("field")
        field_values = None if field is None else field[name]
        edges = histogram_edges(factor, samples["original"][name], samples["augmented"][name], field_values)
        figure = Figure(figsize=(5.0, 3.2), dpi=100)
        FigureCanvasAgg(figure)
        axes = figure.add_subplot()
        for label, values, colour in (("original", samples["original"][name], "tab:blue"),
                                      ("augmented", samples["augmented"][name], "tab:orange"),
                                      ("field", field_values, "tab:green")):
            if values is None:
                continue
            values = values[np.isfinite(values)]
            if values.size == 0:
                continue
            if factor.circular:
                values = values % factor.period
            axes.hist(values, bins=edges, density=True, histtype="step", linewidth=1.6,
                      color=colour, label=f"{label} (n={values.size})")
        axes.set_xlabel(f"{name} ({factor.unit})")
        axes.set_ylabel("density")
        if axes.get_legend_handles_labels()[0]:  # a factor with no finite values draws no curve
            axes.legend(fontsize=8)
        figure.tight_layout()
        buffer = io.BytesIO()
        figure.savefig(buffer, format="png", metadata={"Software": None})
        pngs[f"{name}.png"] = buffer.getvalue()
    return pngs


def write_factor_plots(samples, plots_dir):
    """Write `factor_plot_pngs` into ``plots_dir`` (created if missing), each file atomically.

    Returns
    -------
    list of Path
    """
    plots_dir = Path(plots_dir)
    plots_dir.mkdir(parents=True, exist_ok=True)
    return [write_bytes_atomic(plots_dir / name, data) for name, data in factor_plot_pngs(samples).items()]


def with_factor_plots(result, plots_dir):
    """Write ``result``'s factor plots into ``plots_dir``; the result with their paths under ``plots``.

    Parameters
    ----------
    result : augplan.results.CoverageResult
        From `augplan.coverage.coverage.analyse_coverage` (it carries the samples).
    plots_dir : str or Path

    Returns
    -------
    augplan.results.CoverageResult
    """
    written = write_factor_plots(result.samples, plots_dir)
    return dataclasses.replace(result, plots=[str(path) for path in written])
