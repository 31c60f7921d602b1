"""VAETransformer checked against closed-form models and real data outside the project."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA, FactorAnalysis
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import train_test_split

from semisup import ConfigError, DataError
from semisup.data import FeatureBlock
from semisup.pretrain import VAEConfig, VAETransformer


def _linear_gaussian(n: int = 1000, d: int = 8, k: int = 2, seed: int = 0) -> np.ndarray:
    """Rows from x = W z + b + noise, z ~ N(0, I), noise with a different variance per column."""
    rng = np.random.default_rng(seed)
    W = rng.normal(size=(d, k)) * 2
    noise_sd = rng.uniform(0.3, 1.0, size=d)
    return (
        rng.normal(size=(n, k)) @ W.T
        + rng.normal(size=d) * 3
        + rng.normal(size=(n, d)) * (noise_sd)
    )


def _linear_vae(k: int, decoder_variance: str, scale: str) -> VAETransformer:
    # Full-batch Adam on the exact (sampling-free) ELBO of the linear model.
    return VAETransformer(
        hidden=(),
        latent_dim=k,
        beta=1.0,  # the ELBO itself: only its optimum equals the exact likelihood
        validation_fraction=0.0,
        batch_size=100000,
        max_epochs=3000,
        learning_rate=0.1,
        kl_warmup_epochs=0,
        patience=100,
        tol=0.0,
        grad_clip=None,
        decoder_variance=decoder_variance,
        scale=scale,
        random_state=0,
    )


@pytest.mark.slow
@pytest.mark.parametrize(
    ("decoder_variance", "scale", "reference"),
    [
        # Per-feature noise variance: factor analysis (Lucas et al. 2019, section 4).
        ("feature", "standard", lambda k: FactorAnalysis(k, tol=1e-10, max_iter=20000)),
        # One shared noise variance: probabilistic PCA (Tipping & Bishop 1999); PPCA is not
        # scale-invariant, so the model sees the raw columns.
        ("isotropic", "none", lambda k: PCA(n_components=k)),
    ],
)
def test_linear_vae_reaches_the_exact_maximum_likelihood(decoder_variance, scale, reference):
    X = _linear_gaussian()
    k = 2
    # Reference: scikit-learn's exact maximum log-likelihood, FactorAnalysis(...).score /
    # PCA(...).score (mean log-likelihood per row). Lucas et al. 2019 ("Don't blame the
    # ELBO") show the linear VAE's optimum equals it.
    exact = reference(k).fit(X).score(X)
    elbo = _linear_vae(k, decoder_variance, scale).fit(X).score(X)
    # ELBO <= log-likelihood <= max log-likelihood; 1e-4 relative slack for float32 rounding.
    assert elbo <= exact + 1e-4 * abs(exact)
    assert exact - elbo <= max(0.01 * abs(exact), 0.05)


@pytest.mark.slow
def test_digits_latent_means_keep_the_class_information():
    X, y = load_digits(return_X_y=True)  # scikit-learn's digits: real data, 1,797 x 64
    Z = VAETransformer(random_state=0).fit(X / 16.0).transform(X / 16.0)
    Z_train, Z_test, y_train, y_test = train_test_split(
        Z, y, test_size=0.3, stratify=y, random_state=0
    )
    accuracy = LogisticRegression(max_iter=2000).fit(Z_train, y_train).score(Z_test, y_test)
    # Target from the issue; from memory, raw pixels give about 0.97 with this protocol.
    assert accuracy >= 0.90


def test_same_seed_same_data_gives_bit_identical_latent_means():
    X = _linear_gaussian(n=300, d=6, seed=3)
    params = dict(latent_dim=3, hidden=(16, 8), max_epochs=15, batch_size=32)
    a = VAETransformer(**params, random_state=7).fit(X).transform(X)
    b = VAETransformer(**params, random_state=7).fit(X).transform(X)
    c = VAETransformer(**params, random_state=8).fit(X).transform(X)
    np.testing.assert_array_equal(a, b)  # bit for bit (no tolerance)
    assert not np.array_equal(a, c)


def _mixed_table(n: int = 400, seed: int = 0):
    """Two numeric columns, a missing indicator and a 3-level one-hot block."""
    rng = np.random.default_rng(seed)
    group = rng.integers(0, 3, size=n)
    numeric = rng.normal(size=(n, 2)) + group[:, None]
    missing = (rng.random(n) < 0.2 + 0.2 * group).astype(float)
    onehot = np.eye(3)[group]
    X = np.column_stack([numeric[:, 0], missing, onehot, numeric[:, 1]]).astype(np.float32)
    blocks = (
        FeatureBlock("numeric", 0, 1, "weight"),
        FeatureBlock("missing", 1, 2, "weight"),
        FeatureBlock("categorical", 2, 5, "region"),
        FeatureBlock("numeric", 5, 6, "height"),
    )
    return X, blocks, group


def test_mixed_blocks_fit_sample_and_diagnose():
    X, blocks, _ = _mixed_table()
    vae = VAETransformer(latent_dim=2, hidden=(16,), max_epochs=30, blocks=blocks).fit(X)
    Z = vae.transform(X)
    assert Z.shape == (400, 2) and Z.dtype == np.float64
    draws = vae.sample(50, random_state=1)
    assert draws.shape == (50, 6)
    assert set(np.unique(draws[:, 1])) <= {0.0, 1.0}
    np.testing.assert_array_equal(draws[:, 2:5].sum(axis=1), np.ones(50))
    np.testing.assert_array_equal(vae.sample(5, random_state=1), vae.sample(5, random_state=1))
    diag = vae.diagnostics_
    assert set(diag["reconstruction"]) == {
        "numeric_rmse",
        "missing_error_rate",
        "categorical_error_rate",
    }
    assert 0 <= diag["active_units"] <= 2
    assert diag["heldout_elbo"] is not None and diag["epochs"] >= 1
    scores = vae.score_samples(X)
    assert scores.shape == (400,) and np.isfinite(scores).all()
    assert vae.score(X) == pytest.approx(scores.mean())


def test_categorical_block_learns_the_observed_frequencies():
    # An intercept-only categorical likelihood must learn the empirical frequencies
    # (maximum likelihood of a multinomial, a textbook fact, common practice, no source).
    rng = np.random.default_rng(5)
    picks = rng.choice(3, size=2000, p=[0.6, 0.3, 0.1])
    X = np.eye(3)[picks].astype(np.float32)
    blocks = (FeatureBlock("categorical", 0, 3, "colour"),)
    vae = VAETransformer(latent_dim=1, hidden=(4,), max_epochs=40, blocks=blocks).fit(X)
    freq = vae.sample(4000, random_state=0).mean(axis=0)
    np.testing.assert_allclose(freq, np.bincount(picks, minlength=3) / 2000, atol=0.04)


def test_plain_autoencoder_has_no_kl_and_no_sampler():
    X = _linear_gaussian(n=300, d=6, seed=4)
    ae = VAETransformer(kind="ae", latent_dim=2, hidden=(16,), max_epochs=10).fit(X)
    assert ae.transform(X).shape == (300, 2)
    with pytest.raises(ConfigError, match="kind='vae'"):
        ae.sample(3)


def test_bad_values_and_parameters_are_clear_errors():
    X, blocks, _ = _mixed_table()
    X_bad = X.copy()
    X_bad[3, 1] = 0.5
    with pytest.raises(DataError, match="missing-indicator column 1 .*'weight'"):
        VAETransformer(blocks=blocks, max_epochs=1).fit(X_bad)
    X_bad = X.copy()
    X_bad[7, 2:5] = 0
    with pytest.raises(DataError, match="'region'.*row 7"):
        VAETransformer(blocks=blocks, max_epochs=1).fit(X_bad)
    with pytest.raises(ConfigError, match="kind='gan'"):
        VAETransformer(kind="gan").fit(X)
    with pytest.raises(ConfigError, match="unknown VAE parameter 'depth'"):
        VAEConfig.from_params({"depth": 3})


def test_transformer_defaults_mirror_the_config_defaults():
    params = VAETransformer().get_params()
    params.pop("blocks")
    assert VAEConfig(**params) == VAEConfig()


def test_nan_input_is_a_one_line_data_error():
    X = _linear_gaussian(n=50, d=4)
    X[3, 2] = np.nan
    with pytest.raises(
        DataError, match="VAETransformer cannot use X: Input X contains NaN"
    ) as info:
        VAETransformer(max_epochs=1).fit(X)
    assert "\n" not in str(info.value)


def test_training_logs_epochs_without_a_terminal(caplog):
    X = _linear_gaussian(n=100, d=4)
    with caplog.at_level("DEBUG", logger="semisup.pretrain"):
        vae = VAETransformer(latent_dim=2, hidden=(8,), max_epochs=3, progress=True).fit(X)
    epoch_lines = [r for r in caplog.records if r.getMessage().startswith("epoch ")]
    assert len(epoch_lines) == vae.n_epochs_ == len(vae.history_)
    assert all("seconds" in row and "train_elbo" in row for row in vae.history_)


def test_progress_bar_counts_epochs_on_a_terminal(monkeypatch):
    # The bar is semisup._progress.Progress's (tqdm on a terminal): one update per epoch run,
    # closed at the end, none when progress=False.
    import io
    import sys

    from semisup import _progress

    class FakeBar:  # stands in for tqdm, which adds the ETA from total and updates
        def __init__(self, total):
            self.total, self.updates, self.closed = total, 0, False

        def update(self, n):
            self.updates += n

        def set_postfix(self, **values):
            pass

        def close(self):
            self.closed = True

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    bars = []
    monkeypatch.setattr(sys, "stderr", Terminal())
    monkeypatch.setattr(
        _progress, "_bar", lambda total, what, stream: bars.append(FakeBar(total)) or bars[-1]
    )
    X = _linear_gaussian(n=100, d=4)
    vae = VAETransformer(latent_dim=2, hidden=(8,), max_epochs=4, progress=True).fit(X)
    (bar,) = bars
    assert bar.total == 4 and bar.updates == vae.n_epochs_ and bar.closed
    bars.clear()
    VAETransformer(latent_dim=2, hidden=(8,), max_epochs=2, progress=False).fit(X)
    assert bars == []
