"""M2 / M1+M2 (Kingma, Rezende, Mohamed & Welling 2014) against references outside the project.

References: torch.distributions (Normal, Bernoulli, OneHotCategorical, Categorical and
kl_divergence) for every term of the objective; scikit-learn's bundled digits and its
LogisticRegression for the paper's qualitative result (M2 well ahead of a supervised
classifier trained on the same few labels).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import torch
from _methods_support import digits_few_labels
from torch import distributions as D

from semisup.methods import get_method
from semisup.methods._m2 import M2Classifier, M2Net, infer_layout, m2_row_terms, m2_unlabeled_elbo


def _mixed_table(n=40, seed=0):
    # Two numeric columns, one 0/1 indicator, one 3-way one-hot group (the encoder's layout).
    rng = np.random.default_rng(seed)
    numeric = rng.normal(size=(n, 2))
    flag = (rng.random(n) < 0.3).astype(float)
    group = np.eye(3)[rng.integers(3, size=n)]
    return np.column_stack([numeric, flag, group])


def test_layout_is_read_from_the_values():
    layout = infer_layout(_mixed_table())
    assert layout.numeric == (0, 1) and layout.missing == (2,)
    assert layout.categorical == ((3, 6),)


def test_every_objective_term_matches_torch_distributions():
    # Source: torch.distributions log_prob / entropy / kl_divergence for the same parameters.
    torch.manual_seed(0)
    X = torch.as_tensor(_mixed_table(), dtype=torch.float32)
    layout = infer_layout(X.numpy())
    index = layout.tensors()
    k, latent = 3, 4
    net = M2Net(X.shape[1], k, 8, latent, len(layout.numeric))
    with torch.no_grad():
        net.raw_variance.copy_(torch.tensor([0.3, -0.2]))
    y = torch.randint(k, (X.shape[0],))
    y1 = torch.eye(k)[y]
    log_prior = torch.full((k,), -math.log(k))
    eps = torch.randn(X.shape[0], latent)
    rec, kl, elbo = m2_row_terms(net, X, y1, layout, index, log_prior, eps)

    h = net.enc(torch.cat([X, y1], 1))
    mu, logvar = net.enc_mu(h), net.enc_logvar(h)
    q_z = D.Normal(mu, torch.exp(0.5 * logvar))
    expected_kl = D.kl_divergence(q_z, D.Normal(torch.zeros_like(mu), torch.ones_like(mu)))
    torch.testing.assert_close(kl, expected_kl.sum(1))
    out = net.dec(torch.cat([mu + torch.exp(0.5 * logvar) * eps, y1], 1))
    var = net.variance()
    expected_rec = (
        D.Normal(out[:, :2], var.sqrt()).log_prob(X[:, :2]).sum(1)
        + D.Bernoulli(logits=out[:, 2]).log_prob(X[:, 2])
        + D.OneHotCategorical(logits=out[:, 3:6]).log_prob(X[:, 3:6])
    )
    torch.testing.assert_close(rec, expected_rec)
    prior = D.Categorical(probs=torch.full((k,), 1.0 / k))
    torch.testing.assert_close(elbo, expected_rec + prior.log_prob(y) - expected_kl.sum(1))

    # Unlabeled rows: sum_y q(y|x) ELBO(x, y) + H(q(y|x)), the same noise for each class.
    eps_u = torch.randn(k * X.shape[0], latent)
    got_u = m2_unlabeled_elbo(net, X, layout, index, log_prior, eps_u)
    q_y = D.Categorical(logits=net.clf(X))
    per_class = torch.stack([
        m2_row_terms(net, X, torch.eye(k)[torch.full((X.shape[0],), c)], layout, index,
                     log_prior, eps_u[c * X.shape[0]:(c + 1) * X.shape[0]])[2]
        for c in range(k)
    ], dim=1)
    torch.testing.assert_close(got_u, (q_y.probs * per_class).sum(1) + q_y.entropy())
    # The classifier's labeled term is the categorical log-likelihood of the label.
    torch.testing.assert_close(
        torch.nn.functional.cross_entropy(net.clf(X), y), -q_y.log_prob(y).mean())


def test_same_seed_same_model_and_early_stopping_on_labels():
    X = _mixed_table(n=120)
    y = np.where(X[:, 0] + X[:, 3] > 0.5, 1, 0)
    y_partial = np.full(120, -1)
    y_partial[:40] = y[:40]
    a = M2Classifier(max_epochs=15, hidden=16, min_validation_per_class=2,
                     random_state=3).fit(X, y_partial)
    b = M2Classifier(max_epochs=15, hidden=16, min_validation_per_class=2,
                     random_state=3).fit(X, y_partial)
    np.testing.assert_array_equal(a.predict_proba(X), b.predict_proba(X))
    # 40 labels, two classes: 8 labeled rows held out for early stopping; then a warm start
    # with every label for a quarter of the best epoch count (not a refit from scratch).
    assert 1 <= len(a.history_) <= 15
    assert a.history_[a.best_epoch_ - 1] == pytest.approx(min(a.history_), abs=1e-4)
    assert a.n_epochs_ == a.best_epoch_ + math.ceil(0.25 * a.best_epoch_)


def test_early_stopping_keeps_the_best_epochs_network():
    # With no warm start the fitted classifier is the best epoch's: its log-loss on the
    # held-out labeled rows (scikit-learn's log_loss) is the smallest of the history.
    from sklearn.metrics import log_loss

    X = _mixed_table(n=120)
    y = np.where(X[:, 0] + X[:, 3] > 0.5, 1, 0)
    y_partial = np.full(120, -1)
    y_partial[:40] = y[:40]
    m = M2Classifier(max_epochs=12, hidden=16, patience=2, refit_fraction=0.0,
                     min_validation_per_class=2, random_state=3).fit(X, y_partial)
    val = m._validation_rows(y[:40], 3)
    got = log_loss(y[val], m.predict_proba(X[val]), labels=[0, 1])
    assert got == pytest.approx(min(m.history_), abs=1e-5)
    assert m.n_epochs_ == m.best_epoch_ <= len(m.history_)
    # 8 held-out labels for 2 classes is under the default 5 per class: no early stopping.
    plain = M2Classifier(max_epochs=3, hidden=16, random_state=3).fit(X, y_partial)
    assert plain.history_ == [] and plain.n_epochs_ == 3


def test_m2_and_m1_m2_are_registered_generative_methods():
    assert get_method("m2").representation == "raw"
    assert get_method("m1-m2").representation == "vae"
    assert {get_method(n).family for n in ("m2", "m1-m2")} == {"generative"}


@pytest.mark.slow
def test_m2_well_ahead_of_supervised_on_digits_at_two_labels_per_class():
    # Source: Kingma et al. 2014 (Table 1: M2 far ahead of supervised baselines with few
    # labels per class); data: scikit-learn's bundled digits; reference: LogisticRegression
    # on the same 20 labels. "Well ahead" = 0.05 or more: common practice, no source.
    from sklearn.linear_model import LogisticRegression

    X, y, y_partial = digits_few_labels(per_class=2)
    unl = y_partial < 0
    m2 = M2Classifier(max_epochs=40, random_state=0).fit(X, y_partial)
    lab = ~unl
    ref = LogisticRegression(max_iter=1000).fit(X[lab], y[lab])
    acc_m2 = np.mean(m2.predict(X[unl]) == y[unl])
    acc_ref = np.mean(ref.predict(X[unl]) == y[unl])
    assert acc_m2 >= acc_ref + 0.05, (acc_m2, acc_ref)


def test_blend_is_scikit_learn_label_spreading_at_weight_zero_and_the_average_between():
    # Source: scikit-learn's LabelSpreading (kNN kernel) on the min-max scaled rows gives the
    # blend's probabilities at m2_weight=0; at 0.3 the blend is 0.3 M2 + 0.7 spreading.
    from sklearn.preprocessing import MinMaxScaler
    from sklearn.semi_supervised import LabelSpreading

    from semisup.methods import M2SpreadingBlend

    X = _mixed_table(n=90)
    y = np.where(X[:, 0] + X[:, 3] > 0.5, 1, 0)
    y_partial = np.full(90, -1)
    y_partial[:20] = y[:20]
    ref = LabelSpreading(kernel="knn", n_neighbors=7, alpha=0.2, max_iter=30, tol=1e-3)
    Xs = MinMaxScaler().fit_transform(X)
    ref.fit(Xs, y_partial)
    blend0 = M2SpreadingBlend(m2_weight=0.0, max_epochs=2, random_state=0).fit(X, y_partial)
    np.testing.assert_allclose(blend0.predict_proba(X), ref.predict_proba(Xs), atol=1e-9)
    blend = M2SpreadingBlend(m2_weight=0.3, max_epochs=2, random_state=0).fit(X, y_partial)
    expected = 0.3 * blend.m2_.predict_proba(X) + 0.7 * ref.predict_proba(Xs)
    np.testing.assert_allclose(blend.predict_proba(X), expected, atol=1e-6)
    assert get_method("m2-spreading").family == "generative"
