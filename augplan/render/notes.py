"""The report's closing sections: the decision rules (appendix) and the data notes."""

from __future__ import annotations

from augplan.render.formatting import escape, number_text, table_html

__all__ = ["data_notes_section", "appendix_section"]

# Pairs listed in full; a long list is summarised (evidence.json keeps all).
_LEAKS_SHOWN = 25


_HOW_TO_READ_CHECK = ("<p><strong>How to read this.</strong> Each transform was judged in two stages. "
                   "The <em>screen</em> applies it to every training image and asks, with a model that "
                   "never saw that image, whether the transformed image still lands in its own class; "
                   "a transform it clears is safe. Every other transform is <em>confirmed by "
                   "training</em>: the same small model is trained with the transform and without it, "
                   "and both are scored on original images they did not see. A transform breaks when "
                   "one named class is then mistaken for another far more often, and the screen saw "
                   "the transformed images land in that class; it is safe when no class loses more "
                   "than the stated margin; otherwise it is unverified and a person must look.</p>")


def _leaks_block(leaks):
    """Images shared between splits: a tally by kind, then the first `_LEAKS_SHOWN` pairs."""
    if not leaks:
        return "<p>None found (exact copies and near copies by perceptual hash).</p>"
    out = ['<p class="warn">These images appear in two splits: a model is scored on images it was '
           "trained on, which inflates every score. Remove one copy of each pair.</p>"]
    tally = {}
    for leak in leaks:
        key = (leak["kind"], " / ".join(leak["splits"]))
        tally[key] = tally.get(key, 0) + 1
    out.append("<p>" + "; ".join(f"{n} {escape(kind)} {'pair' if n == 1 else 'pairs'} across {escape(splits)}"
                                 for (kind, splits), n in sorted(tally.items())) + ".</p>")
    rows = [[escape(leak["kind"]), f"<code>{escape(leak['a'])}</code>", f"<code>{escape(leak['b'])}</code>",
             escape(" / ".join(leak["splits"])), number_text(leak["distance"])] for leak in leaks[:_LEAKS_SHOWN]]
    out.append(table_html(["kind", "image", "copy", "splits", "hash distance (of 64 bits)"], rows, numeric=(4,)))
    if len(leaks) > _LEAKS_SHOWN:
        out.append(f'<p class="note">The first {_LEAKS_SHOWN} of {len(leaks)} pairs; evidence.json lists '
                   "them all.</p>")
    return "".join(out)


def data_notes_section(data):
    """The data notes: images per split, classes, the fingerprint, skipped files and shared images.

    Parameters
    ----------
    data : augplan.results.DatasetSummary

    Returns
    -------
    str
        A ``<section id="data-notes">``.
    """
    out = ['<section id="data-notes"><h2>Data notes</h2>',
           "<p>Images per split: " + ", ".join(f"{escape(k)} {escape(v)}" for k, v in data.counts.items()) + ".</p>",
           f"<p>Classes ({len(data.classes)}): " + ", ".join(escape(c) for c in data.classes) + ".</p>",
           f"<p class=\"note\">Full data fingerprint: <code>{escape(data.fingerprint)}</code></p>"]
    if data.val_from_train:
        out.append('<p class="warn">There is no <code>val/</code> folder: validation is a stratified split of '
                   f"<code>train/</code> (seed {escape(data.split_seed)}). Scores on it are "
                   "less independent than on a separately collected validation set.</p>")
    out.append("<h3>Skipped files</h3>")
    if data.skipped:
        out.append(table_html(["file", "reason"],
                              [[f"<code>{escape(path)}</code>", escape(reason)] for path, reason in data.skipped]))
    else:
        out.append("<p>None: every file was read as an image.</p>")
    out.append("<h3>Images shared between splits</h3>")
    out.append(_leaks_block(data.leaks))
    out.append("</section>")
    return "".join(out)


def appendix_section(report):
    """The decision rules behind every word of the report, each once.

    Parameters
    ----------
    report : augplan.results.VetReport

    Returns
    -------
    str
        A ``<section id="appendix">``.
    """
    out = ['<section id="appendix"><h2>Appendix: decision rules</h2>']
    if report.recipes:
        out.append(_HOW_TO_READ_CHECK)
    rules = []
    for entry in report.recipes:
        for title, text in (("Label safety", entry.check.decision_rule),
                            ("Shortcuts", entry.coverage.shortcut_rule)):
            if (title, text) not in rules:
                rules.append((title, text))
    rules.append(("Recommendation and leaderboard order", report.ranking_rule))
    rules.append(("Intervals", report.evaluation.accuracy_interval))
    out.extend(f"<p><strong>{escape(title)}.</strong> {escape(text)}</p>" for title, text in rules)
    out.append("</section>")
    return "".join(out)
