"""The training set out of a project: per-window rows, merged segments and a manifest.

Pure table building: these functions take plain tables (pandas) and dicts and know nothing of SQLite;
:mod:`labeler.service.export` gathers a consistent snapshot of a project and calls
:func:`write_training_set`.

**Window rows** (one per labeled window): recording, ``window`` (the window's number within its
recording, from 0), ``window_id`` (its id in the project), start and end in seconds from the
recording's first sample, the same as UTC timestamps when the recording file carried clock times,
the label, ``status`` (``confirmed`` by a person or ``proposed`` by label spreading), confidence and
margin, and for confirmed windows who confirmed it, when, and through what (``source``: map,
timeline, queue, audit, import, cli, api, class-merge, undo). ``retired`` marks labels of classes that
were retired since (kept, never silently dropped).

A confirmed window's confidence is 1 (a person decided it; how far people agree is what
``labeler agreement`` reports) and its margin is empty. A proposed window's confidence is the probability
that its label is right, calibrated on the confirmed and audited windows (:mod:`labeler.estimate`),
or, while the project has no accuracy figure, the share of the spread label mass that went to its
label; its margin is the gap between the top two shares of label mass.

**Segments**: consecutive windows of one recording with one label (no gap between them, no other
label in between) become one interval. Overlapping windows share samples, so a segment's ``start``
and ``end`` are not the first window's start and the last window's end: each window stands for the
one-step-long span around its centre, ``[centre - step/2, centre + step/2]``, and a segment runs from
the start of its first window's span to the end of its last window's. Adjacent segments therefore meet
end to start and never overlap, and re-importing a segment file (``labeler import``) gives every window
back its label: an imported interval labels the windows whose centre lies inside it. Each segment
carries the number of windows, how many of them were confirmed, and the lowest and mean confidence
inside.

**Grouped splits**: every window row also carries ``person`` (who wore the sensor; the recording's
name when the project does not know), ``bout`` (the number of its segment: consecutive windows of one
label) and ``recording_file`` (the file it was read from), because overlapping windows leak across a
random train/test split (:mod:`labeler.training`). On request the rows carry the window's features
(one named column each, ``--features``) and the window signals go to ``signals.npz`` (``--signal``).

**Manifest** (JSON): tool and feature-set versions, window settings, the proposal run's parameters,
content hashes of the recordings, counts per class and status and confirmation source, the selection
made, the accuracy estimate of the proposals with its interval and what it rests on (or ``null`` with
the reason: no proposals, or none in the export), and the SHA-256 of each table written with it. A
proposed window's confidence is calibrated when the estimate has a calibration (the probability that
its label is right, :mod:`labeler.estimate`); the manifest's ``accuracy_estimate.confidence_column``
says which.

Every file is written to a temporary name in its folder and renamed into place (:func:`write_atomic`),
so a reader sees the previous file or the new one, never half of one.

Proposed labels are suggestions. Where labels feed clinical or safety decisions, a qualified person
reviews them, and local rules and licensed practice come first.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping

import numpy as np
import pandas as pd

from labeler.errors import InputError, ValueInputError
from labeler.results import ExportReport
from labeler.training import GROUPED_SPLITS, bout_ids, window_signals

MANIFEST_FORMAT = "labeler-export/1"
FORMATS = ("csv", "parquet")
ISO_UTC = "%Y-%m-%dT%H:%M:%S.%fZ"
CAUTION = ("Proposed labels are suggestions computed from a few confirmed examples. Where labels "
           "feed clinical or safety decisions, a qualified person reviews them, and local rules and "
           "licensed practice come first.")

WINDOW_COLUMNS = ["recording", "window", "window_id", "start_s", "end_s", "start_utc", "end_utc",
                  "label", "status", "confidence", "margin", "annotator", "confirmed_at", "source",
                  "retired"]
SEGMENT_COLUMNS = ["recording", "start", "end", "label", "start_utc", "end_utc", "windows",
                   "confirmed", "confidence_min", "confidence_mean", "retired", "bout"]
GROUP_COLUMNS = ["person", "bout", "recording_file"]


# --------------------------------------------------------------------------- window rows

def window_table(windows: pd.DataFrame, labels: pd.DataFrame, proposals: pd.DataFrame | None,
                 start_times: Mapping[str, str | None], retired: Iterable[str] = ()) -> pd.DataFrame:
    """One row per labeled window (columns :data:`WINDOW_COLUMNS`), in recording and time order.

    ``windows``: id, recording, seq, start_s, stop_s. ``labels``: window_id, class, annotator, at,
    source (the current confirmed labels). ``proposals``: window_id, label, confidence, margin (None
    when no proposals were made); a confirmation overrides the proposal of its window.
    ``start_times``: recording name → ISO-8601 UTC time of its first sample, or None.
    """
    w = windows[["id", "recording", "seq", "start_s", "stop_s"]].rename(
        columns={"id": "window_id", "seq": "window", "stop_s": "end_s"})
    w["window_id"] = w["window_id"].astype("int64")
    conf = labels[["window_id", "class", "annotator", "at", "source"]].rename(
        columns={"class": "label", "at": "confirmed_at"}).astype({"window_id": "int64"})
    t = w.merge(conf, on="window_id", how="left")
    t["status"] = np.where(t["label"].notna(), "confirmed", None)
    t["confidence"] = np.where(t["label"].notna(), 1.0, np.nan)
    t["margin"] = np.nan
    if proposals is not None and len(proposals):
        prop = proposals[["window_id", "label", "confidence", "margin"]].rename(
            columns={"label": "p_label", "confidence": "p_conf", "margin": "p_margin"}).astype(
            {"window_id": "int64"})
        t = t.merge(prop, on="window_id", how="left")
        use = t["label"].isna() & t["p_label"].notna()
        t.loc[use, "label"] = t.loc[use, "p_label"]
        t.loc[use, "status"] = "proposed"
        t.loc[use, "confidence"] = t.loc[use, "p_conf"].astype(float)
        t.loc[use, "margin"] = t.loc[use, "p_margin"].astype(float)
        t = t.drop(columns=["p_label", "p_conf", "p_margin"])
    t = t[t["label"].notna()].copy()
    t["start_utc"] = _utc(t["recording"], t["start_s"], start_times)
    t["end_utc"] = _utc(t["recording"], t["end_s"], start_times)
    t["confirmed_at"] = pd.to_datetime(t["confirmed_at"], utc=True, format="ISO8601")
    t["retired"] = t["label"].isin(set(retired))
    t["window"] = t["window"].astype("int64")
    t["window_id"] = t["window_id"].astype("int64")
    t = t.sort_values(["recording", "start_s", "window"], kind="stable")
    return t[WINDOW_COLUMNS].reset_index(drop=True)


def _utc(recording: pd.Series, seconds: pd.Series, start_times: Mapping[str, str | None]) -> pd.Series:
    base = pd.to_datetime(recording.map(lambda r: start_times.get(r)), utc=True, format="ISO8601")
    return base + pd.to_timedelta(seconds.astype(float), unit="s")


def select(table: pd.DataFrame, *, confirmed_only: bool = False, min_confidence: float | None = None,
           classes: Iterable[str] | None = None) -> pd.DataFrame:
    """Rows of a window table kept by the export options.

    ``min_confidence`` drops proposed windows below it (confirmed windows have confidence 1 and stay);
    ``classes`` keeps only those labels (compared without regard to case).
    """
    keep = np.ones(len(table), dtype=bool)
    if confirmed_only:
        keep &= (table["status"] == "confirmed").to_numpy()
    if min_confidence is not None:
        keep &= (table["confidence"] >= float(min_confidence)).to_numpy()
    if classes is not None:
        wanted = {str(c).lower() for c in classes}
        keep &= table["label"].str.lower().isin(wanted).to_numpy()
    return table[keep].reset_index(drop=True)


# --------------------------------------------------------------------------- segments

def segments(table: pd.DataFrame, geometry: Mapping[str, tuple[float, float]]) -> pd.DataFrame:
    """Merge consecutive windows of one label into intervals (columns :data:`SEGMENT_COLUMNS`).

    ``geometry``: recording name → (window length s, step s). Windows are consecutive when they follow
    each other on the recording's window grid (the next window starts one step later: no gap, no
    window left out by the selection). See the module docstring for where a segment starts and ends.
    """
    if len(table) == 0:
        return pd.DataFrame({c: pd.Series(dtype=_SEGMENT_DTYPES[c]) for c in SEGMENT_COLUMNS})
    t = table.sort_values(["recording", "start_s", "window"], kind="stable").reset_index(drop=True)
    length = t["recording"].map(lambda r: geometry[r][0]).to_numpy(float)
    step = t["recording"].map(lambda r: geometry[r][1]).to_numpy(float)
    start = t["start_s"].to_numpy(float)
    seg = bout_ids(t["recording"].to_numpy(), t["label"].to_numpy(), start, step)
    centre = start + length / 2
    t["_seg"] = seg
    t["_a"] = centre - step / 2
    t["_b"] = centre + step / 2
    t["_a_utc"] = t["start_utc"] + pd.to_timedelta(length / 2 - step / 2, unit="s")
    t["_b_utc"] = t["start_utc"] + pd.to_timedelta(length / 2 + step / 2, unit="s")
    t["_confirmed"] = t["status"] == "confirmed"
    g = t.groupby("_seg", sort=True)
    out = pd.DataFrame({
        "recording": g["recording"].first(),
        "start": g["_a"].min(),
        "end": g["_b"].max(),
        "label": g["label"].first(),
        "start_utc": g["_a_utc"].first(),
        "end_utc": g["_b_utc"].last(),
        "windows": g.size().astype("int64"),
        "confirmed": g["_confirmed"].sum().astype("int64"),
        "confidence_min": g["confidence"].min(),
        "confidence_mean": g["confidence"].mean(),
        "retired": g["retired"].first().astype(bool),
        "bout": pd.Series(np.unique(seg), index=np.unique(seg)).astype("int64"),
    })
    return out[SEGMENT_COLUMNS].reset_index(drop=True)


_SEGMENT_DTYPES = {"recording": object, "start": float, "end": float, "label": object,
                   "start_utc": "datetime64[ns, UTC]", "end_utc": "datetime64[ns, UTC]",
                   "windows": "int64", "confirmed": "int64", "confidence_min": float,
                   "confidence_mean": float, "retired": bool, "bout": "int64"}


# --------------------------------------------------------------------------- manifest

def counts(table: pd.DataFrame) -> dict[str, Any]:
    """Counts per class and status, per status, and per confirmation source."""
    by_class: dict[str, dict[str, int]] = {}
    for (label, status), n in table.groupby(["label", "status"]).size().items():
        by_class.setdefault(str(label), {"confirmed": 0, "proposed": 0})[str(status)] = int(n)
    by_status = {"confirmed": int((table["status"] == "confirmed").sum()),
                 "proposed": int((table["status"] == "proposed").sum())}
    src = table.loc[table["status"] == "confirmed", "source"].value_counts()
    return {"windows": int(len(table)), "by_class": dict(sorted(by_class.items())),
            "by_status": by_status,
            "by_confirmation_source": {str(k): int(v) for k, v in sorted(src.items())}}


def build_manifest(*, tool_version: str, created_at: str, created_by: str, project: Mapping,
                   feature_set_version: str, window_settings: Mapping, recordings: list[Mapping],
                   classes: list[Mapping], selection: Mapping, proposals: Mapping | None,
                   accuracy: Mapping | None, accuracy_absent: str | None, table: pd.DataFrame,
                   files: Mapping[str, Mapping]) -> dict[str, Any]:
    """The manifest as a JSON-ready dict (see the module docstring)."""
    return {
        "format": MANIFEST_FORMAT,
        "created_at": created_at,
        "created_by": created_by,
        "tool": {"name": "labeler", "version": tool_version},
        "project": dict(project),
        "feature_set_version": feature_set_version,
        "windows": dict(window_settings),
        "recordings": [dict(r) for r in recordings],
        "classes": [dict(c) for c in classes],
        "selection": dict(selection),
        "proposals": None if proposals is None else dict(proposals),
        "counts": counts(table),
        "accuracy_estimate": None if accuracy is None else dict(accuracy),
        "accuracy_estimate_absent": None if accuracy is not None else accuracy_absent,
        "files": {k: dict(v) for k, v in files.items()},
        "caution": CAUTION,
    }


# --------------------------------------------------------------------------- the whole export

def check_request(folder: str | os.PathLike, *, fmt: str, min_confidence: float | None,
                  classes: Iterable[str] | None, known_classes: Iterable[str],
                  overwrite: bool, signal: bool = False) -> tuple[dict[str, Path], list[str] | None]:
    """Check export options before anything is read or written. Returns the target files
    (windows, segments, manifest) and the selected classes spelt as in the project."""
    if fmt not in FORMATS:
        raise InputError(f"export format {fmt!r} is unknown; use one of {', '.join(FORMATS)}")
    if min_confidence is not None and not (0.0 <= float(min_confidence) <= 1.0):
        raise InputError(f"minimum confidence {min_confidence} is outside 0-1; give e.g. 0.8")
    known = {str(c).lower(): str(c) for c in known_classes}
    if classes is not None:
        classes = [str(c).strip() for c in classes]
        for c in classes:
            if c.lower() not in known:
                raise InputError(f"no class {c!r} to export; classes: "
                                 f"{', '.join(known.values()) or 'none yet'}")
        classes = [known[c.lower()] for c in classes]
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder}: is a file; give a folder for the export")
    if not folder.exists() and not folder.parent.is_dir():
        raise InputError(f"{folder}: folder {folder.parent} does not exist; create it first")
    targets = {"windows": folder / f"windows.{fmt}", "segments": folder / f"segments.{fmt}",
               "manifest": folder / "manifest.json"}
    if signal:
        targets["signals"] = folder / "signals.npz"
    if not overwrite:
        for p in targets.values():
            if p.exists():
                raise InputError(f"{p}: exists already; give another folder or --overwrite")
    return targets, classes


@dataclass
class ExportInputs:
    """What one export reads from a project, read together (labels, proposals and estimate
    belong to the same state of the history)."""
    windows: pd.DataFrame           # id, recording, seq, start_s, stop_s
    labels: pd.DataFrame            # window_id, class, annotator, at, source
    proposals: pd.DataFrame | None  # window_id, label, confidence, margin; None before any run
    proposal_params: dict | None
    accuracy: dict | None
    accuracy_absent: str | None
    recordings: pd.DataFrame        # the project's recordings table
    classes: list[dict]             # the store's class rows (retired_at, merged_into)
    project: dict                   # file, project_id, schema_version, created_with, as_of_event
    feature_set_version: str
    window_length_s: float
    window_step_s: float
    features: tuple[np.ndarray, list[str]] | None = None  # X in the row order of ``windows``
    signal_of: Callable[[str], np.ndarray] | None = None  # recording name -> its whole signal


def write_training_set(inputs: ExportInputs, targets: Mapping[str, Path], *, fmt: str,
                       confirmed_only: bool, min_confidence: float | None,
                       classes: list[str] | None, tool_version: str, created_at: str,
                       created_by: str, where: str) -> ExportReport:
    """Build the window rows and segments, write them and then the manifest, each atomically.
    ``where`` names the project in messages."""
    recs = inputs.recordings
    retired = {c["name"] for c in inputs.classes if c["retired_at"] is not None}
    start_times = {r["name"]: (r["start_time"] if pd.notna(r["start_time"]) else None)
                   for _, r in recs.iterrows()}
    table = window_table(inputs.windows, inputs.labels, inputs.proposals, start_times, retired)
    n_labeled = len(table)
    table = select(table, confirmed_only=confirmed_only, min_confidence=min_confidence,
                   classes=classes)
    if n_labeled == 0:
        raise InputError(f"{where}: nothing to export: no window is confirmed or proposed "
                         "yet; confirm some windows first")
    if len(table) == 0:
        raise InputError(f"{where}: nothing to export: no labeled window passes the "
                         "selection (confirmed only, minimum confidence, classes); loosen it")
    geometry = {r["name"]: (r["window_length"] / r["rate"], r["window_step"] / r["rate"])
                for _, r in recs.iterrows()}
    table = add_group_columns(table, geometry, recs)
    segs = segments(table, geometry)
    signals = None
    if "signals" in targets:
        if inputs.signal_of is None:
            raise InputError(f"{where}: the window signals cannot be read; export without --signal")
        rows = table[["recording", "window_id"]].merge(
            inputs.windows[["id", "start_sample", "stop_sample"]].rename(columns={"id": "window_id"}),
            on="window_id", how="left")
        signals = window_signals(inputs.signal_of, rows, dict(zip(recs["name"], recs["rate"])),
                                 dict(zip(recs["name"], recs["channels"])))
    feature_names = None
    if inputs.features is not None:
        X, feature_names = inputs.features
        pos = pd.Index(inputs.windows["id"]).get_indexer(table["window_id"])
        table = pd.concat([table, pd.DataFrame(X[pos], columns=feature_names)], axis=1)
    accuracy, absent = inputs.accuracy, inputs.accuracy_absent
    if accuracy is not None and not (table["status"] == "proposed").any():
        accuracy, absent = None, "no proposed window in this export (only confirmed ones)"
    Path(targets["windows"]).parent.mkdir(exist_ok=True)
    files = {}
    for kind, frame in (("windows", table), ("segments", segs)):
        digest = write_table(frame, targets[kind], fmt)
        files[kind] = {"name": Path(targets[kind]).name, "format": fmt, "rows": int(len(frame)),
                       "sha256": digest}
    if signals is not None:
        files["signals"] = {"name": Path(targets["signals"]).name, "format": "npz",
                            "rows": int(len(table)), "sha256": write_npz(signals, targets["signals"]),
                            "arrays": {"window_id": "window ids, in the row order of the windows "
                                                    "table", "signal": "float32 (windows, samples, "
                                                    "channels), canonical units (g, deg/s)",
                                       "channels": "channel names", "rate_hz": "sampling rate"}}
    names = {c["id"]: c["name"] for c in inputs.classes}
    manifest = build_manifest(
        tool_version=tool_version, created_at=created_at, created_by=created_by,
        project=inputs.project, feature_set_version=inputs.feature_set_version,
        window_settings={"length_s": inputs.window_length_s, "step_s": inputs.window_step_s,
                         "segment_rule": "each window stands for the step-long span around "
                                         "its centre; segments join those spans"},
        recordings=[{"name": r["name"], "content_hash": r["content_hash"],
                     "source_path": r["source_path"], "person": _person(r),
                     "rate_hz": float(r["rate"]), "n_samples": int(r["n_samples"]),
                     "duration_s": float(r["n_samples"] / r["rate"]),
                     "start_time": start_times[r["name"]], "channels": list(r["channels"]),
                     "window_length_samples": int(r["window_length"]),
                     "window_step_samples": int(r["window_step"])} for _, r in recs.iterrows()],
        classes=[{"name": c["name"], "colour": c["colour"],
                  "retired": c["retired_at"] is not None, "retired_at": c["retired_at"],
                  "merged_into": (None if c["merged_into"] is None
                                  else names.get(c["merged_into"]))}
                 for c in inputs.classes],
        selection={"confirmed_only": bool(confirmed_only),
                   "min_confidence": None if min_confidence is None else float(min_confidence),
                   "classes": classes},
        proposals=inputs.proposal_params, accuracy=accuracy,
        accuracy_absent=absent, table=table, files=files)
    manifest["features"] = (None if feature_names is None else
                            {"columns": list(feature_names),
                             "set_version": inputs.feature_set_version})
    manifest["grouped_splits"] = {
        "why": GROUPED_SPLITS, "group_columns": ["person", "recording", "bout"],
        "person_known": bool(recs["person"].notna().all()) if "person" in recs else False,
        "python": "labeler.training.read_training_set(folder) -> (X, y, groups) for "
                  "sklearn.model_selection.GroupKFold"}
    manifest = json_ready(manifest)
    write_json(manifest, targets["manifest"])
    return ExportReport(files={k: str(v) for k, v in targets.items()}, windows=int(len(table)),
                        segments=int(len(segs)), manifest=manifest)


def add_group_columns(table: pd.DataFrame, geometry: Mapping[str, tuple[float, float]],
                      recordings: pd.DataFrame) -> pd.DataFrame:
    """The window rows with :data:`GROUP_COLUMNS`: person (the recording's name when not known),
    bout (the number of the row's segment, see :func:`segments`) and recording_file."""
    t = table.sort_values(["recording", "start_s", "window"], kind="stable").reset_index(drop=True)
    by_name = recordings.set_index("name")
    persons = {n: _person(r) or n for n, r in by_name.iterrows()}
    step = t["recording"].map(lambda r: geometry[r][1]).to_numpy(float)
    t["person"] = t["recording"].map(persons)
    t["bout"] = bout_ids(t["recording"].to_numpy(), t["label"].to_numpy(),
                         t["start_s"].to_numpy(float), step).astype("int64")
    t["recording_file"] = t["recording"].map(by_name["source_path"])
    return t


def _person(row) -> str | None:
    value = row.get("person") if hasattr(row, "get") else None
    return value if isinstance(value, str) and value else None


# --------------------------------------------------------------------------- writing

def write_atomic(path: str | os.PathLike, write: Callable[[Path], None]) -> str:
    """Write a file through ``write(tmp_path)`` to a temporary name in the same folder, flush it to
    disk and rename it over ``path``. Returns the SHA-256 of what was written."""
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
    try:
        write(tmp)
        digest = hashlib.sha256()
        with open(tmp, "rb+") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise
    return digest.hexdigest()


def write_table(table: pd.DataFrame, path: str | os.PathLike, fmt: str) -> str:
    """Write a table as CSV (timestamps as ISO-8601 UTC with a Z) or Parquet; returns its SHA-256."""
    if fmt == "csv":
        return write_atomic(path, lambda p: table.to_csv(p, index=False, date_format=ISO_UTC,
                                                         float_format="%.10g"))
    if fmt == "parquet":
        return write_atomic(path, lambda p: table.to_parquet(p, index=False, engine="pyarrow"))
    raise ValueInputError(f"unknown format {fmt!r}; use one of {', '.join(FORMATS)}")


def write_npz(arrays: Mapping[str, np.ndarray], path: str | os.PathLike) -> str:
    """Write NumPy arrays to one compressed .npz file atomically; returns its SHA-256."""
    def write(p: Path) -> None:
        with open(p, "wb") as fh:  # a file object: np.savez adds no suffix to it
            np.savez_compressed(fh, **arrays)
    return write_atomic(path, write)


def write_json(obj: Any, path: str | os.PathLike) -> str:
    """Write JSON (NaN and infinities as null) atomically; returns its SHA-256."""
    text = json.dumps(json_ready(obj), indent=2, ensure_ascii=False, allow_nan=False, default=_json_default)
    return write_atomic(path, lambda p: p.write_text(text + "\n", encoding="utf-8"))


def json_ready(value: Any) -> Any:
    """A copy with non-finite floats as None (JSON has no NaN)."""
    if isinstance(value, dict):
        return {k: json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, (float, np.floating)):
        return float(value) if np.isfinite(value) else None
    return value


def _json_default(value: Any) -> Any:
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return None if not np.isfinite(value) else float(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (pd.Timestamp,)):
        return value.strftime(ISO_UTC)
    raise TypeError(f"cannot write {type(value).__name__} to the manifest")
