"""Figures of analysis results: drawn here from the data the analyses return.

The analyses return numbers (histogram counts, rates); this module is the
only one that turns them into pictures. Figures are encoded compactly: an
8-bit palette PNG for line art (a few flat colours, so the palette is
lossless in practice) and JPEG for photographic contact sheets, so a report
that embeds many of them stays small.
"""

import dataclasses
import io
from pathlib import Path

import numpy as np
from PIL import Image

from augplan.atomic import check_output, publish_folder

__all__ = ["factor_grid", "palette_png", "jpeg_bytes", "with_factor_plots"]

# Colours that stay apart for the common colour-vision deficiencies
# (Okabe and Ito's palette, 2008) and in greyscale print by line style.
_SOURCES = (("original", "#0072B2", "-"), ("augmented", "#D55E00", "--"), ("field", "#009E73", ":"))
_COLUMNS = 4


def palette_png(image, colours=64):
    """Encode a PIL image as an 8-bit palette PNG of at most ``colours`` colours (no metadata)."""
    if not isinstance(image, Image.Image):
        raise TypeError(f"image must be a PIL image; got {type(image).__name__}")
    quantised = image.convert("RGB").quantize(colors=int(colours), method=Image.Quantize.MEDIANCUT, dither=0)
    buffer = io.BytesIO()
    quantised.save(buffer, format="PNG", optimize=True)
    return buffer.getvalue()


def jpeg_bytes(image, quality=65):
    """Encode a PIL image as a baseline JPEG (4:2:0, no metadata): for photographs, not line art."""
    if not isinstance(image, Image.Image):
        raise TypeError(f"image must be a PIL image; got {type(image).__name__}")
    buffer = io.BytesIO()
    image.convert("RGB").save(buffer, format="JPEG", quality=int(quality), optimize=True)
    return buffer.getvalue()


def _density(histogram):
    edges = np.asarray(histogram["edges"], dtype=np.float64)
    counts = np.asarray(histogram["counts"], dtype=np.float64)
    total = counts.sum()
    if total <= 0 or edges.size != counts.size + 1:
        return None
    return edges, counts / (total * np.diff(edges))


def factor_grid(factors, *, title=None):
    """Small multiples of every factor's histograms on one figure: original, augmented, field.

    Parameters
    ----------
    factors : dict
        The ``factors`` block of a coverage result: per factor ``{"unit",
        "original": {"histogram": {"edges", "counts"}}, "augmented": {...},
        "field": {"summary": {...}}}``. All histograms of one factor share
        their edges. A factor with a ``note`` and no values (hue of grey
        images) gets a panel that shows the note.
    title : str, optional

    Returns
    -------
    bytes or None
        A palette PNG; None when no factor has a histogram.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    panels = []
    for name, info in (factors or {}).items():
        if not isinstance(info, dict):
            continue
        field = (info.get("field") or {}).get("summary") or {}
        curves = []
        for (source, colour, style), block in zip(_SOURCES, (info.get("original"), info.get("augmented"), field)):
            histogram = (block or {}).get("histogram")
            density = _density(histogram) if isinstance(histogram, dict) else None
            if density is not None:
                curves.append((source, colour, style, density, int(sum(histogram["counts"]))))
        if curves:
            panels.append((name, info.get("unit"), curves, None))
        elif info.get("note"):
            # No image has a value (hue of grey images): the panel says so.
            panels.append((name, info.get("unit"), [], info["note"]))
    if not any(curves for _, _, curves, _ in panels):
        return None
    rows = -(-len(panels) // _COLUMNS)
    height = 1.75 * rows + (0.35 if title else 0.0) + 0.3
    figure = Figure(figsize=(2.6 * _COLUMNS, height), dpi=90)
    canvas = FigureCanvasAgg(figure)
    # Fixed margins in inches (title band, legend band) instead of a layout pass, which would draw twice.
    axes_grid = figure.subplots(rows, _COLUMNS, squeeze=False, gridspec_kw={
        "left": 0.02, "right": 0.99, "wspace": 0.12, "hspace": 0.75,
        "top": 1 - ((0.35 if title else 0.0) + 0.25) / height, "bottom": 0.55 / height})
    for axes, (name, unit, curves, note) in zip(axes_grid.ravel(), panels):
        for source, colour, style, (edges, density), n in curves:
            axes.stairs(density, edges, color=colour, linestyle=style, linewidth=1.4, label=f"{source} (n={n})")
        axes.set_title(f"{name}" + (f" ({unit})" if unit else ""), fontsize=8.5)
        if note:
            axes.text(0.5, 0.5, note, ha="center", va="center", fontsize=8, transform=axes.transAxes)
            axes.set_xticks([])
        axes.tick_params(labelsize=7, length=2)
        axes.set_yticks([])
    for axes in axes_grid.ravel()[len(panels):]:
        axes.set_axis_off()
    first = next(i for i, (_, _, curves, _) in enumerate(panels) if curves)
    handles, labels = axes_grid.ravel()[first].get_legend_handles_labels()
    figure.legend(handles, [label.split(" (")[0] for label in labels], loc="lower center", ncol=3, fontsize=8,
                  frameon=False)
    if title:
        figure.suptitle(title, fontsize=9)
    canvas.draw()
    width, height_px = canvas.get_width_height()
    return palette_png(Image.frombuffer("RGBA", (width, height_px), canvas.buffer_rgba(), "raw", "RGBA", 0, 1), 32)


def with_factor_plots(result, plots_dir):
    """Write ``result``'s factor histograms as ``plots_dir/factors.png``; the result with its path under ``plots``.

    Parameters
    ----------
    result : augplan.results.CoverageResult
        From `augplan.coverage.coverage.analyse_coverage`.
    plots_dir : str or Path
        Created if missing; the folder is written whole or not at all
        (`augplan.atomic.publish_folder`).

    Returns
    -------
    augplan.results.CoverageResult
    """
    plots_dir = Path(plots_dir)
    check_output(plots_dir, folder=True)
    data = factor_grid(result["factors"], title=f"recipe {result['recipe']}")
    if data is None:
        publish_folder({}, plots_dir)
        return dataclasses.replace(result, plots=[])
    publish_folder({"factors.png": data}, plots_dir)
    return dataclasses.replace(result, plots=[str(plots_dir / "factors.png")])
