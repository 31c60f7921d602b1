"""Progress of long work when stderr is not a terminal: periodic lines, not a bar."""

from __future__ import annotations

import contextlib
import io

import pytest
from _study_support import ensure_methods, make_dataset

from semisup._progress import Progress, format_duration
from semisup.study import StudySpec, run_study


class _Clock:
    def __init__(self, step: float) -> None:
        self.now, self.step = 0.0, step

    def __call__(self) -> float:
        return self.now

    def tick(self) -> None:
        self.now += self.step


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_a_line_every_tenth_of_the_work_on_a_non_terminal():
    out, clock = io.StringIO(), _Clock(1.0)
    bar = Progress(20, "cells", enabled=True, stream=out, clock=clock)
    for i in range(20):
        clock.tick()
        bar.update(1, failed=i == 5)
    lines = out.getvalue().splitlines()
    assert len(lines) == 10 == bar.lines
    # 2 of 20 done after 2 s: 18 more at 1 s each, shown to the nearest 10 s
    assert lines[0] == "cells 2/20, 2s, about 20s left"
    assert lines[3] == "cells 8/20, 8s, about 10s left, 1 failed"
    assert lines[8] == "cells 18/20, 18s, under 10s left, 1 failed"  # not "about 10s" for 2 s
    assert lines[-1] == "cells 20/20, 20s, 1 failed"  # the end: no time left to show


def test_a_line_every_30_seconds_when_the_work_is_slow():
    out, clock = io.StringIO(), _Clock(31.0)
    bar = Progress(1000, "VAE epochs", enabled=True, stream=out, clock=clock)
    for _ in range(3):
        clock.tick()
        bar.update()
    assert out.getvalue().splitlines() == [
        "VAE epochs 1/1000, 31s, about 8h36m left",
        "VAE epochs 2/1000, 1m02s, about 8h36m left",
        "VAE epochs 3/1000, 1m33s, about 8h35m left",
    ]


def test_a_terminal_keeps_the_bar_and_disabled_is_silent():
    tty = _Terminal()
    bar = Progress(5, "cells", enabled=True, stream=tty, clock=_Clock(100.0))
    for _ in range(5):
        bar.update()
    bar.close()
    assert bar.lines == 0 and "cells 5/5," not in tty.getvalue()
    quiet = io.StringIO()
    off = Progress(5, "cells", enabled=False, stream=quiet)
    for _ in range(5):
        off.update()
    assert quiet.getvalue() == "" and off.done == 5


@pytest.mark.parametrize("seconds, text", [(0, "0s"), (42.4, "42s"), (130, "2m10s"),
                                           (3599.6, "1h00m"), (3900, "1h05m")])
def test_durations(seconds, text):
    assert format_duration(seconds) == text


def test_study_prints_cell_lines_when_stderr_is_a_file(tmp_path):
    roles = ensure_methods()
    ds = make_dataset(n_labeled_per_class=10, n_unlabeled=30)
    spec = StudySpec.build(overrides={"data": "digits-standin", "label_column": "digit",
                                      "methods": [roles["logreg"]], "repeats": 2, "folds": 3,
                                      "trials": 1, "budgets": [6, 12]})
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        run_study(spec, tmp_path, dataset=ds, jobs=1, progress=True)
    lines = [ln for ln in err.getvalue().splitlines() if ln.startswith("cells ")]
    assert lines and lines[-1].startswith("cells 4/4, ")


def test_vae_fit_prints_epoch_lines_when_stderr_is_a_file():
    import logging

    import numpy as np

    from semisup.pretrain import VAETransformer

    X = np.random.default_rng(0).normal(size=(60, 4)).astype(np.float32)
    err = io.StringIO()
    logger = logging.getLogger("semisup")
    old = logger.level
    logger.setLevel(logging.INFO)
    try:
        with contextlib.redirect_stderr(err):
            VAETransformer(max_epochs=10, hidden=[8], latent_dim=2, patience=100,
                           random_state=0).fit(X)
    finally:
        logger.setLevel(old)
    lines = [ln for ln in err.getvalue().splitlines() if ln.startswith("VAE epochs ")]
    assert lines and lines[-1].startswith("VAE epochs 10/10, ")
