"""Applying a project's labels to a whole study: every recording of a folder the project lacks.

1. :func:`train_from_project` fits a calibrated window classifier
   (:mod:`labeler.study.model`) on the project's confirmed windows, and on request on proposed
   windows whose confidence reaches a threshold.
2. :func:`apply_to_study` runs one task per recording file (:func:`label_file`: read, check,
   window and compute features with the project's settings, then classify), on a Dask cluster or a
   local process pool (:mod:`labeler.study.runner`). Files already in the project (same content)
   are skipped; files that cannot be used are refused with the reason, and the rest go on.
3. The calling process writes, per recording, ``<name>/windows.<fmt>`` (one row per window: label,
   calibrated confidence, margin and the probability of each class) and ``<name>/segments.<fmt>``
   (consecutive windows of one label merged, as :func:`labeler.exporting.segments` does), each file
   atomically, and last ``manifest.json``: the model and its settings, the project and its window
   and feature settings, every recording written, skipped or refused.

Labels written here are a model's suggestions. Where they feed clinical or safety decisions, a
qualified person reviews them, and local rules and licensed practice come first.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from labeler import exporting as ex
from labeler.errors import InputError, LabelerError
from labeler.preparing import recording_features, window_starts
from labeler.recordings import read_recording, recording_name
from labeler.study.ingest import Refusal, study_files
from labeler.study.model import calibration_groups, predict_windows, train_window_model
from labeler.study.runner import TaskFailed, open_runner

MANIFEST_FORMAT = "labeler-study/1"
DEFAULT_MIN_CONFIDENCE = 0.9

Progress = Callable[[float, str], None]


@dataclass
class StudyModel:
    """A trained model with what it needs to label new recordings the project's way."""

    model: object
    feature_names: list[str]
    channels: list[str]
    window_length_s: float
    window_step_s: float
    feature_set_version: str
    description: dict


@dataclass
class Skipped:
    path: str
    reason: str


@dataclass
class LabeledRecording:
    path: str
    name: str
    content_hash: str
    windows: pd.DataFrame
    segments: pd.DataFrame
    repairs: list[str] = field(default_factory=list)


@dataclass
class StudyReport:
    out: str
    written: list[dict] = field(default_factory=list)
    skipped: list[Skipped] = field(default_factory=list)
    refused: list[Refusal] = field(default_factory=list)
    runner: str = ""
    seconds: float = 0.0
    manifest: dict = field(default_factory=dict)

    @property
    def n_windows(self) -> int:
        return sum(int(r["windows"]) for r in self.written)


# ------------------------------------------------------------------------------------ training

def train_from_project(project, *, include_proposed: bool = False,
                       min_confidence: float = DEFAULT_MIN_CONFIDENCE,
                       random_state: int = 0) -> StudyModel:
    """Fit the study model on the project's confirmed windows (and, with ``include_proposed``,
    on proposed windows of confidence >= ``min_confidence``)."""
    if not 0.0 <= float(min_confidence) <= 1.0:
        raise InputError(f"minimum confidence {min_confidence} is outside 0-1; give e.g. 0.9")
    from labeler.features import FEATURE_SET_VERSIONS

    # every set this labeler computes holds the columns of the sets before it, under their names
    if project.feature_set_version not in FEATURE_SET_VERSIONS:
        raise InputError(f"{project.path}: its features were computed by feature set "
                         f"{project.feature_set_version}, this labeler computes "
                         f"{', '.join(FEATURE_SET_VERSIONS)}; new recordings would not be "
                         "comparable; use the labeler version that made the project")
    X, names = project.features()
    w = project.windows()
    if len(w) == 0:
        raise InputError(f"{project.path}: no windows yet; add recordings and confirm some first")
    y_idx, classes = project.label_vector()
    label = np.full(len(w), None, dtype=object)
    confirmed = y_idx >= 0
    label[confirmed] = np.asarray(classes, dtype=object)[y_idx[confirmed]]
    status = np.where(confirmed, "confirmed", "")
    n_proposed = 0
    if include_proposed:
        p = project.proposals()
        if len(p) == 0:
            raise InputError(f"{project.path}: no proposals yet; run `labeler propose` first or "
                             "train on confirmed windows only")
        p = p[(~p["confirmed"]) & (p["confidence"] >= float(min_confidence)) & p["label"].notna()]
        pos = pd.Index(w["id"]).get_indexer(p["window_id"])
        keep = (pos >= 0) & ~confirmed[np.maximum(pos, 0)]
        label[pos[keep]] = p["label"].to_numpy(object)[keep]
        status[pos[keep]] = "proposed"
        n_proposed = int(keep.sum())
    use = np.array([v is not None for v in label])
    if not use.any():
        raise InputError(f"{project.path}: no confirmed window yet; confirm windows of each "
                         "activity first")
    groups, kind = calibration_groups(w["recording_id"].to_numpy()[use],
                                      w["start_s"].to_numpy()[use])
    try:
        model, desc = train_window_model(X[use], label[use].astype(str), groups, group_kind=kind,
                                         random_state=random_state)
    except InputError as exc:
        raise InputError(f"{project.path}: {exc}") from None
    desc["training"] = {"confirmed_windows": int((status == "confirmed").sum()),
                        "proposed_windows": n_proposed,
                        "proposed_min_confidence": float(min_confidence) if include_proposed
                        else None,
                        "recordings": int(np.unique(w["recording_id"].to_numpy()[use]).size)}
    channels = list(project.recordings()["channels"].iloc[0])
    return StudyModel(model=model, feature_names=list(names), channels=channels,
                      window_length_s=project.window_length_s,
                      window_step_s=project.window_step_s,
                      feature_set_version=project.feature_set_version, description=desc)


# ------------------------------------------------------------------------------------ one task

def label_file(path: str, study_model: StudyModel, read_options: dict,
               known_hashes: frozenset) -> LabeledRecording | Refusal | Skipped:
    """Read, window, compute features and classify one recording file (runs on a worker)."""
    try:
        rec = read_recording(path, **read_options)
        if rec.content_hash in known_hashes:
            return Skipped(str(path), f"{path}: already in the project (same content); skipped")
        starts, length, step = window_starts(rec, study_model.window_length_s,
                                             study_model.window_step_s)
        X, names = recording_features(rec, starts, length)
        index = {n: i for i, n in enumerate(names)}
        missing = [n for n in study_model.feature_names if n not in index]
        if missing:
            gone = [c for c in study_model.channels if c not in rec.channels]
            channel = gone[0] if gone else missing[0].split(".")[0]
            raise InputError(f"{path}: no channel {channel!r}, which the project's features use "
                             f"(the file has {', '.join(rec.channels)}); give recordings with the "
                             "project's channels")
        X = X[:, [index[n] for n in study_model.feature_names]]
        pred = predict_windows(study_model.model, X)
    except LabelerError as exc:
        return Refusal(str(path), str(exc))
    except MemoryError:
        return Refusal(str(path), f"{path}: too large for a worker's memory; give the workers "
                                  "more memory or split the recording")
    start_s = starts / rec.rate
    end_s = (starts + length) / rec.rate
    if rec.start_time:
        base = pd.Timestamp(rec.start_time)
        start_utc = pd.Series(base + pd.to_timedelta(start_s, unit="s"))
        end_utc = pd.Series(base + pd.to_timedelta(end_s, unit="s"))
    else:  # the file gave seconds, not clock times
        start_utc = end_utc = pd.Series(pd.NaT, index=range(starts.size),
                                        dtype="datetime64[ns, UTC]")
    table = pd.DataFrame({"recording": rec.name, "window": np.arange(starts.size, dtype=np.int64),
                          "start_s": start_s, "end_s": end_s,
                          "start_utc": start_utc.to_numpy(), "end_utc": end_utc.to_numpy(),
                          "label": pred["label"].astype(object),
                          "confidence": pred["confidence"].astype(np.float64),
                          "margin": pred["margin"].astype(np.float64)})
    for j, c in enumerate(study_model.model.classes_):
        table[f"p_{c}"] = pred["proba"][:, j].astype(np.float64)
    seg_input = table.assign(status="predicted", retired=False)
    segs = ex.segments(seg_input, {rec.name: (length / rec.rate, step / rec.rate)})
    segs = segs.drop(columns=["confirmed", "retired"])
    return LabeledRecording(str(path), rec.name, rec.content_hash, table, segs, list(rec.repairs))


# ------------------------------------------------------------------------------------ the run

def apply_to_study(project, sources: Sequence[str | os.PathLike], out: str | os.PathLike,
                   runner=None, *, study_model: StudyModel | None = None, include_proposed: bool = False,
                   min_confidence: float = DEFAULT_MIN_CONFIDENCE, read_options: dict | None = None,
                   fmt: str = "csv", overwrite: bool = False, random_state: int = 0,
                   progress: Progress | None = None, **runner_options) -> StudyReport:
    """Label every recording of ``sources`` the project does not hold; write to ``out``.

    ``runner``: an open runner (:func:`labeler.study.runner.open_runner`); when None, one is opened
    with ``runner_options`` (workers, scheduler, backend) once the inputs are checked and the model
    is trained."""
    from storage.store import utc_now

    import labeler

    t0 = time.perf_counter()
    if fmt not in ex.FORMATS:
        raise InputError(f"format {fmt!r} is unknown; use one of {', '.join(ex.FORMATS)}")
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: is a file; give a folder for the labels")
    if not out.exists() and not out.parent.is_dir():
        raise InputError(f"{out}: folder {out.parent} does not exist; create it first")
    if (out / "manifest.json").exists() and not overwrite:
        raise InputError(f"{out}: holds labels of an earlier run; give another folder or "
                         "--overwrite")
    files = study_files(sources)
    if progress:
        progress(0.0, "training the model")
    if study_model is None:
        study_model = train_from_project(project, include_proposed=include_proposed,
                                         min_confidence=min_confidence, random_state=random_state)
    if runner is None:
        with open_runner(**runner_options) as opened:
            return apply_to_study(project, files, out, opened, study_model=study_model,
                                  read_options=read_options, fmt=fmt, overwrite=overwrite,
                                  progress=progress)
    known = frozenset(project.recordings()["content_hash"])
    report = StudyReport(out=str(out), runner=runner.description)
    # one output folder per recording name: a second file with a taken name is refused up front
    by_name: dict[str, str] = {}
    todo = []
    for p in files:
        name = recording_name(p)
        try:
            project.refuse_own_file(p)
        except InputError as exc:
            report.refused.append(Refusal(p, str(exc)))
            continue
        if name in by_name:
            report.refused.append(Refusal(p, f"{p}: gives the recording name {name!r} as "
                                             f"{by_name[name]} does; rename one of the files"))
        else:
            by_name[name] = p
            todo.append(p)
    out.mkdir(exist_ok=True)
    shared = runner.share(study_model)
    options = dict(read_options or {})
    handles = {}
    for p in todo:
        fut = runner.submit(label_file, p, shared, options, known)
        handles[id(fut)] = (p, fut)
    done = 0
    written: dict[str, dict] = {}
    for fut, res in runner.as_completed([f for _, f in handles.values()]):
        path, _ = handles.pop(id(fut))
        done += 1
        if isinstance(res, TaskFailed):
            res = Refusal(path, f"{path}: the task failed ({res}); try the file again alone")
        if isinstance(res, Refusal):
            report.refused.append(res)
        elif isinstance(res, Skipped):
            report.skipped.append(res)
        else:
            written[path] = _write_recording(res, out, fmt)
        if progress:
            progress(done / max(1, len(todo)), f"{Path(path).name} done")
    report.written = [written[p] for p in todo if p in written]
    order = {p: i for i, p in enumerate(files)}
    report.refused.sort(key=lambda r: order.get(r.path, len(order)))
    report.skipped.sort(key=lambda r: order.get(r.path, len(order)))
    report.seconds = time.perf_counter() - t0
    meta = project.store.meta()
    manifest = {
        "format": MANIFEST_FORMAT,
        "created_at": utc_now(),
        "created_by": project.annotator,
        "tool": {"name": "labeler", "version": labeler.__version__},
        "project": {"file": Path(project.path).name, "project_id": meta.get("project_id"),
                    "schema_version": int(meta.get("schema_version", 0)),
                    "as_of_event": project.store.last_event_id()},
        "settings": {"window_length_s": study_model.window_length_s,
                     "window_step_s": study_model.window_step_s,
                     "feature_set_version": study_model.feature_set_version,
                     "channels": study_model.channels,
                     "features": study_model.feature_names,
                     "read_options": options, "format": fmt},
        "model": study_model.description,
        "run": {"runner": report.runner, "seconds": round(report.seconds, 3),
                "files": len(files)},
        "recordings": report.written,
        "skipped": [{"file": s.path, "reason": s.reason} for s in report.skipped],
        "refused": [{"file": r.path, "reason": r.reason} for r in report.refused],
        "caution": ex.CAUTION,
    }
    ex.write_json(manifest, out / "manifest.json")
    report.manifest = ex.json_ready(manifest)
    return report


def _write_recording(res: LabeledRecording, out: Path, fmt: str) -> dict:
    folder = out / res.name
    folder.mkdir(exist_ok=True)
    files = {}
    for kind, frame in (("windows", res.windows), ("segments", res.segments)):
        target = folder / f"{kind}.{fmt}"
        files[kind] = {"name": f"{res.name}/{target.name}", "rows": int(len(frame)),
                       "sha256": ex.write_table(frame, target, fmt)}
    counts = res.windows["label"].value_counts()
    return {"file": res.path, "name": res.name, "content_hash": res.content_hash,
            "windows": int(len(res.windows)), "segments": int(len(res.segments)),
            "mean_confidence": float(res.windows["confidence"].mean()),
            "windows_per_label": {str(k): int(v) for k, v in sorted(counts.items())},
            "repairs": res.repairs, "files": files}
