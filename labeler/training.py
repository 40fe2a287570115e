"""A training set as arrays for scikit-learn: features (X), labels (y) and group ids for grouped splits.

Windows overlap (by default each shares half its samples with the next) and neighbouring windows of
one bout are near copies, so a random train/test split puts near copies of a test window into the
training set and overstates accuracy. Split by group instead: by person when the recordings say who
wore the sensor, else by recording, at least by bout (scikit-learn's ``GroupKFold``,
``LeaveOneGroupOut``). :func:`read_training_set` reads an export written with features
(``labeler export P FOLDER --features``) and returns ``(X, y, groups)`` ready for that::

    from sklearn.model_selection import GroupKFold, cross_val_score
    X, y, groups = read_training_set("training-set")
    cross_val_score(model, X, y, groups=groups, cv=GroupKFold(5))
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from labeler.errors import InputError

GROUPS = ("person", "recording", "bout")
GROUPED_SPLITS = (
    "Windows overlap and neighbouring windows of one bout are near copies: a random train/test "
    "split leaks them across the split and overstates accuracy. Split by group: by 'person' (who "
    "wore the sensor; the recording's name when the project does not know), else by 'recording', at "
    "least by 'bout' (consecutive windows of one label), e.g. with scikit-learn's GroupKFold.")


def bout_ids(recording: np.ndarray, label: np.ndarray, start_s: np.ndarray,
             step_s: np.ndarray) -> np.ndarray:
    """Number (from 0) of the bout each window belongs to: a bout is a run of windows of one
    recording and one label that follow each other on the window grid (the next one starts one step
    later). Rows must be sorted by recording and start."""
    n = len(recording)
    new = np.ones(n, dtype=bool)
    if n > 1:
        start = np.asarray(start_s, dtype=np.float64)
        step = np.asarray(step_s, dtype=np.float64)
        follows = np.abs(start[1:] - start[:-1] - step[1:]) <= 1e-6 * np.maximum(1.0, step[1:])
        new[1:] = ~((recording[1:] == recording[:-1]) & (label[1:] == label[:-1]) & follows)
    return np.cumsum(new) - 1


def window_signals(signal_of, windows: pd.DataFrame, rates: dict[str, float],
                   channels: dict[str, list[str]]) -> dict[str, np.ndarray]:
    """The samples of each window as one array (n_windows, samples, channels), float32.

    ``signal_of(recording)`` gives a recording's whole signal (n_samples, n_channels);
    ``windows`` has recording, window_id, start_sample, stop_sample in the order of the export.
    Every recording must share one rate and one channel list (a window is then the same number of
    samples of the same channels everywhere)."""
    names = list(dict.fromkeys(windows["recording"]))
    if len({rates[n] for n in names}) > 1:
        shown = ", ".join(f"{n} {rates[n]:g} Hz" for n in names[:4])
        raise InputError(f"--signal: the recordings have different sampling rates ({shown}); "
                         "export the features instead, or resample the files to one rate")
    if len({tuple(channels[n]) for n in names}) > 1:
        raise InputError("--signal: the recordings have different channels; export the features "
                         "instead")
    lengths = (windows["stop_sample"] - windows["start_sample"]).unique()
    if len(lengths) > 1:
        raise InputError("--signal: windows differ in length; export the features instead")
    length = int(lengths[0]) if len(lengths) else 0
    n_ch = len(channels[names[0]]) if names else 0
    out = np.empty((len(windows), length, n_ch), dtype=np.float32)
    rec = windows["recording"].to_numpy()
    starts = windows["start_sample"].to_numpy(dtype=np.int64)
    for name in names:  # loop over recordings: one read of each signal
        rows = np.flatnonzero(rec == name)
        sig = signal_of(name)
        idx = starts[rows][:, None] + np.arange(length)[None, :]
        out[rows] = sig[idx]
    return {"window_id": windows["window_id"].to_numpy(dtype=np.int64), "signal": out,
            "channels": np.asarray(channels[names[0]] if names else [], dtype=str),
            "rate_hz": np.float64(rates[names[0]] if names else np.nan)}


def read_training_set(folder: str | os.PathLike, *, group_by: str = "person",
                      confirmed_only: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(X, y, groups)`` from an export folder written with ``--features``.

    X: float32 (n_windows, n_features) in the order of the manifest's ``features.columns``; y: the
    labels; groups: the ``group_by`` column (person, recording or bout). ``confirmed_only`` keeps
    the windows a person confirmed (proposed labels are suggestions)."""
    folder = Path(folder)
    if group_by not in GROUPS:
        raise InputError(f"group_by {group_by!r}: use one of {', '.join(GROUPS)}")
    manifest_path = folder / "manifest.json"
    if not manifest_path.exists():
        raise InputError(f"{folder}: no manifest.json; give a folder written by `labeler export`")
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{manifest_path}: not a readable manifest ({exc}); export again") from None
    columns = (manifest.get("features") or {}).get("columns")
    if not columns:
        raise InputError(f"{folder}: exported without features; export again with --features")
    info = manifest["files"]["windows"]
    path = folder / info["name"]
    if info["format"] == "parquet":
        table = pd.read_parquet(path)
    else:
        table = pd.read_csv(path, keep_default_na=False, na_values=[""],
                            dtype={"recording": str, "person": str, "label": str})
    missing = [c for c in columns + ["label", group_by] if c not in table.columns]
    if missing:
        raise InputError(f"{path}: no column {missing[0]!r}; export again with --features")
    if confirmed_only:
        table = table[table["status"] == "confirmed"]
    X = table[columns].to_numpy(dtype=np.float32)
    y = table["label"].to_numpy(dtype=object)
    groups = table[group_by].to_numpy()
    return X, y, groups
