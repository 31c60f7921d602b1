"""Minibatch training of a :class:`VAEModule`: Adam, KL warm-up, gradient clipping, early
stopping on held-out rows, progress bar or log lines. Works on tensors already in memory."""

from __future__ import annotations

import contextlib
import logging
import math
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import torch

from .._progress import Progress
from ._config import VAEConfig
from ._likelihood import BlockLayout
from ._vae import VAEModule, row_terms

__all__ = ["TrainResult", "evaluate_rows", "pinned_threads", "torch_state", "train_module"]

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
    log lines (a study reports its workers' epochs itself).
    """
    index = layout.tensors()
    n_rows = X.shape[0] if train_index is None else train_index.shape[0]
    batch_size = min(config.batch_size, n_rows)
    steps_per_epoch = math.ceil(n_rows / batch_size)
    warmup_steps = config.kl_warmup_epochs * steps_per_epoch
    variational = config.kind == "vae"
    optimizer = torch.optim.Adam(module.parameters(), lr=config.learning_rate)
    generator = torch.Generator().manual_seed(shuffle_seed)
    params = [p for p in module.parameters() if p.requires_grad]

    best_value = -math.inf
    best_state: dict[str, torch.Tensor] | None = None
    best_epoch = 0
    wait = 0
    step = 0
    stopped_early = False
    history: list[dict[str, float]] = []
    started = time.perf_counter()
    show_bar = config.progress and _is_terminal()
    bar = _progress_bar(config.max_epochs) if show_bar else None
    # not at a terminal: a line every tenth of the epochs or 30 s (an upper bound of the time
    # left: early stopping may end sooner)
    lines = None if _is_terminal() or on_epoch is not None else Progress(config.max_epochs,
                                                                         "VAE epochs")
    epoch = 0
    try:
        for epoch in range(1, config.max_epochs + 1):
            epoch_started = time.perf_counter()
            epoch_cpu = time.process_time()
            module.train()
            order = torch.randperm(n_rows, generator=generator)
            if train_index is not None:
                order = train_index[order]
            running = torch.zeros((), dtype=torch.float64)
            for start in range(0, n_rows, batch_size):
                batch = X.index_select(0, order[start : start + batch_size])
                if variational and warmup_steps > 0:
                    beta_now = config.beta * min(1.0, (step + 1) / warmup_steps)
                else:
                    beta_now = config.beta if variational else 0.0
                rec, kl, _ = row_terms(module, batch, layout, index)
                objective = rec - beta_now * kl  # (batch,)
                loss = -objective.mean()
                optimizer.zero_grad(set_to_none=True)
                loss.backward()
                if config.grad_clip is not None:
                    torch.nn.utils.clip_grad_norm_(params, config.grad_clip)
                optimizer.step()
                # ELBO of the rows seen (beta = 1); equals the objective once warmed up
                running += (objective if beta_now == 1.0 else rec - kl).detach().sum()
                step += 1
            train_elbo = float(running) / n_rows
            record = {"epoch": float(epoch), "train_elbo": train_elbo}
            beta_final = config.beta if variational else 0.0
            if X_val is not None:
                rec_v, kl_v = evaluate_rows(module, X_val, layout, index, monitor_eps)
                monitored = _objective(rec_v, kl_v, beta_final)
                record["val_elbo"] = float((rec_v - kl_v).mean())
            else:
                monitored = train_elbo
                if variational and beta_final != 1.0:
                    monitored = _epoch_objective(
                        module, X, train_index, layout, index, monitor_eps, beta_final
                    )
            history.append(record)
            if monitored > best_value + config.tol:
                best_value = monitored
                best_state = {k: v.detach().clone() for k, v in module.state_dict().items()}
                best_epoch = epoch
                wait = 0
            elif epoch > config.kl_warmup_epochs:
                wait += 1
            record["seconds"] = time.perf_counter() - epoch_started
            record["cpu_seconds"] = time.process_time() - epoch_cpu
            _report(bar, record, epoch, config.max_epochs, started)
            if lines is not None:
                lines.update()
            if on_epoch is not None:
                on_epoch(epoch, config.max_epochs)
            if wait >= config.patience:
                stopped_early = True
                break
    finally:
        if bar is not None:
            bar.close()
    if best_state is not None:
        module.load_state_dict(best_state)
    module.eval()
    return TrainResult(
        epochs=epoch,
        best_epoch=best_epoch,
        stopped_early=stopped_early,
        steps=step,
        history=history,
    )


def _epoch_objective(
    module: VAEModule,
    X: torch.Tensor,
    train_index: torch.Tensor | None,
    layout: BlockLayout,
    index: tuple[torch.Tensor, torch.Tensor],
    eps: torch.Tensor,
    beta: float,
) -> float:
    rows = X if train_index is None else X.index_select(0, train_index)
    rec, kl = evaluate_rows(module, rows, layout, index, eps)
    module.train()
    return _objective(rec, kl, beta)


def _is_terminal() -> bool:
    stream = sys.stderr
    return bool(getattr(stream, "isatty", lambda: False)())


def _progress_bar(total: int):  # pragma: no cover - needs a terminal
    from tqdm.auto import tqdm

    return tqdm(total=total, desc="VAE", unit="epoch", leave=False, file=sys.stderr)


def _report(bar, record: dict[str, float], epoch: int, max_epochs: int, started: float) -> None:
    if bar is not None:  # pragma: no cover - needs a terminal
        postfix = {"elbo": f"{record['train_elbo']:.3f}"}
        if "val_elbo" in record:
            postfix["val"] = f"{record['val_elbo']:.3f}"
        bar.set_postfix(postfix)
        bar.update(1)
        return
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
