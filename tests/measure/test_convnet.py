"""The small network's input statistics (augplan.measure.convnet)."""

import numpy as np
import pytest

pytest.importorskip("torch")

from augplan.measure.convnet import _channel_statistics  # noqa: E402


@pytest.mark.parametrize("shape", [(7, 5, 4, 3), (3, 9, 9, 1)])
def test_channel_statistics_match_numpy_on_the_float_copy(shape):
    # Reference: numpy's own mean and (population) std of the float64 copy the
    # statistics avoid making. Both sum the same 256 exact values in float64,
    # in different orders: agreement to 1e-12 relative is float64 rounding.
    images = np.random.default_rng(3).integers(0, 256, size=shape, dtype=np.uint8)
    pixels = images.reshape(-1, shape[-1]).astype(np.float64) / 255.0
    mean, std = _channel_statistics(images)
    np.testing.assert_allclose(mean, pixels.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(std, pixels.std(axis=0), rtol=1e-12)


def test_channel_statistics_of_a_flat_channel_are_its_value_and_zero():
    images = np.full((2, 4, 4, 3), 51, dtype=np.uint8)
    mean, std = _channel_statistics(images)
    # 51 / 255 = 0.2 exactly in decimal; float64 division is correctly rounded.
    np.testing.assert_array_equal(mean, np.full(3, 51 / 255.0))
    np.testing.assert_array_equal(std, np.zeros(3))


def _weights(model):
    return [value.detach().numpy().copy() for value in model.network_.state_dict().values()]


def test_a_fit_without_the_nan_fill_learns_the_same_weights_and_restores_torch_settings(monkeypatch):
    # Deterministic mode's NaN fill of new buffers exists to expose kernels
    # that read memory they never wrote: with it on, such a read would turn
    # the weights to NaN or change them. Equal weights bit for bit, fill on
    # and off, show that no kernel of this network reads unwritten memory.
    import torch

    import augplan.measure.convnet as convnet

    images = np.random.default_rng(0).integers(0, 256, size=(40, 16, 16, 3), dtype=np.uint8)
    labels = np.arange(40) % 4
    fill_before = torch.utils.deterministic.fill_uninitialized_memory
    deterministic_before = torch.are_deterministic_algorithms_enabled()
    without_fill = convnet.ConvNetClassifier(steps=4).fit(images, labels, np.random.default_rng(1))
    assert torch.utils.deterministic.fill_uninitialized_memory == fill_before
    assert torch.are_deterministic_algorithms_enabled() == deterministic_before

    @convnet.contextlib.contextmanager
    def filling_block():
        with original_block():
            torch.utils.deterministic.fill_uninitialized_memory = True
            yield

    original_block = convnet._deterministic_one_thread
    monkeypatch.setattr(convnet, "_deterministic_one_thread", filling_block)
    with_nan_fill = convnet.ConvNetClassifier(steps=4).fit(images, labels, np.random.default_rng(1))
    for a, b in zip(_weights(without_fill), _weights(with_nan_fill)):
        np.testing.assert_array_equal(a, b)
    assert all(np.all(np.isfinite(w)) for w in _weights(with_nan_fill))


def test_pooling_before_relu_learns_the_weights_of_the_textbook_order(monkeypatch):
    # Reference: the textbook block built from torch's own layers, ReLU
    # before max pooling. ReLU is monotone, so it commutes with max pooling
    # forward and backward; the product's block pools first, and a fit must
    # learn the same weights bit for bit (same float operations, reordered
    # only where no arithmetic happens).
    from torch import nn

    import augplan.measure.convnet as convnet

    def textbook(n_channels, widths, n_classes):
        layers, previous = [], n_channels
        for width in widths:
            layers += [nn.Conv2d(previous, width, 3, padding=1, bias=False), nn.BatchNorm2d(width),
                       nn.ReLU(inplace=True), nn.MaxPool2d(2)]
            previous = width
        return nn.Sequential(*layers, nn.AdaptiveAvgPool2d(4), nn.Flatten(), nn.Linear(previous * 16, n_classes))

    images = np.random.default_rng(2).integers(0, 256, size=(48, 16, 16, 3), dtype=np.uint8)
    labels = np.arange(48) % 3
    product = convnet.ConvNetClassifier(steps=6).fit(images, labels, np.random.default_rng(3))
    assert isinstance(product.network_[2], nn.MaxPool2d) and isinstance(product.network_[3], nn.ReLU)
    monkeypatch.setattr(convnet, "_network", textbook)
    reference = convnet.ConvNetClassifier(steps=6).fit(images, labels, np.random.default_rng(3))
    for a, b in zip(_weights(product), _weights(reference)):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(product.predict(images), reference.predict(images))
