"""The one torch training loop (:func:`train_epochs`: epochs, optimiser steps, early stopping,
best-state copy, progress) and the VAE's use of it (:func:`train_module`: Adam, KL warm-up,
gradient clipping, early stopping on held-out rows). Works on tensors already in memory."""

from __future__ import annotations

import contextlib
import copy
import logging
import math
import sys
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field

import torch

from .._progress import Progress
from ._config import VAEConfig
from ._likelihood import BlockLayout
from ._vae import VAEModule, row_terms

__all__ = ["EpochLoop", "TrainResult", "evaluate_rows", "pinned_threads", "torch_state",
           "train_epochs", "train_module"]

logger = logging.getLogger(__name__)

#: Rows per forward pass when scoring without gradients.
EVAL_CHUNK_ROWS = 16384


@dataclass
class TrainResult:
    """What happened during training (ELBOs in nats per row, in the model's scaled units)."""

    epochs: int
    best_epoch: int
    stopped_early: bool
    steps: int
    history: list[dict[str, float]] = field(default_factory=list)


@dataclass
class EpochLoop:
    """What :func:`train_epochs` did.

    ``best_epoch`` is None when nothing was monitored or no epoch improved on the start;
    ``monitored`` holds the monitored value of every epoch and ``seconds`` /
    ``cpu_seconds`` each epoch's wall and CPU time.
    """

    epochs: int
    best_epoch: int | None
    stopped_early: bool
    steps: int
    monitored: list[float] = field(default_factory=list)
    seconds: list[float] = field(default_factory=list)
    cpu_seconds: list[float] = field(default_factory=list)


class pinned_threads:
    """Pin torch's thread count for a block (None leaves it alone)."""

    def __init__(self, n_threads: int | None) -> None:
        self.n_threads = n_threads
        self.previous = 0

    def __enter__(self) -> None:
        self.previous = torch.get_num_threads()
        if self.n_threads is not None and self.n_threads != self.previous:
            torch.set_num_threads(int(self.n_threads))

    def __exit__(self, *exc: object) -> None:
        if torch.get_num_threads() != self.previous:
            torch.set_num_threads(self.previous)


@contextlib.contextmanager
def torch_state(seed: int, n_threads: int | None) -> Iterator[None]:
    """Seed torch, pin the thread count and ask for deterministic kernels; restore after.

    The caller's global RNG, thread count and determinism flag are left as they were.
    """
    previous_det = torch.are_deterministic_algorithms_enabled()
    previous_warn = torch.is_deterministic_algorithms_warn_only_enabled()
    with torch.random.fork_rng(devices=[]), pinned_threads(n_threads):
        torch.manual_seed(seed)
        torch.use_deterministic_algorithms(True, warn_only=True)
        try:
            yield
        finally:
            torch.use_deterministic_algorithms(previous_det, warn_only=previous_warn)


def train_epochs(
    module: torch.nn.Module,
    optimizer: torch.optim.Optimizer,
    batch_losses: Callable[[int], Iterable[torch.Tensor]],
    *,
    max_epochs: int,
    monitor: Callable[[int], float] | None = None,
    patience: int | None = None,
    tol: float = 0.0,
    patience_after: int = 0,
    grad_clip: float | None = None,
    keep_optimizer: bool = False,
    progress: Progress | None = None,
) -> EpochLoop:
    """Train ``module`` for at most ``max_epochs`` epochs and keep its best monitored state.

    Parameters
    ----------
    module, optimizer
        The network (put in training mode at the start of every epoch, in evaluation mode at
        the end) and the optimiser over its parameters.
    batch_losses : callable
        ``batch_losses(epoch)`` yields the loss (a scalar tensor to minimise) of each
        minibatch of the epoch (1-based); after each yield the loop runs ``backward``, clips
        the gradients and steps the optimiser, so the code after a ``yield`` sees the update.
    max_epochs : int
    monitor : callable, optional
        ``monitor(epoch)`` after each epoch: the value to maximise (a held-out ELBO, minus a
        validation log-loss). An epoch whose value beats the best so far by more than
        ``tol`` is the new best: the module's state (with ``keep_optimizer`` the optimiser's
        too) is copied and restored at the end. None: every epoch runs, the last state stays.
    patience : int, optional
        Stop after this many epochs without a new best (counted only after
        ``patience_after`` epochs); None never stops early.
    grad_clip : float, optional
        Most global gradient norm (None: no clipping).
    progress : Progress, optional
        Told of every finished epoch.
    """
    params = [p for p in module.parameters() if p.requires_grad]
    best_value = -math.inf
    best_state: tuple[dict, dict | None] | None = None
    result = EpochLoop(epochs=0, best_epoch=None, stopped_early=False, steps=0)
    wait = 0
    for epoch in range(1, int(max_epochs) + 1):
        started, cpu_started = time.perf_counter(), time.process_time()
        module.train()
        for loss in batch_losses(epoch):
            optimizer.zero_grad(set_to_none=True)
            loss.backward()
            if grad_clip is not None:
                torch.nn.utils.clip_grad_norm_(params, grad_clip)
            optimizer.step()
            result.steps += 1
        result.epochs = epoch
        if monitor is not None:
            value = monitor(epoch)
            result.monitored.append(value)
            if value > best_value + tol:
                best_value, result.best_epoch, wait = value, epoch, 0
                best_state = (
                    {k: v.detach().clone() for k, v in module.state_dict().items()},
                    copy.deepcopy(optimizer.state_dict()) if keep_optimizer else None,
                )
            elif epoch > patience_after:
                wait += 1
        result.seconds.append(time.perf_counter() - started)
        result.cpu_seconds.append(time.process_time() - cpu_started)
        if progress is not None:
            progress.update()
        if patience is not None and monitor is not None and wait >= patience:
            result.stopped_early = True
            break
    if best_state is not None:
        module.load_state_dict(best_state[0])
        if best_state[1] is not None:
            optimizer.load_state_dict(best_state[1])
    module.eval()
    return result


@torch.no_grad()
def evaluate_rows(
    module: VAEModule,
    X: torch.Tensor,
    layout: BlockLayout,
    index: tuple[torch.Tensor, torch.Tensor],
    eps: torch.Tensor | None,
    *,
    chunk_rows: int = EVAL_CHUNK_ROWS,
) -> tuple[torch.Tensor, torch.Tensor]:
    """Per-row reconstruction log-likelihood and KL, each (n_rows,), computed in chunks.

    ``eps`` of shape (latent,) is shared by every row, so a row's value does not depend on
    which other rows are in the chunk.
    """
    module.eval()
    recs, kls = [], []
    for start in range(0, X.shape[0], chunk_rows):
        rec, kl, _ = row_terms(module, X[start : start + chunk_rows], layout, index, eps)
        recs.append(rec)
        kls.append(kl)
    if not recs:
        empty = X.new_zeros(0)
        return empty, empty
    return torch.cat(recs), torch.cat(kls)


def _objective(rec: torch.Tensor, kl: torch.Tensor, beta: float) -> float:
    return float((rec - beta * kl).mean())


class _VAEEpochs:
    """The VAE's minibatches (with the KL warm-up) and its monitored objective, per epoch."""

    def __init__(self, module, X, train_index, X_val, layout, config, shuffle_seed,
                 monitor_eps) -> None:
        self.module, self.X, self.train_index, self.X_val = module, X, train_index, X_val
        self.layout, self.config, self.monitor_eps = layout, config, monitor_eps
        self.index = layout.tensors()
        self.n_rows = X.shape[0] if train_index is None else train_index.shape[0]
        self.batch_size = min(config.batch_size, self.n_rows)
        self.warmup_steps = config.kl_warmup_epochs * math.ceil(self.n_rows / self.batch_size)
        self.variational = config.kind == "vae"
        self.generator = torch.Generator().manual_seed(shuffle_seed)
        self.step = 0
        self.running = torch.zeros((), dtype=torch.float64)
        self.history: list[dict[str, float]] = []
        self.started = time.perf_counter()

    def losses(self, epoch: int) -> Iterator[torch.Tensor]:
        config, variational = self.config, self.variational
        order = torch.randperm(self.n_rows, generator=self.generator)
        if self.train_index is not None:
            order = self.train_index[order]
        self.running = torch.zeros((), dtype=torch.float64)
        for start in range(0, self.n_rows, self.batch_size):
            batch = self.X.index_select(0, order[start : start + self.batch_size])
            if variational and self.warmup_steps > 0:
                beta_now = config.beta * min(1.0, (self.step + 1) / self.warmup_steps)
            else:
                beta_now = config.beta if variational else 0.0
            rec, kl, _ = row_terms(self.module, batch, self.layout, self.index)
            objective = rec - beta_now * kl  # (batch,)
            yield -objective.mean()
            # ELBO of the rows seen (beta = 1); equals the objective once warmed up
            self.running += (objective if beta_now == 1.0 else rec - kl).detach().sum()
            self.step += 1

    def monitor(self, epoch: int) -> float:
        """The held-out (or, without held-out rows, training) objective with the final beta."""
        train_elbo = float(self.running) / self.n_rows
        record = {"epoch": float(epoch), "train_elbo": train_elbo}
        beta_final = self.config.beta if self.variational else 0.0
        if self.X_val is not None:
            rec_v, kl_v = evaluate_rows(self.module, self.X_val, self.layout, self.index,
                                        self.monitor_eps)
            monitored = _objective(rec_v, kl_v, beta_final)
            record["val_elbo"] = float((rec_v - kl_v).mean())
        else:
            monitored = train_elbo
            if self.variational and beta_final != 1.0:
                rows = self.X if self.train_index is None else self.X.index_select(
                    0, self.train_index)
                rec, kl = evaluate_rows(self.module, rows, self.layout, self.index,
                                        self.monitor_eps)
                monitored = _objective(rec, kl, beta_final)
        self.history.append(record)
        _log_epoch(record, epoch, self.config.max_epochs, self.started)
        return monitored


class _EpochHook:
    """Stands in for ``Progress`` in :func:`train_epochs`: calls ``on_epoch(epoch, total)``."""

    def __init__(self, on_epoch: Callable[[int, int], None], total: int):
        self.on_epoch, self.total, self.done = on_epoch, total, 0

    def __enter__(self) -> _EpochHook:
        return self

    def __exit__(self, *exc) -> None:
        return None

    def update(self, n: int = 1) -> None:
        self.done += n
        self.on_epoch(self.done, self.total)


def train_module(
    module: VAEModule,
    X: torch.Tensor,
    train_index: torch.Tensor | None,
    X_val: torch.Tensor | None,
    layout: BlockLayout,
    config: VAEConfig,
    *,
    shuffle_seed: int,
    monitor_eps: torch.Tensor,
    on_epoch: Callable[[int, int], None] | None = None,
) -> TrainResult:
    """Fit ``module`` in place and leave it at the epoch with the best monitored objective.

    The monitored objective is the held-out (or, without held-out rows, training) ELBO with
    the final ``beta``; patience counts only after the KL warm-up. ``train_index`` picks the
    training rows of ``X`` (None = all rows), so no copy of the training rows is made.
    ``on_epoch(epoch, max_epochs)``, if given, is called after every epoch and replaces the
    progress lines (a study reports its workers' epochs itself).
    """
    epochs = _VAEEpochs(module, X, train_index, X_val, layout, config, shuffle_seed,
                        monitor_eps)
    optimizer = torch.optim.Adam(module.parameters(), lr=config.learning_rate)
    # a bar on a terminal when asked for (config.progress); elsewhere a line every tenth of
    # the epochs or 30 s when the semisup logger shows info (an upper bound of the time left:
    # early stopping may end sooner)
    enabled = config.progress if _is_terminal() else None
    with (Progress(config.max_epochs, "VAE epochs", enabled=enabled) if on_epoch is None
          else _EpochHook(on_epoch, config.max_epochs)) as progress:
        loop = train_epochs(
            module, optimizer, epochs.losses, max_epochs=config.max_epochs,
            monitor=epochs.monitor, patience=config.patience, tol=config.tol,
            patience_after=config.kl_warmup_epochs, grad_clip=config.grad_clip,
            progress=progress,
        )
    for record, seconds, cpu in zip(epochs.history, loop.seconds, loop.cpu_seconds,
                                    strict=True):
        record["seconds"], record["cpu_seconds"] = seconds, cpu
    return TrainResult(
        epochs=loop.epochs,
        best_epoch=loop.best_epoch or 0,
        stopped_early=loop.stopped_early,
        steps=loop.steps,
        history=epochs.history,
    )


def _is_terminal() -> bool:
    stream = sys.stderr
    return bool(getattr(stream, "isatty", lambda: False)())


def _log_epoch(record: dict[str, float], epoch: int, max_epochs: int, started: float) -> None:
    if logger.isEnabledFor(logging.DEBUG):
        elapsed = time.perf_counter() - started
        eta = elapsed / epoch * (max_epochs - epoch)
        logger.debug(
            "epoch %d/%d train ELBO %.4f held-out ELBO %s (%.1fs, at most %.1fs left)",
            epoch,
            max_epochs,
            record["train_elbo"],
            f"{record['val_elbo']:.4f}" if "val_elbo" in record else "n/a",
            elapsed,
            eta,
        )
