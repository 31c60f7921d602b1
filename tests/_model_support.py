"""A small real study for the model tests: scikit-learn's wine table (Forina et al., UCI),
40% of its labels hidden, two methods, a tiny VAE, one plan."""

from __future__ import annotations

from pathlib import Path

import numpy as np

LABEL, ID = "cultivar", "bottle"


def wine_frame():
    """scikit-learn's wine data as a table: an id column, 13 numeric columns, one categorical
    column derived from colour intensity (for category checks), labels a/b/c, 40% hidden."""
    from sklearn.datasets import load_wine

    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.copy()
    frame["colour_band"] = np.where(frame["color_intensity"] < 3.5, "pale",
                                    np.where(frame["color_intensity"] < 7, "mid", "deep"))
    frame[LABEL] = np.array(["a", "b", "c"], dtype=object)[y]
    hidden = np.random.default_rng(0).random(len(frame)) < 0.4
    frame.loc[hidden, LABEL] = None
    frame.insert(0, ID, [f"w{i:03d}" for i in range(len(frame))])
    return frame, np.asarray(y)


def make_study(root: Path, methods=("supervised-logreg", "latent-logreg")) -> Path:
    """Write wine.csv and run a quick study plus a plan in ``root``; return the study folder."""
    from semisup.plan import PlanRequest, make_plan
    from semisup.study import StudySpec, run_study

    root.mkdir(parents=True, exist_ok=True)
    frame, _ = wine_frame()
    frame.to_csv(root / "wine.csv", index=False)
    spec = StudySpec.build(overrides={
        "data": root / "wine.csv", "label_column": LABEL, "id_column": ID,
        "methods": list(methods), "budgets": [10, 30], "repeats": 2, "trials": 2,
        "pretrain": {"vae": {"max_epochs": 10}},
    })
    study = root / "study"
    run_study(spec, study, jobs=1, progress=False)
    make_plan(study, PlanRequest(metric="accuracy", target=0.8, cost_per_label=1.0))
    return study
