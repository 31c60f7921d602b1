"""Benchmark of the unsupervised stage (semisup.pretrain); every ratio is against a reference
measured in the same run.

Epoch times are CPU seconds of the (single-threaded) process, so load from other processes on
a shared machine cancels out of the ratios; wall-clock rows per second are reported as well.

(a) overhead: VAETransformer epoch time against a bare PyTorch loop with the same
    architecture, likelihood, optimiser, gradient clipping, batch size, thread count and data
    (goal: ratio <= 1.10). Measured twice: without held-out rows (the loop alone) and with the
    default 10% held-out slice scored every epoch for early stopping (bare loop then trains
    on the same 90%).
(b) scale: rows per second and peak resident memory of VAE training on 1,000,000 x 50 (one
    epoch of the default settings: 900,000 training rows, 3,516 minibatch steps of 256, plus
    the held-out ELBO on 100,000 rows), with the bare loop's rows per CPU second on the same
    rows as reference (toolkit and bare epochs interleaved in one process); then the
    BIC-selected mixture on the same data (grid scored on a 20,000-row subsample, chosen model
    refitted on all rows), with a single direct scikit-learn GaussianMixture fit of the chosen
    model on all rows as reference.

Each scale part runs in its own subprocess so its peak RSS (``resource.getrusage``) is its own.

    PYTHONPATH=. python benchmarks/bench_pretrain.py            # everything (~5-10 min)
    PYTHONPATH=. python benchmarks/bench_pretrain.py --quick    # small sizes, smoke run
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import statistics
import subprocess
import sys
import time

import numpy as np
import torch
from torch import nn
from torch.nn import functional as F

HIDDEN = (128, 64)
LATENT = 16
BATCH = 256
LR = 3e-3
CLIP = 10.0
MIN_VAR = 1e-3


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: KiB


def make_data(n_rows: int, n_features: int = 50, seed: int = 0) -> np.ndarray:
    """Rows from a 5-cluster, 6-dim latent model pushed through a random nonlinear map."""
    rng = np.random.default_rng(seed)
    centres = rng.normal(scale=3.0, size=(5, 6))
    W1 = rng.normal(size=(6, 32)) / math.sqrt(6)
    W2 = rng.normal(size=(32, n_features)) / math.sqrt(32)
    out = np.empty((n_rows, n_features), dtype=np.float32)
    for start in range(0, n_rows, 100_000):
        m = min(100_000, n_rows - start)
        z = centres[rng.integers(0, 5, size=m)] + rng.normal(size=(m, 6))
        x = np.tanh(z @ W1) @ W2 + 0.1 * rng.normal(size=(m, n_features))
        out[start : start + m] = x
    return out


# -- bare PyTorch reference --------------------------------------------------------------------


def bare_epochs(X: np.ndarray, epochs: int, seed: int = 0) -> list[float]:
    """Seconds per epoch of a hand-written VAE loop: same network, Gaussian likelihood with a
    learned per-feature variance, KL to N(0, I), Adam, gradient clipping, batch size."""
    torch.manual_seed(seed)
    d = X.shape[1]
    mean, sd = X.mean(0), X.std(0)
    data = torch.from_numpy(((X - mean) / np.where(sd > 1e-8, sd, 1.0)).astype(np.float32))
    encoder = nn.Sequential(
        nn.Linear(d, HIDDEN[0]), nn.ReLU(), nn.Linear(HIDDEN[0], HIDDEN[1]), nn.ReLU()
    )
    to_mu, to_logvar = nn.Linear(HIDDEN[1], LATENT), nn.Linear(HIDDEN[1], LATENT)
    decoder = nn.Sequential(
        nn.Linear(LATENT, HIDDEN[1]),
        nn.ReLU(),
        nn.Linear(HIDDEN[1], HIDDEN[0]),
        nn.ReLU(),
        nn.Linear(HIDDEN[0], d),
    )
    raw_var = nn.Parameter(torch.zeros(d))
    params = [
        *encoder.parameters(),
        *to_mu.parameters(),
        *to_logvar.parameters(),
        *decoder.parameters(),
        raw_var,
    ]
    opt = torch.optim.Adam(params, lr=LR)
    n = data.shape[0]
    times = []
    log2pi = math.log(2 * math.pi)
    for _ in range(epochs):
        started = time.process_time()  # CPU seconds: robust to other load on the machine
        order = torch.randperm(n)
        for s in range(0, n, BATCH):
            xb = data.index_select(0, order[s : s + BATCH])
            h = encoder(xb)
            mu, logvar = to_mu(h), to_logvar(h)
            z = mu + torch.randn_like(mu) * torch.exp(0.5 * logvar)
            out = decoder(z)
            var = MIN_VAR + F.softplus(raw_var)
            rec = -0.5 * (log2pi + torch.log(var) + (xb - out).pow(2) / var).sum(1)
            kl = -0.5 * (1 + logvar - mu.pow(2) - logvar.exp()).sum(1)
            loss = -(rec - kl).mean()
            opt.zero_grad(set_to_none=True)
            loss.backward()
            torch.nn.utils.clip_grad_norm_(params, CLIP)
            opt.step()
        times.append(time.process_time() - started)
    return times


def toolkit_epochs(X: np.ndarray, epochs: int, validation_fraction: float) -> list[float]:
    from semisup.pretrain import VAETransformer

    vae = VAETransformer(
        latent_dim=LATENT,
        hidden=HIDDEN,
        batch_size=BATCH,
        learning_rate=LR,
        grad_clip=CLIP,
        max_epochs=epochs,
        patience=epochs + 1,
        validation_fraction=validation_fraction,
        n_threads=1,
        random_state=0,
    ).fit(X)
    return [row["cpu_seconds"] for row in vae.history_]


# -- parts -------------------------------------------------------------------------------------


def part_overhead(n_rows: int, epochs: int, repeats: int) -> dict:
    torch.set_num_threads(1)
    X = make_data(n_rows)
    n_train = n_rows - int(np.floor(n_rows * 0.1))
    X90 = X[np.sort(np.random.default_rng(1).permutation(n_rows)[:n_train])]
    runs: dict[str, list[float]] = {
        "toolkit_all": [],
        "bare_all": [],
        "toolkit_90": [],
        "bare_90": [],
    }
    for rep in range(repeats):  # interleaved, so machine load hits all alike
        runs["toolkit_all"].append(statistics.median(toolkit_epochs(X, epochs, 0.0)[1:]))
        runs["bare_all"].append(statistics.median(bare_epochs(X, epochs, rep)[1:]))
        runs["toolkit_90"].append(statistics.median(toolkit_epochs(X, epochs, 0.1)[1:]))
        runs["bare_90"].append(statistics.median(bare_epochs(X90, epochs, rep)[1:]))
    med = {k: statistics.median(v) for k, v in runs.items()}
    return {
        "rows": n_rows,
        "features": X.shape[1],
        "epochs": epochs,
        "repeats": repeats,
        "epoch_seconds": med,
        "ratio_loop": med["toolkit_all"] / med["bare_all"],
        "ratio_with_heldout": med["toolkit_90"] / med["bare_90"],
    }


def part_vae_scale(n_rows: int) -> dict:
    """Default fit (one epoch) for memory and throughput, then toolkit and bare epochs
    interleaved in this same process for the ratio (bare loops run after the memory reading,
    since they make their own scaled copy of the data)."""
    from semisup.pretrain import VAETransformer

    torch.set_num_threads(1)
    X = make_data(n_rows)
    rss_data = peak_rss_mb()
    toolkit_epochs(X[:20_000], 1, 0.1)  # warm-up (first kernels, allocator)
    bare_epochs(X[:20_000], 1)
    started = time.perf_counter()
    vae = VAETransformer(max_epochs=1, n_threads=1, random_state=0).fit(X)
    fit_seconds = time.perf_counter() - started
    rss_fit = peak_rss_mb()
    epoch_seconds = vae.history_[0]["seconds"]
    n_train = vae.diagnostics_["n_train_rows"]
    started = time.perf_counter()
    Z = vae.transform(X)
    transform_seconds = time.perf_counter() - started
    rss_transform = peak_rss_mb()
    toolkit_cpu = [vae.history_[0]["cpu_seconds"]]
    X_train = X[np.sort(np.random.default_rng(1).permutation(n_rows)[:n_train])]
    bare_cpu = [bare_epochs(X_train, 1)[0]]
    toolkit_cpu.append(toolkit_epochs(X, 1, 0.1)[0])
    bare_cpu.append(bare_epochs(X_train, 1)[0])
    return {
        "rows": n_rows,
        "features": X.shape[1],
        "data_mb": X.nbytes / 2**20,
        "train_rows": n_train,
        "steps": vae.diagnostics_["steps"],
        "epoch_seconds": epoch_seconds,
        "fit_seconds": fit_seconds,
        "train_rows_per_second": n_train / epoch_seconds,
        "epoch_cpu_seconds": toolkit_cpu,
        "bare_epoch_cpu_seconds": bare_cpu,
        "train_rows_per_cpu_second": n_train / statistics.mean(toolkit_cpu),
        "bare_rows_per_cpu_second": n_train / statistics.mean(bare_cpu),
        "ratio_to_bare_cpu": statistics.mean(toolkit_cpu) / statistics.mean(bare_cpu),
        "transform_rows_per_second": n_rows / transform_seconds,
        "latent_shape": list(Z.shape),
        "peak_rss_mb_after_data": rss_data,
        "peak_rss_mb_after_fit": rss_fit,
        "peak_rss_mb_after_transform": rss_transform,
    }


def part_mixture_scale(n_rows: int) -> dict:
    from semisup.pretrain import MixtureTransformer

    X = make_data(n_rows)
    rss_data = peak_rss_mb()
    started, cpu_started = time.perf_counter(), time.process_time()
    mix = MixtureTransformer(random_state=0).fit(X)
    fit_seconds = time.perf_counter() - started
    fit_cpu_seconds = time.process_time() - cpu_started
    rss_fit = peak_rss_mb()
    started = time.perf_counter()
    mix.transform(X)
    transform_seconds = time.perf_counter() - started
    return {
        "rows": n_rows,
        "features": X.shape[1],
        "data_mb": X.nbytes / 2**20,
        "chosen": [mix.n_components_, mix.covariance_type_],
        "candidates": len(mix.selection_),
        "final_em_iterations": mix.n_iter_,
        "fit_seconds": fit_seconds,
        "fit_rows_per_second": n_rows / fit_seconds,
        "selection_seconds": mix.diagnostics_["selection_seconds"],
        "fit_cpu_seconds": fit_cpu_seconds,
        "transform_rows_per_second": n_rows / transform_seconds,
        "peak_rss_mb_after_data": rss_data,
        "peak_rss_mb_after_fit": rss_fit,
        "peak_rss_mb": peak_rss_mb(),
    }


def part_mixture_reference(n_rows: int, k: int, cov: str) -> dict:
    from sklearn.mixture import GaussianMixture
    from threadpoolctl import threadpool_limits

    X = make_data(n_rows)
    rss_data = peak_rss_mb()
    started, cpu_started = time.perf_counter(), time.process_time()
    with threadpool_limits(limits=1):  # same thread count as MixtureTransformer's default
        gm = GaussianMixture(k, covariance_type=cov, random_state=0).fit(X)
    seconds = time.perf_counter() - started
    cpu_seconds = time.process_time() - cpu_started
    return {
        "fit_seconds": seconds,
        "fit_cpu_seconds": cpu_seconds,
        "em_iterations": int(gm.n_iter_),
        "peak_rss_mb_after_data": rss_data,
        "peak_rss_mb": peak_rss_mb(),
    }


def _subprocess(*args: str) -> dict:
    cmd = [sys.executable, __file__, "--part", *args]
    done = subprocess.run(cmd, check=True, capture_output=True, text=True, env=os.environ)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes (smoke run)")
    parser.add_argument("--part", nargs="+", help=argparse.SUPPRESS)
    parser.add_argument(
        "--skip",
        nargs="*",
        default=[],
        help="parts to skip: overhead vae-scale mixture-scale mixture-reference",
    )
    args = parser.parse_args(argv)
    if args.part:
        name, *rest = args.part
        if name == "overhead":
            result = part_overhead(int(rest[0]), int(rest[1]), int(rest[2]))
        elif name == "vae-scale":
            result = part_vae_scale(int(rest[0]))
        elif name == "mixture-scale":
            result = part_mixture_scale(int(rest[0]))
        else:
            result = part_mixture_reference(int(rest[0]), int(rest[1]), rest[2])
        sys.stdout.write(json.dumps(result) + "\n")
        return 0
    big = 20_000 if args.quick else 1_000_000
    results: dict[str, dict] = {"machine": {"cpus": os.cpu_count(), "torch": torch.__version__}}
    if "overhead" not in args.skip:
        size, epochs, repeats = ("5000", "4", "1") if args.quick else ("50000", "6", "3")
        results["overhead"] = _subprocess("overhead", size, epochs, repeats)
        sys.stderr.write(json.dumps(results["overhead"]) + "\n")
    if "vae-scale" not in args.skip:
        results["vae_scale"] = _subprocess("vae-scale", str(big))
        sys.stderr.write(json.dumps(results["vae_scale"]) + "\n")

    if "mixture-scale" not in args.skip:
        results["mixture_scale"] = mix = _subprocess("mixture-scale", str(big))
        sys.stderr.write(json.dumps(mix) + "\n")
        if "mixture-reference" not in args.skip:
            k, cov = mix["chosen"]
            ref = _subprocess("mixture-reference", str(big), str(k), cov)
            ref["ratio_cpu"] = mix["fit_cpu_seconds"] / ref["fit_cpu_seconds"]
            results["mixture_reference"] = ref
            sys.stderr.write(json.dumps(results["mixture_reference"]) + "\n")
    sys.stdout.write(json.dumps(results, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
