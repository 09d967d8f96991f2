"""The files a vetting run writes: figures, vetted recipes, evidence and report, gathered before any is written.

Every output is computed first and written last, each file atomically, so an
interrupted run leaves the output folder without partial files.
"""

import dataclasses
import json
from pathlib import Path


__all__ = ["draws_sheet", "collect_figures", "render_with_figures", "output_files"]

# Draws shown per recipe: one training image per class and five draws of it,
# in cells small enough that a report of several recipes stays compact.
_DRAWS_SHEET = {"per_class": 1, "draws": 5, "cell": 64}


def draws_sheet(dataset, recipe, rng):
    """A contact sheet of augmented draws of ``recipe`` (as `preview` draws it), as JPEG bytes; None without training images.

    ``rng`` is the sheet's own `numpy.random.Generator`.
    """
    from augplan.render.plots import jpeg_bytes
    from augplan.render.sheets import preview_sheet

    if not dataset.split("train"):
        return None
    return jpeg_bytes(preview_sheet(dataset, recipe, rng=rng, **_DRAWS_SHEET))


def _with_sheet(row, path):
    """A check row with its ``evidence_sheet`` replaced, of the row's own type."""
    document = {**row, "evidence_sheet": path}
    return type(row).from_json(document) if hasattr(type(row), "from_json") else document


def _collect_one(number, entry, figures):
    """``entry`` with its evidence sheets' paths made relative to the output folder; their bytes go into ``figures``."""
    transforms = []
    for transform in entry.check["transforms"]:
        sheet = transform.get("evidence_sheet")
        if sheet and Path(sheet).is_file():
            name = f"{number}-{entry.name}-transform-{transform['index']}.png"
            figures[name] = Path(sheet).read_bytes()
            transform = _with_sheet(transform, f"figures/{name}")
        transforms.append(transform)
    return dataclasses.replace(entry, check=dataclasses.replace(entry.check, transforms=transforms))


def collect_figures(entries):
    """The evidence sheets of every recipe, read from the checker's scratch folder.

    Returns
    -------
    entries : list of VettedRecipe
        With paths ``figures/<name>``, relative to the output folder; the
        report is rendered from a staging folder laid out the same way.
    figures : dict
        ``{name: bytes}``.
    """
    figures = {}
    entries = [_collect_one(number, entry, figures) for number, entry in enumerate(entries)]
    return entries, figures


def render_with_figures(report, figures, staging):
    """The HTML report of a `VetReport`, its figures read from a staging folder laid out like the output folder."""
    from augplan.render import render_report

    (staging / "figures").mkdir(parents=True)
    for name, data in figures.items():
        (staging / "figures" / name).write_bytes(data)
    return render_report(report, base_dir=staging)


def output_files(documents, figures, report, html):
    """Every output file as ``{relative path: bytes}``: vetted recipes, figures, evidence, report (last)."""
    evidence_text = json.dumps(report, indent=2, allow_nan=False, default=str)
    files = {name: text.encode("utf-8") for name, text in documents.items()}
    files.update({f"figures/{name}": data for name, data in figures.items()})
    files["evidence.json"] = (evidence_text + "\n").encode("utf-8")
    files["report.html"] = html.encode("utf-8")
    return files
