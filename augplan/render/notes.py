"""The report's closing sections: the decision rules (appendix) and the data notes."""

from __future__ import annotations

from augplan.render.formatting import DASH, escape, number_text, table_html

__all__ = ["data_notes_section", "appendix_section"]

# Pairs listed in full; a long list is summarised (evidence.json keeps all).
_LEAKS_SHOWN = 25


def data_notes_section(evidence):
    data = evidence.get("data") or {}
    out = ['<section id="data-notes"><h2>Data notes</h2>']
    counts = data.get("counts") or {}
    if isinstance(counts, dict) and counts:
        out.append("<p>Images per split: " + ", ".join(f"{escape(k)} {escape(v)}" for k, v in counts.items()) + ".</p>")
    classes = data.get("classes") or []
    if classes:
        out.append(f"<p>Classes ({len(classes)}): " + ", ".join(escape(c) for c in classes) + ".</p>")
    if data.get("fingerprint"):
        out.append(f"<p class=\"note\">Full data fingerprint: <code>{escape(data['fingerprint'])}</code></p>")
    if data.get("val_from_train"):
        seed = data.get("split_seed")
        out.append('<p class="warn">There is no <code>val/</code> folder: validation is a stratified split of '
                   f"<code>train/</code> (seed {escape(seed if seed is not None else DASH)}). Scores on it are "
                   "less independent than on a separately collected validation set.</p>")
    skipped = [s for s in (data.get("skipped") or []) if s]
    out.append("<h3>Skipped files</h3>")
    if skipped:
        rows = [[f"<code>{escape(s[0] if isinstance(s, (list, tuple)) else s)}</code>",
                 escape(s[1] if isinstance(s, (list, tuple)) and len(s) > 1 else "")] for s in skipped]
        out.append(table_html(["file", "reason"], rows))
    else:
        out.append("<p>None: every file was read as an image.</p>")
    leaks = [leak for leak in (data.get("leaks") or []) if isinstance(leak, dict)]
    out.append("<h3>Images shared between splits</h3>")
    if leaks:
        out.append('<p class="warn">These images appear in two splits: a model is scored on images it was '
                   "trained on, which inflates every score. Remove one copy of each pair.</p>")
        tally = {}
        for leak in leaks:
            key = (str(leak.get("kind", "?")), " / ".join(str(s) for s in leak.get("splits") or []))
            tally[key] = tally.get(key, 0) + 1
        out.append("<p>" + "; ".join(f"{n} {escape(kind)} {'pair' if n == 1 else 'pairs'} across {escape(splits)}"
                                     for (kind, splits), n in sorted(tally.items())) + ".</p>")
        rows = [[escape(leak.get("kind", "?")), f"<code>{escape(leak.get('a', '?'))}</code>",
                 f"<code>{escape(leak.get('b', '?'))}</code>", escape(" / ".join(str(s) for s in leak.get("splits") or [])),
                 number_text(leak.get("distance"))] for leak in leaks[:_LEAKS_SHOWN]]
        out.append(table_html(["kind", "image", "copy", "splits", "hash distance (of 64 bits)"], rows, numeric=(4,)))
        if len(leaks) > _LEAKS_SHOWN:
            out.append(f'<p class="note">The first {_LEAKS_SHOWN} of {len(leaks)} pairs; evidence.json lists '
                       "them all.</p>")
    else:
        out.append("<p>None found (exact copies and near copies by perceptual hash).</p>")
    out.append("</section>")
    return "".join(out)


_HOW_TO_READ_CHECK = ("<p><strong>How to read this.</strong> Each transform was judged in two stages. "
                   "The <em>screen</em> applies it to every training image and asks, with a model that "
                   "never saw that image, whether the transformed image still lands in its own class; "
                   "a transform it clears is safe. Every other transform is <em>confirmed by "
                   "training</em>: the same small model is trained with the transform and without it, "
                   "and both are scored on original images they did not see. A transform breaks when "
                   "one named class is then mistaken for another far more often, and the screen saw "
                   "the transformed images land in that class; it is safe when no class loses more "
                   "than the stated margin; otherwise it is unverified and a person must look.</p>")


def appendix_section(evidence, recipes):
    out = ['<section id="appendix"><h2>Appendix: decision rules</h2>']
    if any((entry.get("check") or {}).get("decision_rule") for entry in recipes):
        out.append(_HOW_TO_READ_CHECK)
    rules = []
    for entry in recipes:
        check_rule = (entry.get("check") or {}).get("decision_rule")
        if check_rule and ("Label safety", check_rule) not in rules:
            rules.append(("Label safety", check_rule))
        shortcut_rule = (entry.get("coverage") or {}).get("shortcut_rule")
        if shortcut_rule and ("Shortcuts", shortcut_rule) not in rules:
            rules.append(("Shortcuts", shortcut_rule))
    if evidence.get("ranking_rule"):
        rules.append(("Recommendation and leaderboard order", evidence["ranking_rule"]))
    interval = (evidence.get("evaluation") or {}).get("accuracy_interval")
    if interval:
        rules.append(("Intervals", interval))
    if not rules:
        out.append('<p class="note">No decision rules were recorded.</p>')
    for title, text in rules:
        out.append(f"<p><strong>{escape(title)}.</strong> {escape(text)}</p>")
    out.append("</section>")
    return "".join(out)
