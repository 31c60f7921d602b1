"""The one torch training loop (``semisup.pretrain.train_epochs``) and M2's frozen config.

References: a loop written out with torch's documented optimiser protocol (``zero_grad``,
``backward``, ``clip_grad_norm_``, ``step``) must give bit-identical weights; early stopping
is checked on hand-made monitored values; M2's config against scikit-learn's ``get_params``.
"""

from __future__ import annotations

import inspect

import pytest
import torch
from torch.nn import functional as F

from semisup import ConfigError
from semisup._progress import Progress
from semisup.methods import M2Classifier, M2Config
from semisup.pretrain import train_epochs


def _data():
    gen = torch.Generator().manual_seed(0)
    X = torch.randn(64, 3, generator=gen)
    y = X @ torch.tensor([1.0, -2.0, 0.5]) + 0.1 * torch.randn(64, generator=gen)
    return X, y


def _linear() -> torch.nn.Linear:
    torch.manual_seed(1)
    return torch.nn.Linear(3, 1)


def test_loop_steps_exactly_as_a_plain_torch_loop():
    X, y = _data()
    net = _linear()
    optimiser = torch.optim.SGD(net.parameters(), lr=0.05)

    def losses(epoch):
        for start in range(0, 64, 16):
            yield F.mse_loss(net(X[start:start + 16]).squeeze(1), y[start:start + 16])

    result = train_epochs(net, optimiser, losses, max_epochs=5, grad_clip=0.5)
    ref = _linear()
    ref_optimiser = torch.optim.SGD(ref.parameters(), lr=0.05)
    for _ in range(5):
        for start in range(0, 64, 16):
            ref_optimiser.zero_grad()
            F.mse_loss(ref(X[start:start + 16]).squeeze(1), y[start:start + 16]).backward()
            torch.nn.utils.clip_grad_norm_(ref.parameters(), 0.5)
            ref_optimiser.step()
    assert torch.equal(net.weight, ref.weight) and torch.equal(net.bias, ref.bias)
    assert (result.epochs, result.steps, result.best_epoch) == (5, 20, None)
    assert not result.stopped_early and not net.training


def test_early_stopping_restores_the_best_epoch_with_its_optimiser_state():
    # Hand-made monitored values: epoch 2 is best (3.0); epoch 4's 3.00005 does not beat it
    # by more than tol = 1e-4, so with patience 3 the loop stops after epoch 5.
    X, y = _data()
    net = _linear()
    optimiser = torch.optim.Adam(net.parameters(), lr=0.1)
    values = [1.0, 3.0, 2.0, 3.00005, 2.5, 9.0]
    weights, adam_steps = [], []

    def losses(epoch):
        yield F.mse_loss(net(X).squeeze(1), y)

    def monitor(epoch):
        weights.append(net.weight.detach().clone())
        adam_steps.append(float(optimiser.state[net.weight]["step"]))
        return values[epoch - 1]

    with Progress(len(values), "epochs", enabled=False) as progress:
        result = train_epochs(net, optimiser, losses, max_epochs=len(values), monitor=monitor,
                              patience=3, tol=1e-4, keep_optimizer=True, progress=progress)
    assert result.stopped_early and result.epochs == 5 and result.best_epoch == 2
    assert result.monitored == values[:5] and progress.done == 5
    assert torch.equal(net.weight, weights[1])
    assert float(optimiser.state[net.weight]["step"]) == adam_steps[1] == 2.0


def test_patience_counts_only_after_the_first_epochs():
    X, y = _data()
    net = _linear()
    optimiser = torch.optim.SGD(net.parameters(), lr=0.01)

    def losses(epoch):
        yield F.mse_loss(net(X).squeeze(1), y)

    # the value never improves after epoch 1; patience 2 counted from epoch 4 on -> stop at 5
    result = train_epochs(net, optimiser, losses, max_epochs=10, monitor=lambda e: -float(e),
                          patience=2, patience_after=3)
    assert result.epochs == 5 and result.best_epoch == 1 and result.stopped_early


def test_m2_parameters_are_its_config_fields_with_the_same_defaults():
    # Reference: scikit-learn's get_params (read from __init__) lists M2's parameters.
    params = M2Classifier().get_params()
    fields = {name: getattr(M2Config, name) for name in M2Config.__dataclass_fields__}
    assert params == fields
    signature = inspect.signature(M2Classifier)
    assert list(signature.parameters) == list(M2Config.__dataclass_fields__)
    cfg = M2Classifier(latent_dim=8, random_state=5).set_params(alpha=0.5).config()
    assert (cfg.latent_dim, cfg.alpha, cfg.random_state) == (8, 0.5, 5)
    with pytest.raises(ConfigError, match="latent_dim=0"):
        M2Classifier(latent_dim=0).config()
    with pytest.raises(ConfigError, match="learning_rate"):
        M2Config(learning_rate=0.0)
