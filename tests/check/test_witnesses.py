"""The confirmation's witnesses (augplan/check/witnesses.py): what each network trains on and from what seed.

Ground truth by construction: a "transform" that leaves every image as it
was must leave the network trained on the replaced images identical to the
baseline network, when both start from the same weights and batch order.
"""

import numpy as np
import pytest

pytest.importorskip("torch")

import augplan.check.screen as screen  # noqa: E402
import augplan.check.witnesses as witnesses  # noqa: E402
from augplan.check import check_recipe  # noqa: E402
from augplan.data import open_dataset  # noqa: E402
from augplan.measure.convnet import ConvNetClassifier  # noqa: E402
from augplan.measure.models import ConvNet  # noqa: E402
from augplan.recipe.parse import Recipe, Transform  # noqa: E402

TINY_CNN = ConvNet(params=(("widths", (4, 8)), ("steps", 6), ("min_epochs", 1)))


def test_a_replaced_network_differs_from_the_baseline_only_by_its_images(tiny_dataset, monkeypatch):
    # The baseline and every replaced network of a fold share their weights'
    # seed and batch order (common random numbers): with the images left as
    # they were, the replaced network predicts exactly as the baseline does.
    monkeypatch.setattr(witnesses, "_replaced_images",
                        lambda context, images, t, rng: (images.copy(), context.labels.copy()))
    monkeypatch.setattr(screen, "screen_clears", lambda *args, **kwargs: False)
    seen, starts = [], []
    judge, fit = witnesses.judge, ConvNetClassifier.fit

    def spy(labels, base_pred, predictions, *args):
        seen.append(predictions)
        return judge(labels, base_pred, predictions, *args)

    def recording_fit(self, images, labels, rng, *args, **kwargs):
        starts.append(rng.bit_generator.state["state"]["state"])
        return fit(self, images, labels, rng, *args, **kwargs)

    monkeypatch.setattr(witnesses, "judge", spy)
    monkeypatch.setattr(ConvNetClassifier, "fit", recording_fit)
    recipe = Recipe(name="flip", transforms=(Transform("flip", {"axis": "horizontal"}),))
    check_recipe(open_dataset(tiny_dataset), recipe, rng=np.random.default_rng(0), size=16, model=TINY_CNN)
    assert seen and "replace_base" in seen[0]
    np.testing.assert_array_equal(seen[0]["replace"], seen[0]["replace_base"])
    # Fits in order: the baseline's two folds, then the transform's. Each
    # fold's pair starts from one state; the two folds from different ones.
    assert len(starts) == 4
    assert starts[0] == starts[2] and starts[1] == starts[3] and starts[0] != starts[1]
