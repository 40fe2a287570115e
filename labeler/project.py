"""`Project`: the one service layer under the CLI and the app. Every use case is a method here.

A project is one SQLite file (see :mod:`storage.store`). `Project` turns recordings into windows and
features, keeps classes and the label history, and hands numerics their arrays. It holds no user
interface and no SQL of its own beyond what :class:`storage.Store` offers.
"""

from __future__ import annotations

import getpass
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Sequence

import numpy as np
import pandas as pd

import labeler
from labeler import features as _features
from labeler.errors import InputError, LabelerError, ProjectError
from labeler.recordings import Recording, read_recording
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples
from storage import Store, StoreError

# Okabe & Ito, "Color universal design: how to make figures and presentations that are friendly to
# colorblind people", 2008: eight colours distinguishable with the common colour-vision deficiencies.
# Black is last; it is used for the eighth class.
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")
CHUNK_SECONDS = 60.0
SOURCES = ("map", "timeline", "queue", "audit", "import", "cli", "api", "class-merge", "undo")
_CLASS_NAME = re.compile(r"^[^\x00-\x1f\x7f]{1,60}$")

Progress = Callable[[float, str], None]


def default_annotator() -> str:
    name = os.environ.get("LABELER_ANNOTATOR")
    if name:
        return name
    try:
        return getpass.getuser()
    except Exception:  # no user name on some systems
        return "annotator"


@dataclass
class AddedRecording:
    id: int
    name: str
    n_samples: int
    rate: float
    n_windows: int
    duration_s: float
    repairs: list[str]


class Project:
    """An open project file.

    >>> p = Project.create("shift.labeler")                          # doctest: +SKIP
    >>> p.add_recordings(["picker01.csv"])                           # doctest: +SKIP
    >>> p.confirm([12, 13, 14], "walking")                           # doctest: +SKIP
    """

    def __init__(self, store: Store, annotator: str | None = None):
        self.store = store
        self.path = store.path
        self.annotator = _check_annotator(annotator or default_annotator())
        self._cache: dict[str, object] = {}

    # ------------------------------------------------------------------ create / open
    @classmethod
    def create(cls, path: str | os.PathLike, *, window_length_s: float = DEFAULT_LENGTH_S,
               window_step_s: float = DEFAULT_STEP_S, annotator: str | None = None) -> "Project":
        if not (window_length_s > 0) or not (window_step_s > 0):
            raise InputError(f"window length and step must be > 0 s (got {window_length_s}, "
                             f"{window_step_s}); give e.g. --window 2.56 --step 1.28")
        if window_step_s > window_length_s:
            raise InputError(f"window step {window_step_s} s is longer than the window "
                             f"{window_length_s} s; samples in between would never be labeled")
        settings = {"window_length_s": float(window_length_s), "window_step_s": float(window_step_s),
                    "feature_set_version": _features.FEATURE_SET_VERSION}
        try:
            store = Store.create(path, settings, tool_version=labeler.__version__)
        except StoreError as exc:
            raise ProjectError(str(exc)) from None
        return cls(store, annotator)

    @classmethod
    def open(cls, path: str | os.PathLike, *, annotator: str | None = None,
             readonly: bool = False) -> "Project":
        try:
            store = Store.open(path, readonly=readonly)
        except StoreError as exc:
            raise ProjectError(str(exc)) from None
        return cls(store, annotator)

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> "Project":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _invalidate(self, *keys: str) -> None:
        if not keys:
            self._cache.clear()
        for k in keys:
            self._cache.pop(k, None)

    # ------------------------------------------------------------------ settings
    @property
    def window_length_s(self) -> float:
        return float(self.store.setting("window_length_s", DEFAULT_LENGTH_S))

    @property
    def window_step_s(self) -> float:
        return float(self.store.setting("window_step_s", DEFAULT_STEP_S))

    @property
    def feature_set_version(self) -> str:
        return str(self.store.setting("feature_set_version", _features.FEATURE_SET_VERSION))

    # ------------------------------------------------------------------ recordings
    def add_recordings(self, paths: Sequence[str | os.PathLike], *, rate: float | None = None,
                       time_column: str | None = None, acc_unit: str = "g",
                       gyr_unit: str = "deg/s", progress: Progress | None = None
                       ) -> list[AddedRecording]:
        """Read, check and add recording files; all of them or none (one transaction).

        Every file is read and checked before anything is written, so a bad file leaves the project
        as it was.
        """
        if not paths:
            raise InputError("no recording files given; pass one or more CSV or Parquet files")
        recs: list[Recording] = []
        for i, p in enumerate(paths):
            if progress:
                progress(i / (2 * len(paths)), f"reading {Path(p).name}")
            recs.append(read_recording(p, rate=rate, time_column=time_column, acc_unit=acc_unit,
                                       gyr_unit=gyr_unit))
        return self.add_recording_data(recs, progress=progress, _offset=0.5)

    def add_recording_data(self, recordings: Sequence[Recording], *,
                           progress: Progress | None = None, _offset: float = 0.0
                           ) -> list[AddedRecording]:
        """Add already-read recordings (from :func:`read_recording` or a simulator)."""
        existing = {r["content_hash"]: r["name"] for r in self.store.recordings()}
        names = {r["name"] for r in self.store.recordings()}
        seen: dict[str, str] = {}
        for rec in recordings:
            if rec.content_hash in existing:
                raise InputError(f"{rec.source_path}: already in the project as recording "
                                 f"{existing[rec.content_hash]!r} (same content); nothing added")
            if rec.content_hash in seen:
                raise InputError(f"{rec.source_path}: same content as {seen[rec.content_hash]}; "
                                 "give each recording once; nothing added")
            seen[rec.content_hash] = rec.source_path
            if rec.name in names:
                raise InputError(f"{rec.source_path}: a recording named {rec.name!r} is already in "
                                 "the project; rename the file; nothing added")
            names.add(rec.name)
        prepared = []
        for i, rec in enumerate(recordings):
            if progress:
                progress(_offset + (1 - _offset) * i / max(1, len(recordings)),
                         f"features of {rec.name}")
            prepared.append(self._prepare(rec))
        added = []
        try:
            with self.store.atomic():
                for rec, (row, chunks, wins, feats) in zip(recordings, prepared):
                    rid = self.store.add_recording(row, chunks, wins, feats)
                    added.append(AddedRecording(rid, rec.name, rec.n_samples, rec.rate,
                                                len(wins["seq"]), rec.duration_s, rec.repairs))
        except StoreError as exc:
            raise InputError(str(exc)) from None
        self._invalidate()
        if progress:
            progress(1.0, "done")
        self._after_recordings_added([a.id for a in added])
        return added

    def _after_recordings_added(self, recording_ids: list[int]) -> None:
        """Hook for derived results (maps, graphs) that follow new recordings."""

    def _prepare(self, rec: Recording):
        length, step = window_samples(rec.rate, self.window_length_s, self.window_step_s)
        starts = cut_windows(rec.valid, length, step)
        if starts.size == 0:
            raise InputError(
                f"{rec.source_path}: {rec.duration_s:.2f} s of usable signal holds no window of "
                f"{self.window_length_s:g} s; give a longer recording or a project with shorter windows")
        X, names = _features.window_features(rec.signal, starts, length, rec.rate, rec.channels)
        X = np.ascontiguousarray(X, dtype=np.float32)
        if not np.isfinite(X).all():
            bad = names[int(np.flatnonzero(~np.isfinite(X).all(axis=0))[0])]
            raise InputError(f"{rec.source_path}: feature {bad} is not finite; check the recording "
                             "for constant or broken channels")
        row = {"name": rec.name, "source_path": rec.source_path, "content_hash": rec.content_hash,
               "rate": rec.rate, "channels": rec.channels, "units": rec.units,
               "n_samples": rec.n_samples, "start_time": rec.start_time,
               "added_by": self.annotator, "repairs": rec.repairs, "window_length": length,
               "window_step": step}
        chunk = max(1, int(CHUNK_SECONDS * rec.rate))
        sig = np.ascontiguousarray(rec.signal, dtype=np.float32)
        chunks = [(a, min(chunk, rec.n_samples - a), sig.shape[1], sig[a:a + chunk].tobytes())
                  for a in range(0, rec.n_samples, chunk)]
        wins = {"seq": np.arange(starts.size), "start_sample": starts,
                "stop_sample": starts + length, "start_s": starts / rec.rate,
                "stop_s": (starts + length) / rec.rate}
        feats = {"version": _features.FEATURE_SET_VERSION, "names": names,
                 "n_windows": int(X.shape[0]), "n_features": int(X.shape[1]), "data": X.tobytes()}
        return row, chunks, wins, feats

    def recordings(self) -> pd.DataFrame:
        rows = self.store.recordings()
        cols = ["id", "name", "source_path", "content_hash", "rate", "channels", "units",
                "n_samples", "start_time", "added_at", "added_by", "repairs", "window_length",
                "window_step"]
        return pd.DataFrame(rows, columns=cols)

    def recording_id(self, name_or_id: str | int) -> int:
        recs = self.recordings()
        if isinstance(name_or_id, (int, np.integer)) or str(name_or_id).isdigit():
            hit = recs[recs["id"] == int(name_or_id)]
            if len(hit) == 0:
                hit = recs[recs["name"] == str(name_or_id)]
        else:
            hit = recs[recs["name"] == str(name_or_id)]
        if len(hit) == 0:
            known = ", ".join(recs["name"].head(8)) or "none yet"
            raise InputError(f"no recording {name_or_id!r} in the project; recordings: {known}")
        return int(hit["id"].iloc[0])

    def signal(self, recording: str | int, start_s: float | None = None,
               stop_s: float | None = None) -> tuple[np.ndarray, np.ndarray, list[str]]:
        """(time in s, signal (n, channels) float32 with NaN in gaps, channel names) of a span."""
        rid = self.recording_id(recording)
        rec = self.recordings().set_index("id").loc[rid]
        rate = float(rec["rate"])
        a = 0 if start_s is None else max(0, int(np.floor(start_s * rate)))
        b = int(rec["n_samples"]) if stop_s is None else min(int(rec["n_samples"]),
                                                             int(np.ceil(stop_s * rate)))
        b = max(a, b)
        parts = []
        n_ch = len(rec["channels"])
        for s0, n, c, data in self.store.signal_chunks(rid, a, b):
            block = np.frombuffer(data, dtype=np.float32).reshape(n, c)
            lo, hi = max(a, s0) - s0, min(b, s0 + n) - s0
            parts.append(block[lo:hi])
        sig = np.concatenate(parts) if parts else np.empty((0, n_ch), np.float32)
        return (a + np.arange(sig.shape[0])) / rate, sig, list(rec["channels"])

    # ------------------------------------------------------------------ windows and features
    def windows(self) -> pd.DataFrame:
        """All windows: id, recording_id, recording, seq, start_sample, stop_sample, start_s, stop_s.

        Ordered by id, which is also the row order of :meth:`features` and every per-window array.
        """
        if "windows" not in self._cache:
            cols = self.store.windows_columns()
            df = pd.DataFrame(cols)
            names = dict(zip(*[self.recordings()[c] for c in ("id", "name")]))
            df.insert(2, "recording", df["recording_id"].map(names))
            self._cache["windows"] = df
        return self._cache["windows"].copy()

    @property
    def n_windows(self) -> int:
        return len(self.windows())

    def features(self) -> tuple[np.ndarray, list[str]]:
        """(X float32 (n_windows, n_features), names), rows in window-id order."""
        if "features" not in self._cache:
            blocks, names = [], None
            for row in self.store.features():
                if names is not None and row["names"] != names:
                    raise ProjectError(f"{self.path}: recordings have different channels; features "
                                       "cannot be compared across them")
                names = row["names"]
                blocks.append(np.frombuffer(row["data"], dtype=np.float32).reshape(
                    row["n_windows"], row["n_features"]))
            X = np.concatenate(blocks) if blocks else np.empty((0, 0), np.float32)
            self._cache["features"] = (X, names or [])
        X, names = self._cache["features"]
        return X, list(names)

    def window_ids_in_span(self, recording: str | int, start_s: float, end_s: float,
                           rule: str = "majority") -> np.ndarray:
        """Windows of a recording inside [start_s, end_s].

        ``rule="majority"`` (default): a window belongs to the span when more than half of it lies
        inside; ``"inside"``: only windows wholly inside; ``"touch"``: any overlap.
        """
        if not end_s > start_s:
            raise InputError(f"span end {end_s} s is not after its start {start_s} s; swap them")
        rid = self.recording_id(recording)
        w = self.windows()
        w = w[w["recording_id"] == rid]
        a, b = w["start_s"].to_numpy(), w["stop_s"].to_numpy()
        overlap = np.clip(np.minimum(b, end_s) - np.maximum(a, start_s), 0, None)
        if rule == "majority":
            keep = overlap > 0.5 * (b - a)
        elif rule == "inside":
            keep = (a >= start_s) & (b <= end_s)
        elif rule == "touch":
            keep = overlap > 0
        else:
            raise InputError(f"unknown span rule {rule!r}; use majority, inside or touch")
        return w["id"].to_numpy()[keep]

    # ------------------------------------------------------------------ classes
    def classes(self, include_retired: bool = True) -> pd.DataFrame:
        cols = ["id", "name", "colour", "position", "created_at", "created_by", "retired_at",
                "merged_into"]
        return pd.DataFrame(self.store.classes(include_retired), columns=cols)

    def active_classes(self) -> list[str]:
        return list(self.classes(include_retired=False)["name"])

    def add_class(self, name: str, colour: str | None = None) -> int:
        name = _check_class_name(name)
        if colour is None:
            used = len(self.store.classes())
            colour = PALETTE[used % len(PALETTE)]
        if not re.fullmatch(r"#[0-9A-Fa-f]{6}", colour):
            raise InputError(f"colour {colour!r} is not a #RRGGBB colour; give e.g. #0072B2")
        try:
            cid = self.store.add_class(name, colour, self.annotator)
        except StoreError as exc:
            raise InputError(str(exc)) from None
        return cid

    def class_id(self, name: str, *, create: bool = False, allow_retired: bool = False) -> int:
        row = self.store.class_by_name(str(name).strip())
        if row is None:
            if create:
                return self.add_class(name)
            known = ", ".join(self.active_classes()) or "none yet"
            raise InputError(f"no class {name!r}; classes: {known}; add it with `labeler class add`")
        if row["retired_at"] is not None and not allow_retired:
            if row["merged_into"] is not None:
                into = self.class_name(row["merged_into"])
                raise InputError(f"class {row['name']!r} was merged into {into!r}; use {into!r}")
            raise InputError(f"class {row['name']!r} is retired; it takes no new confirmations")
        return int(row["id"])

    def class_name(self, class_id: int) -> str:
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        return str(names[int(class_id)])

    def rename_class(self, old: str, new: str) -> None:
        cid = self.class_id(old, allow_retired=True)
        new = _check_class_name(new)
        try:
            self.store.rename_class(cid, new, self.annotator)
        except StoreError as exc:
            raise InputError(str(exc)) from None

    def retire_class(self, name: str) -> None:
        cid = self.class_id(name)
        self.store.retire_class(cid, self.annotator)

    def merge_classes(self, source: str, target: str) -> str | None:
        """Move every label of ``source`` to ``target`` (one batch), then retire ``source``.

        The windows keep their history: the move is a batch of events of its own. Returns the batch id
        (None when no window carried the class).
        """
        src = self.class_id(source)
        dst = self.class_id(target)
        if src == dst:
            raise InputError(f"cannot merge class {source!r} into itself; give two classes")
        with self.store.atomic():
            rows = [(w, who) for w, who, c in self.store.annotations() if c == src]
            batch = None
            if rows:
                batch = self.store.apply_batch(
                    self.annotator, "merge", "class-merge", [(w, dst) for w, _ in rows],
                    note=f"merged {source} into {target}", per_annotator=[who for _, who in rows])
            self.store.retire_class(src, self.annotator, merged_into=dst)
        return batch

    # ------------------------------------------------------------------ labels
    def confirm(self, window_ids: Iterable[int], class_name: str, *, source: str = "api",
                note: str | None = None, create_class: bool = False) -> str:
        """Confirm windows as one class: one batch of events. Returns the batch id."""
        ids = self._check_window_ids(window_ids)
        if source not in SOURCES:
            raise InputError(f"unknown source {source!r}; use one of {', '.join(SOURCES)}")
        cid = self.class_id(class_name, create=create_class)
        return self.store.apply_batch(self.annotator, "confirm", source,
                                      [(int(w), cid) for w in ids], note=note)

    def withdraw(self, window_ids: Iterable[int], *, source: str = "api",
                 note: str | None = None) -> str:
        """Withdraw this annotator's labels of the windows (one batch)."""
        ids = self._check_window_ids(window_ids)
        return self.store.apply_batch(self.annotator, "withdraw", source,
                                      [(int(w), None) for w in ids], note=note)

    def _check_window_ids(self, window_ids: Iterable[int]) -> list[int]:
        try:
            ids = sorted({int(w) for w in window_ids})
        except (TypeError, ValueError):
            raise InputError("window ids must be whole numbers; list them like 12 13 14") from None
        if not ids:
            raise InputError("no windows given; select or list at least one window")
        known = self.windows()["id"].to_numpy()
        if known.size == 0:
            raise InputError(f"{self.path}: the project has no windows yet; add recordings first "
                             "with `labeler add`")
        missing = np.setdiff1d(ids, known)
        if missing.size:
            raise InputError(f"window {int(missing[0])} is not in the project (window ids run from "
                             f"{int(known.min())} to {int(known.max())})")
        return ids

    def undo(self, batch_id: str | None = None) -> str:
        """Undo a batch (default: this annotator's last one not yet undone) by appending events.

        Each window touched by the batch gets back the label it had before the batch, unless its label
        has changed since (a later batch set another class): then the later change stands and the window
        is left alone. Returns the undo's batch id.
        """
        store = self.store
        with store.atomic():
            if batch_id is None:
                target = store.last_undoable_batch(self.annotator)
                if target is None:
                    raise InputError(f"nothing to undo for annotator {self.annotator!r}")
            else:
                target = store.batch(batch_id)
                if target is None:
                    raise InputError(f"no batch {batch_id!r}; list batches with `labeler history`")
                if target["undone_by"] is not None:
                    raise InputError(f"batch {batch_id} was undone already (by {target['undone_by']})")
            changes, whose = [], []
            for ev in store.batch_events(target["id"]):
                now = store.annotation(ev["window_id"], ev["annotator"])
                now_class = None if now is None else now["class_id"]
                if now_class != ev["class_id"]:  # changed since; the later change stands
                    continue
                before = store.state_before(ev["id"], ev["window_id"], ev["annotator"])
                changes.append((ev["window_id"], before))
                whose.append(ev["annotator"])
            return store.apply_batch(self.annotator, "undo", "undo", changes,
                                     note=f"undo of batch {target['id']}", undoes=target["id"],
                                     per_annotator=whose)

    def labels(self) -> pd.DataFrame:
        """Current label of every labeled window: window_id, class, class_id, annotator, at, source."""
        rows = self.store.current_labels()
        df = pd.DataFrame(rows, columns=["window_id", "class_id", "annotator", "at", "source"])
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df.insert(1, "class", df["class_id"].map(names))
        return df

    def label_vector(self) -> tuple[np.ndarray, list[str]]:
        """(y, class names): y[i] is the index into class names of window i's current label, -1 when
        unlabeled; rows in window-id order. Class names are the active classes plus any retired class
        that still carries labels."""
        w = self.windows()
        lab = self.labels()
        names = self.active_classes()
        for c in lab["class"].unique():
            if c not in names:
                names.append(c)
        index = {c: i for i, c in enumerate(names)}
        y = np.full(len(w), -1, dtype=np.int64)
        pos = pd.Index(w["id"]).get_indexer(lab["window_id"])
        y[pos] = lab["class"].map(index).to_numpy()
        return y, names

    def history(self, *, annotator: str | None = None, class_name: str | None = None,
                source: str | None = None, since: str | None = None,
                until: str | None = None) -> pd.DataFrame:
        clauses, args = [], []
        if annotator:
            clauses.append("annotator = ?")
            args.append(annotator)
        if class_name:
            clauses.append("class_id = ?")
            args.append(self.class_id(class_name, allow_retired=True))
        if source:
            clauses.append("source = ?")
            args.append(source)
        if since:
            clauses.append("at >= ?")
            args.append(since)
        if until:
            clauses.append("at <= ?")
            args.append(until)
        rows = self.store.events(" AND ".join(clauses), args)
        cols = ["id", "at", "annotator", "action", "window_id", "class_id", "source", "batch_id",
                "note"]
        df = pd.DataFrame(rows, columns=cols)
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df.insert(6, "class", df["class_id"].map(names))
        return df

    def import_intervals(self, path: str | os.PathLike, *, dry_run: bool = False,
                         create_classes: bool = True) -> dict:
        """Confirm the windows inside each interval of an interval-label file (source "import").

        One batch per annotator named in the file (rows without one are this annotator's). With
        ``dry_run`` nothing is written; the report says what would change. Windows take an interval's
        label by the majority rule of :mod:`labeler.importing`.
        """
        from labeler.importing import read_intervals, windows_inside

        intervals = read_intervals(path)
        recs = self.recordings()
        durations = dict(zip(recs["name"], recs["n_samples"] / recs["rate"]))
        for iv in intervals:
            if iv.recording not in durations:
                known = ", ".join(list(durations)[:6]) or "none yet"
                raise InputError(f"{path}: row {iv.row}, column 'recording': no recording "
                                 f"{iv.recording!r} in the project (recordings: {known}); add it "
                                 "first or fix the name")
            if iv.start >= durations[iv.recording]:
                raise InputError(f"{path}: row {iv.row}: start {iv.start:g} s is past the end of "
                                 f"{iv.recording} ({durations[iv.recording]:.2f} s); fix the row")
        classes = {c.lower(): c for c in self.classes()["name"]}
        new_classes = sorted({iv.label for iv in intervals if iv.label.lower() not in classes})
        if new_classes and not create_classes:
            raise InputError(f"{path}: unknown class {new_classes[0]!r}; add it first or allow new "
                             "classes")
        for iv in intervals:
            if iv.label.lower() in classes:
                self.class_id(classes[iv.label.lower()])  # refuses retired classes, naming them
        per_who: dict[str, dict[int, str]] = {}
        rows = []
        wins = self.windows()
        for iv in intervals:
            w = wins[wins["recording"] == iv.recording]
            ids = w["id"].to_numpy()[windows_inside(w["start_s"], w["stop_s"], iv.start, iv.end)]
            who = iv.annotator or self.annotator
            target = per_who.setdefault(who, {})
            for w in ids:
                target[int(w)] = classes.get(iv.label.lower(), iv.label)
            rows.append({"row": iv.row, "recording": iv.recording, "label": iv.label,
                         "windows": int(len(ids))})
        current = {(w, who): c for w, who, c in self.store.annotations()}
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        changes = sum(1 for who, m in per_who.items() for w, c in m.items()
                      if names.get(current.get((w, who))) != c)
        relabels = sum(1 for who, m in per_who.items() for w, c in m.items()
                       if (w, who) in current and names.get(current[(w, who)]) != c)
        report = {"intervals": len(intervals), "windows": sum(len(m) for m in per_who.values()),
                  "changes": changes, "relabels": relabels, "new_classes": new_classes,
                  "rows": rows,
                  "annotators": sorted(per_who), "batches": []}
        if dry_run:
            return report
        with self.store.atomic():
            for name in new_classes:
                self.add_class(name)
            ids_by_name = {n: int(i) for i, n in zip(self.classes()["id"], self.classes()["name"])}
            for who, m in per_who.items():
                if not m:
                    continue
                batch = self.store.apply_batch(
                    who, "confirm", "import", [(w, ids_by_name[c]) for w, c in sorted(m.items())],
                    note=f"imported from {Path(path).name}")
                report["batches"].append(batch)
        return report

    # ------------------------------------------------------------------ summaries
    def counts(self) -> pd.DataFrame:
        """Confirmed windows per class (all classes, retired ones included)."""
        lab = self.labels()
        cls = self.classes()
        confirmed = lab.groupby("class_id").size()
        out = pd.DataFrame({"class": cls["name"], "confirmed": cls["id"].map(confirmed)
                            .fillna(0).astype(int), "retired": cls["retired_at"].notna()})
        return out.reset_index(drop=True)

    def status(self) -> dict:
        recs = self.recordings()
        w = self.windows()
        lab = self.labels()
        return {
            "path": str(self.path),
            "annotator": self.annotator,
            "recordings": len(recs),
            "hours": float((recs["n_samples"] / recs["rate"]).sum() / 3600) if len(recs) else 0.0,
            "windows": len(w),
            "window_length_s": self.window_length_s,
            "window_step_s": self.window_step_s,
            "feature_set_version": self.feature_set_version,
            "classes": self.active_classes(),
            "confirmed": int(len(lab)),
            "annotators": sorted(lab["annotator"].unique().tolist()),
            "counts": self.counts(),
        }

    def backup(self, dest: str | os.PathLike) -> None:
        try:
            self.store.backup(dest)
        except StoreError as exc:
            raise ProjectError(str(exc)) from None

    # ------------------------------------------------------------------ export
    def export(self, folder: str | os.PathLike, *, fmt: str = "csv", confirmed_only: bool = False,
               min_confidence: float | None = None, classes: Sequence[str] | None = None,
               overwrite: bool = False) -> dict:
        """Write the training set to ``folder``: ``windows.<fmt>``, ``segments.<fmt>`` and
        ``manifest.json`` (see :mod:`labeler.exporting`), each file atomically, the manifest last.

        Returns ``{"files": {kind: path}, "windows": n rows, "segments": n rows, "manifest": dict}``.
        """
        from labeler import exporting as ex
        from storage.store import utc_now

        if fmt not in ex.FORMATS:
            raise InputError(f"export format {fmt!r} is unknown; use one of {', '.join(ex.FORMATS)}")
        if min_confidence is not None and not (0.0 <= float(min_confidence) <= 1.0):
            raise InputError(f"minimum confidence {min_confidence} is outside 0-1; give e.g. 0.8")
        known = {str(c).lower(): str(c) for c in self.classes()["name"]}
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
        if not overwrite:
            for p in targets.values():
                if p.exists():
                    raise InputError(f"{p}: exists already; give another folder or --overwrite")

        snap = self._export_snapshot()
        recs = self.recordings()
        cls = self.classes()
        retired = set(cls.loc[cls["retired_at"].notna(), "name"])
        start_times = {r["name"]: (r["start_time"] if pd.notna(r["start_time"]) else None)
                       for _, r in recs.iterrows()}
        table = ex.window_table(snap["windows"], snap["labels"], snap["proposals"], start_times,
                                retired)
        n_labeled = len(table)
        table = ex.select(table, confirmed_only=confirmed_only, min_confidence=min_confidence,
                          classes=classes)
        if n_labeled == 0:
            raise InputError(f"{self.path}: nothing to export: no window is confirmed or proposed "
                             "yet; confirm some windows first")
        if len(table) == 0:
            raise InputError(f"{self.path}: nothing to export: no labeled window passes the "
                             "selection (confirmed only, minimum confidence, classes); loosen it")
        geometry = {r["name"]: (r["window_length"] / r["rate"], r["window_step"] / r["rate"])
                    for _, r in recs.iterrows()}
        segs = ex.segments(table, geometry)
        folder.mkdir(exist_ok=True)
        files = {}
        for kind, frame in (("windows", table), ("segments", segs)):
            digest = ex.write_table(frame, targets[kind], fmt)
            files[kind] = {"name": targets[kind].name, "format": fmt, "rows": int(len(frame)),
                           "sha256": digest}
        names = dict(zip(cls["id"], cls["name"]))
        meta = self.store.meta()
        manifest = ex.build_manifest(
            tool_version=labeler.__version__, created_at=utc_now(), created_by=self.annotator,
            project={"file": Path(self.path).name, "project_id": meta.get("project_id"),
                     "schema_version": int(meta.get("schema_version", 0)),
                     "created_with": meta.get("tool_version"), "as_of_event": snap["as_of_event"]},
            feature_set_version=self.feature_set_version,
            window_settings={"length_s": self.window_length_s, "step_s": self.window_step_s,
                             "segment_rule": "each window stands for the step-long span around "
                                             "its centre; segments join those spans"},
            recordings=[{"name": r["name"], "content_hash": r["content_hash"],
                         "rate_hz": float(r["rate"]), "n_samples": int(r["n_samples"]),
                         "duration_s": float(r["n_samples"] / r["rate"]),
                         "start_time": start_times[r["name"]], "channels": list(r["channels"]),
                         "window_length_samples": int(r["window_length"]),
                         "window_step_samples": int(r["window_step"])} for _, r in recs.iterrows()],
            classes=[{"name": c["name"], "colour": c["colour"],
                      "retired": c["retired_at"] is not None, "retired_at": c["retired_at"],
                      "merged_into": (None if c["merged_into"] is None
                                      else names.get(c["merged_into"]))}
                     for c in self.store.classes()],
            selection={"confirmed_only": bool(confirmed_only),
                       "min_confidence": None if min_confidence is None else float(min_confidence),
                       "classes": classes},
            proposals=snap["proposal_params"], accuracy=snap["accuracy"],
            accuracy_absent=snap["accuracy_absent"], table=table, files=files)
        manifest = ex.json_ready(manifest)
        ex.write_json(manifest, targets["manifest"])
        return {"files": {k: str(v) for k, v in targets.items()}, "windows": int(len(table)),
                "segments": int(len(segs)), "manifest": manifest}

    def _export_snapshot(self, attempts: int = 5) -> dict:
        """Labels, proposals and accuracy estimate that belong together: read again when another
        process changed the history while they were being read."""
        def last_event() -> int:
            return int(self.store.conn.execute("SELECT coalesce(max(id), 0) FROM events")
                       .fetchone()[0])

        for _ in range(attempts):
            before = last_event()
            snap = {"windows": self.windows(), "labels": self.labels(), "as_of_event": before}
            snap.update(self._export_proposals())
            if last_event() == before:
                return snap
        raise ProjectError(f"{self.path}: labels kept changing while the export read them; "
                           "try again when the other annotators pause")

    def _export_proposals(self) -> dict:
        """The latest proposals and the accuracy estimate, as the export writes them."""
        absent = {"proposals": None, "proposal_params": None, "accuracy": None,
                  "accuracy_absent": "no proposals in this project yet"}
        getter = getattr(self, "proposals", None)
        if not callable(getter):
            return absent
        df = getter()
        if df is None or len(df) == 0:
            return absent
        df = pd.DataFrame(df)
        label = next(c for c in ("label", "proposed", "class") if c in df.columns)
        prop = pd.DataFrame({"window_id": df["window_id"].astype("int64"), "label": df[label],
                             "confidence": df["confidence"].astype(float),
                             "margin": (df["margin"].astype(float) if "margin" in df.columns
                                        else np.nan)})
        prop = prop[prop["label"].notna()]
        run = self.store.latest_run("proposals")
        params = None if run is None else {"run_id": run["id"], "created_at": run["created_at"],
                                            "created_by": run["created_by"], **run["params"]}
        out = {"proposals": prop, "proposal_params": params, "accuracy": None,
               "accuracy_absent": "this project gives no accuracy estimate"}
        est_fn = getattr(self, "accuracy_estimate", None)
        if callable(est_fn):
            est = est_fn()
            if est is not None:
                est = est.as_dict() if hasattr(est, "as_dict") else dict(est)
                out["accuracy"] = est
        return out

    # ------------------------------------------------------------------ several annotators
    def annotations(self) -> pd.DataFrame:
        """Every annotator's current label of every window they labeled: window_id, annotator,
        class_id, label."""
        df = pd.DataFrame(self.store.annotations(), columns=["window_id", "annotator", "class_id"])
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df["label"] = df["class_id"].map(names)
        return df

    def disagreements(self) -> np.ndarray:
        """Ids of windows whose annotators' current labels differ (for the review queue)."""
        from labeler.agreement import disagreeing

        return disagreeing(self.annotations())

    def agreement(self) -> dict:
        """Agreement between annotators on the windows several of them labeled: pairwise confusion
        tables and Cohen's kappa, Fleiss' kappa over windows all of three or more labeled
        (see :mod:`labeler.agreement`)."""
        from labeler.agreement import agreement_report

        return agreement_report(self.annotations())


def _check_class_name(name: str) -> str:
    name = str(name).strip()
    if not _CLASS_NAME.match(name):
        raise InputError(f"class name {name!r} must be 1-60 printable characters")
    return name


def _check_annotator(name: str) -> str:
    name = str(name).strip()
    if not re.fullmatch(r"[^\x00-\x1f\x7f]{1,60}", name):
        raise LabelerError(f"annotator name {name!r} must be 1-60 printable characters")
    return name
