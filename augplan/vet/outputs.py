"""The files a vetting run writes: figures, vetted recipes, evidence and report, gathered before any is written.

Every output is computed first and written last, each file atomically, so an
interrupted run leaves the output folder without partial files.
"""

import json


__all__ = ["draws_sheet", "evidence_figures", "render_with_figures", "output_files"]

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


def evidence_figures(check, number, recipe_name):
    """Draw the check's evidence sheets, named as the output folder will hold them.

    Parameters
    ----------
    check : CheckResult
    number : int
        The recipe's position in the run (names stay unique across recipes).
    recipe_name : str

    Returns
    -------
    check : CheckResult
        With each sheet's path, ``figures/<name>``, relative to the output folder.
    figures : dict
        ``{name: PNG bytes}``.
    """
    from augplan.render.sheets import evidence_sheets, png_bytes

    figures, paths = {}, {}
    for index, (_, image) in evidence_sheets(check.evidence).items():
        name = f"{number}-{recipe_name}-transform-{index}.png"
        figures[name], paths[index] = png_bytes(image), f"figures/{name}"
    return check.with_evidence_sheets(paths), figures


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
