"""Rendering: the HTML report, text tables, plots and contact sheets.

The only layer that draws or writes figures. It reads typed results
(`augplan.results`) and imports no analysis; `augplan.vet` calls it.
"""

from augplan.render.figures import embed_image, embed_png
from augplan.render.page import render_report

__all__ = ["render_report", "embed_png", "embed_image"]
