"""A window classifier with calibrated confidence, trained from a project's labeled windows.

Pure numerics (no project file, no Dask): :func:`calibration_groups` says which windows must stay
together when the calibration's folds are cut, :func:`train_window_model` fits the model and
returns it with a description for the manifest, :func:`predict_windows` labels new windows.

The classifier is a forest of extremely randomized trees (Geurts, Ernst & Wehenkel, "Extremely
randomized trees", 2006) on the project's window features; it copes with a few hundred labeled
windows and needs no scaling. Its class scores are calibrated with scikit-learn's
``CalibratedClassifierCV`` (sigmoid per class, Platt 1999; isotonic when every class has at least
``ISOTONIC_MIN`` windows, Zadrozny & Elkan 2002), on out-of-fold scores whose folds never split a
group: a recording when three or more recordings carry labels (so the confidence is calibrated for
people the model has not seen), else a stretch of ``BLOCK_S`` seconds of one recording (windows
overlap and activities last, so neighbouring windows would leak across random folds).
"""

from __future__ import annotations

import warnings

import numpy as np

from labeler.errors import InputError, ValueInputError

BLOCK_S = 300.0          # common practice, no source: bouts of daily activity last minutes
MIN_RECORDING_GROUPS = 3
ISOTONIC_MIN = 1000      # from memory: scikit-learn's user guide, isotonic overfits below ~1000
MAX_FOLDS = 5
N_TREES = 100


def calibration_groups(recording: np.ndarray, start_s: np.ndarray,
                       block_s: float = BLOCK_S) -> tuple[np.ndarray, str]:
    """(group per window, what a group is): recordings when at least ``MIN_RECORDING_GROUPS``
    recordings are present, else ``block_s``-long stretches of each recording."""
    recording = np.asarray(recording)
    start_s = np.asarray(start_s, dtype=np.float64)
    rec_codes = np.unique(recording, return_inverse=True)[1]
    if np.unique(rec_codes).size >= MIN_RECORDING_GROUPS:
        return rec_codes.astype(np.int64), "recording"
    block = np.floor(start_s / float(block_s)).astype(np.int64)
    pairs = np.stack([rec_codes, block], axis=1)
    return np.unique(pairs, axis=0, return_inverse=True)[1].reshape(-1).astype(np.int64), \
        f"{block_s:g}-s stretch of a recording"


def _folds(y: np.ndarray, groups: np.ndarray, random_state: int) -> list[tuple[np.ndarray, np.ndarray]]:
    from sklearn.model_selection import StratifiedGroupKFold

    n_groups = np.unique(groups).size
    if n_groups < 2:
        raise InputError("the labeled windows all lie in one stretch of one recording; confirm "
                         f"windows in other recordings or more than {BLOCK_S:g} s apart")
    k = int(min(MAX_FOLDS, n_groups))
    splitter = StratifiedGroupKFold(n_splits=k, shuffle=True, random_state=random_state)
    return [(tr, te) for tr, te in splitter.split(np.zeros(y.size), y, groups)]


def train_window_model(X: np.ndarray, y: np.ndarray, groups: np.ndarray, *, group_kind: str = "",
                       random_state: int = 0, n_trees: int = N_TREES):
    """Fit the calibrated classifier on labeled windows. ``y``: class names (no unlabeled rows).

    Returns ``(model, description)``. The description holds the classifier and calibration
    settings and a cross-validated accuracy of the classifier over the same grouped folds (windows
    of a group are scored by a model that saw none of that group).
    """
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.ensemble import ExtraTreesClassifier
    from sklearn.model_selection import cross_val_predict

    from labeler.quality import wilson_interval

    X = np.asarray(X, dtype=np.float32)
    y = np.asarray(y).astype(str)
    groups = np.asarray(groups)
    if X.ndim != 2 or X.shape[0] != y.size or groups.size != y.size:
        raise ValueInputError("X, y and groups must have one row per labeled window")
    classes, counts = np.unique(y, return_counts=True)
    if classes.size < 2:
        raise InputError("training needs labeled windows of at least two classes; confirm "
                         "windows of another activity first")
    if counts.min() < 2:
        raise InputError(f"class {classes[np.argmin(counts)]!r} has a single labeled window; "
                         "confirm at least two windows of every class")
    folds = _folds(y, groups, random_state)
    base = ExtraTreesClassifier(n_estimators=int(n_trees), min_samples_leaf=2, max_features="sqrt",
                                class_weight="balanced", n_jobs=1, random_state=random_state)
    method = "isotonic" if counts.min() >= ISOTONIC_MIN else "sigmoid"
    model = CalibratedClassifierCV(base, method=method, cv=folds, ensemble=False)
    with warnings.catch_warnings():
        # a class held by few groups is missing from some training folds: expected, handled
        warnings.filterwarnings("ignore", message="Number of classes in training fold")
        model.fit(X, y)
        oof = cross_val_predict(base, X, y, cv=folds)
    k = int((oof == y).sum())
    low, high = wilson_interval(k, int(y.size))
    description = {
        "classifier": "extremely randomized trees (Geurts, Ernst & Wehenkel 2006)",
        "classifier_params": {"n_estimators": int(n_trees), "min_samples_leaf": 2,
                              "max_features": "sqrt", "class_weight": "balanced",
                              "random_state": int(random_state)},
        "calibration": {"method": method, "by": "scikit-learn CalibratedClassifierCV "
                        "(ensemble=False)", "folds": len(folds), "grouped_by": group_kind},
        "classes": [str(c) for c in classes],
        "training_windows": int(y.size),
        "training_windows_per_class": {str(c): int(n) for c, n in zip(classes, counts)},
        "cross_validated_accuracy": {
            "value": k / y.size, "low": low, "high": high, "level": 0.95, "n": int(y.size),
            "note": f"the classifier's accuracy on labeled windows held out by {group_kind or 'group'}"
                    " (Wilson interval); it holds for new recordings only as far as they resemble "
                    "the labeled ones"},
    }
    return model, description


def predict_windows(model, X: np.ndarray) -> dict[str, np.ndarray]:
    """Label, calibrated confidence (top probability), margin (top two) and the probabilities."""
    proba = model.predict_proba(np.asarray(X, dtype=np.float32))
    order = np.argsort(proba, axis=1)
    top = proba[np.arange(proba.shape[0]), order[:, -1]]
    second = proba[np.arange(proba.shape[0]), order[:, -2]] if proba.shape[1] > 1 else 0.0
    return {"label": np.asarray(model.classes_)[order[:, -1]], "confidence": top,
            "margin": top - second, "proba": proba}
