"""Label safety: would training with a transform teach wrong labels?

A transform breaks labels when training with it makes the model confuse
classes on original images. The checker decides in two stages, each in its
own module; `check_recipe` reads as their outline.

1. The checked sample (`augplan.check.sample`) and the proxy's out-of-fold
   view of it, with each class's region in feature space
   (`augplan.check.folds`, `augplan.check.regions`).
2. The screen (`augplan.check.screen`): every transform at every grid
   value; it clears a transform whose images stay in their class.
3. Confirmation (`augplan.check.witnesses`, `augplan.check.confirm`): every
   transform the screen does not clear is trained with and without, and
   the confusions on held-out originals decide; the screen must have
   witnessed a swap too.
4. The verdict rows (`augplan.check.verdicts`), once the lighting-shortcut
   pass (`augplan.check.shortcut`) has said whether a lighting move may
   follow a shortcut of the data; suggestions and safe limits.
5. Evidence examples as data (`augplan.check.evidence`); the render layer
   draws them.

The rule in words is `augplan.check.rules.DECISION_RULE`.

References
----------
.. [1] E. B. Wilson, "Probable inference, the law of succession, and
   statistical inference", JASA 22(158), 209-212, 1927.
.. [2] T. M. Cover and P. E. Hart, "Nearest neighbor pattern
   classification", IEEE Trans. Information Theory 13(1), 21-27, 1967.
.. [3] M. D. Ernst, "Permutation methods: a basis for exact inference",
   Statistical Science 19(4), 676-685, 2004.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from augplan.check.decoded import sample_key
from augplan.check.evidence import evidence_items
from augplan.check.folds import check_models, fit_baseline
from augplan.check.plan import WorkContext, plan_transform
from augplan.check.rules import DECISION_RULE
from augplan.check.sample import checked_sample
from augplan.check.screen import run_screen, screen_transform
from augplan.check.shortcut import shortcut_findings
from augplan.check.verdicts import draft, transform_verdict
from augplan.check.witnesses import confirm_all, network_folds
from augplan.data import load_images
from augplan.errors import BadInputError
from augplan.measure.models import FALLBACK_NAME, FALLBACK_WARNING
from augplan.results import CheckResult
from augplan.seeding import keyed_generator, require_generator, stream_root
from augplan.thresholds import MIN_IMAGES_PER_CLASS

__all__ = ["check_recipe"]


@dataclasses.dataclass(frozen=True)
class _Streams:
    """The check's generator split once, one child per purpose (`augplan.seeding`)."""

    sample: np.random.Generator
    model: np.random.Generator
    folds: np.random.Generator
    regions: np.random.Generator
    draws: np.random.Generator
    screen: np.random.Generator
    bootstrap: np.random.Generator
    network: np.random.Generator
    network_folds: np.random.Generator
    shortcut: np.random.Generator
    evidence: np.random.Generator

    @classmethod
    def spawn(cls, rng):
        return cls(*require_generator(rng).spawn(len(dataclasses.fields(cls))))


def _options(sample, magnitudes):
    """Validate the checker's options at the boundary."""
    if sample is not None and (isinstance(sample, bool) or int(sample) != sample or sample < MIN_IMAGES_PER_CLASS):
        raise BadInputError(f"--sample must be an integer of at least {MIN_IMAGES_PER_CLASS}; got {sample!r}.")
    if isinstance(magnitudes, bool) or int(magnitudes) != magnitudes or magnitudes < 2:
        raise BadInputError(f"magnitudes must be an integer of at least 2; got {magnitudes!r}.")


class _Clock:
    """Wall time of each stage into a caller's dict (or nowhere)."""

    def __init__(self, timings):
        self.timings, self._start = timings, time.perf_counter()

    def lap(self, stage):
        now = time.perf_counter()
        if self.timings is not None:
            self.timings[stage] = now - self._start
        self._start = now


def _context(recipe, sample, size, plans, baseline, template, network, rng):
    """What every work unit of the screen and the confirmation reads (small: records, not images)."""
    records, labels, classes = sample
    return WorkContext(
        transforms=list(recipe.transforms), scope=[p.scope for p in plans], records=records, size=size,
        sample_key=sample_key(records, size), fill=recipe.fill, template=template, models=baseline.models,
        n_classes=len(classes), geometry=baseline.geometry,
        expected=[p.expected for p in plans], labels=labels, folds=baseline.folds, features=baseline.features,
        n_folds=len(baseline.models), draws=[p.draws[0] for p in plans], values=[p.values for p in plans],
        network=network if network is not None and not network.uses_features else None,
        network_folds=network_folds(labels, rng))


def _model_document(baseline, network, size):
    witness = network.name if network is not None else "linear"
    return {"cv_accuracy": round(baseline.cv_accuracy, 4), "chance": round(baseline.chance, 4),
            "weak": baseline.weak, "folds": len(baseline.models),
            # The model trained on replaced images (the first witness of a break) and
            # the side every image was read and trained at.
            "confirmation": witness, "side": int(size)}


def _baseline_document(baseline, labels, classes):
    return {classes[c]: {"change_rate": round(float(baseline.change[c]), 4),
                         "leave_rate": round(float(baseline.leave[c]), 4),
                         "cv_recall": round(float(np.mean(baseline.predictions[labels == c] == c)), 4)}
            for c in range(len(classes))}


def _plans(recipe, classes, labels, magnitudes, rng):
    """Each step's `augplan.check.plan.Plan`, its draws from the stream keyed by its position."""
    root = stream_root(rng)
    return [plan_transform(t, classes, labels, magnitudes, keyed_generator(root, i))
            for i, t in enumerate(recipe.transforms)]


def _model_warnings(network, baseline):
    """Warnings about the models: the network's fallback, a weak proxy."""
    warnings = [FALLBACK_WARNING] if network is not None and network.name == FALLBACK_NAME else []
    if baseline.weak:
        warnings.append(f"the feature model is weak (cross-validated accuracy {baseline.cv_accuracy:.2f}, "
                        f"chance {baseline.chance:.2f}); nothing is called safe")
    return warnings


def check_recipe(dataset, recipe, *, rng, model=None, sample=None, size=64, magnitudes=7, workers=1, quiet=True,
                 timings=None):
    """Check every transform of a recipe for label safety (screen, then confirmation).

    Parameters
    ----------
    dataset : augplan.data.Dataset
        Only its ``train`` split is used (and a labelled ``field`` split, by
        the lighting-shortcut pass).
    recipe : augplan.recipe.Recipe
    rng : numpy.random.Generator
        Split once into one child per purpose (sample, folds, regions,
        draws, screen, bootstrap, network, shortcut pass, evidence); work
        units take keyed streams of their child (keyed by the step's
        position), so results depend neither on ``workers`` nor on the
        steps that follow. The command line makes it from ``--seed``.
    model : {'cnn', 'linear'} or str or FeatureModel, optional
        The first witness of a break, the model trained on replaced images
        (`augplan.measure.models`): None (`CHECK_DEFAULT_MODEL`, the linear
        proxy) or ``'linear'``; ``'cnn'``, the network; ``'module:callable'``,
        the team's training function. The screen, the safety test and the
        safe limits use the linear proxy in every case; a `FeatureModel`
        replaces that proxy and serves as the first witness too.
    sample : int, optional
        At most this many training images per class (drawn from ``rng``).
    size : int, default 64
        Side of the squares images are read and trained at (``--side``);
        larger images are reduced by area averaging. ``model.side`` says it.
    magnitudes : int, default 7
        Grid values per magnitude range (both ends included).
    workers : int, default 1
        Processes for the work units; results do not depend on it.
    quiet : bool, default True
        Hide the progress bar.
    timings : dict, optional
        Filled with the wall time in seconds of each stage (``"baseline"``,
        ``"screen"``, ``"confirmation"``, ``"safe limits"``), kept out of the document.

    Returns
    -------
    augplan.results.CheckResult
        The ``check --json`` document: ``transforms`` holds one
        `augplan.results.TransformVerdict` a step; ``evidence`` (not in the
        JSON) the `augplan.results.EvidenceItem` examples of the steps not
        safe, for `augplan.render.sheets.evidence_sheets` to draw.

    Raises
    ------
    BadInputError
        Fewer than two classes with at least 3 training images, an unusable
        ``sample`` or ``magnitudes``.
    """
    _options(sample, magnitudes)
    streams, clock, warnings = _Streams.spawn(rng), _Clock(timings), []
    records, labels, classes = sample_ = checked_sample(dataset, sample, streams.sample, warnings)
    images = load_images(records, size=size)
    template, network = check_models(model, streams.model)
    baseline = fit_baseline(images, labels, len(classes), template, (streams.folds, streams.regions), workers, quiet)
    warnings.extend(_model_warnings(network, baseline))
    clock.lap("baseline")
    plans = _plans(recipe, classes, labels, magnitudes, streams.draws)
    context = _context(recipe, sample_, size, plans, baseline, template, network, streams.network_folds)
    screen = run_screen(context, images, plans, baseline, streams.screen, workers, quiet)
    screened = [screen_transform(plan, screen, t, labels, baseline) if len(plan.scope) else None
                for t, plan in enumerate(plans)]
    clock.lap("screen")
    judged = confirm_all(context, images, plans, screen, screened, baseline, (streams.bootstrap, streams.network),
                         workers, quiet, clock)
    drafts = [draft(t, step, plans[t], screened[t], judged, classes, warnings)
              for t, step in enumerate(recipe.transforms)]
    findings = shortcut_findings(drafts, images, labels, classes, dataset, size, streams.shortcut)
    rows = [transform_verdict(fields, findings.get(fields["index"])) for fields in drafts]
    return CheckResult(recipe=recipe.name, model=_model_document(baseline, network, size),
                       baseline=_baseline_document(baseline, labels, classes), transforms=rows, warnings=warnings,
                       decision_rule=DECISION_RULE, n_images=int(len(labels)),
                       evidence=evidence_items(rows, screen, plans, list(recipe.transforms), sample_, recipe.fill,
                                               streams.evidence))
