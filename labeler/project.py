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
from labeler.windows import (DEFAULT_LENGTH_S, DEFAULT_STEP_S, check_window_settings, cut_windows,
                             window_samples)
from storage import Store, StoreError

# Okabe & Ito, "Color universal design: how to make figures and presentations that are friendly to
# colorblind people", 2008: eight colours distinguishable with the common colour-vision deficiencies.
# Ordered so that the first classes get the most distinct (orange, blue, green, purple); the two
# blues and the two oranges are kept apart. Black is last; it is used for the eighth class.
PALETTE = ("#E69F00", "#0072B2", "#009E73", "#CC79A7", "#F0E442", "#56B4E9", "#D55E00", "#000000")
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
        window_length_s, window_step_s = check_window_settings(window_length_s, window_step_s)
        settings = {"window_length_s": window_length_s, "window_step_s": window_step_s,
                    "feature_set_version": _features.FEATURE_SET_VERSION}
        return cls._with_store(lambda: Store.create(path, settings, tool_version=labeler.__version__),
                               annotator)

    @classmethod
    def open(cls, path: str | os.PathLike, *, annotator: str | None = None,
             readonly: bool = False) -> "Project":
        return cls._with_store(lambda: Store.open(path, readonly=readonly), annotator)

    @classmethod
    def _with_store(cls, make_store, annotator: str | None) -> "Project":
        try:
            store = make_store()
        except StoreError as exc:
            raise ProjectError(str(exc)) from None
        try:
            return cls(store, annotator)
        except BaseException:  # e.g. a bad annotator name: leave the file closed and as it was
            store.close()
            raise

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
            self._refuse_own_file(p)
            if progress:
                progress(i / (2 * len(paths)), f"reading {Path(p).name}")
            recs.append(read_recording(p, rate=rate, time_column=time_column, acc_unit=acc_unit,
                                       gyr_unit=gyr_unit))
        return self.add_recording_data(recs, progress=progress, _offset=0.5)

    def _refuse_own_file(self, path: str | os.PathLike) -> None:
        """Refuse the project file (or its -wal/-shm) given as input: reading it through a plain
        descriptor and closing that would drop this process's SQLite locks on it (stat() opens
        none)."""
        for suffix in ("", "-wal", "-shm"):
            own = Path(f"{self.path}{suffix}")
            try:
                same = os.path.samefile(path, own)
            except OSError:
                continue
            if same:
                raise InputError(f"{path}: is this project's own file, not an input; give a "
                                 "recording or interval file")

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
        self._place_in_map(recording_ids)

    # ------------------------------------------------------------------ map
    # A map is a run of kind "map" (params: method and its parameters; summary: counts, seconds)
    # with two blobs: "map/<run>/coords" (npz: window_id int64, coords float32 (n, 2)) and
    # "map/<run>/state" (labeler.embedding.MapState.to_bytes: plain arrays, no pickle). Adding
    # recordings to a project that has a map places their windows into it as a new run; a full
    # re-fit is compute_map().
    def compute_map(self, method: str = "pca", *, progress: Progress | None = None,
                    random_state: int = 0, n_jobs: int = 1, **params) -> dict:
        """Fit a map of every window ("pca" or "tsne") and store it as a run; returns its summary."""
        from labeler.embedding import make_map

        if method not in ("pca", "tsne"):
            raise InputError(f"unknown map method {method!r}; use 'pca' or 'tsne'")
        X, _ = self.features()
        wins = self.windows()
        if len(wins) == 0:
            raise InputError(f"{self.path}: no windows yet; add recordings first (`labeler add`)")
        kwargs = {"progress": progress}
        if method == "tsne":
            kwargs.update(random_state=random_state, n_jobs=n_jobs,
                          strata=wins["recording_id"].to_numpy(), **params)
        try:
            res = make_map(X, method, **kwargs)
        except InputError as exc:
            raise InputError(f"{self.path}: {exc}") from None
        summary = {"n_windows": int(len(wins)), "n_fitted": int(res.fitted.sum()), "n_placed": 0,
                   "seconds": res.params.get("seconds")}
        return self._store_map(res.params, summary, wins["id"].to_numpy(), res.coords, res.state)

    def _store_map(self, params: dict, summary: dict, ids: np.ndarray, coords: np.ndarray,
                   state) -> dict:
        import io

        buf = io.BytesIO()
        np.savez(buf, window_id=np.asarray(ids, dtype=np.int64),
                 coords=np.asarray(coords, dtype=np.float32))
        with self.store.atomic():
            run_id = self.store.add_run("map", params, summary, created_by=self.annotator)
            self.store.put_blob(f"map/{run_id}/coords", buf.getvalue(), run_id=run_id)
            self.store.put_blob(f"map/{run_id}/state", state.to_bytes(), run_id=run_id)
        self._invalidate("map")
        return {"run_id": int(run_id), "method": params.get("method"), **summary}

    def _latest_map(self):
        """(run, window ids, coords, MapState) of the latest map run, or None."""
        import io

        from labeler.embedding import MapState

        run = self.store.latest_run("map")
        if run is None:
            return None
        coords_blob = self.store.get_blob(f"map/{run['id']}/coords")
        state_blob = self.store.get_blob(f"map/{run['id']}/state")
        if coords_blob is None or state_blob is None:
            raise ProjectError(f"{self.path}: map run {run['id']} has lost its data; run "
                               "`labeler map` again")
        with np.load(io.BytesIO(coords_blob[0]), allow_pickle=False) as z:
            ids, coords = z["window_id"], z["coords"]
        return run, ids, coords, MapState.from_bytes(state_blob[0])

    def map_run_id(self) -> int | None:
        """Id of the run that made the latest map, or None when there is no map yet."""
        run = self.store.latest_run("map")
        return None if run is None else int(run["id"])

    def map_method(self) -> str | None:
        """How the latest map was made ("pca" or "tsne"), or None when there is no map yet."""
        run = self.store.latest_run("map")
        return None if run is None else str(run["params"].get("method", "pca"))

    def map(self) -> pd.DataFrame:
        """Latest map: columns window_id, x, y (windows added since, if any, are placed)."""
        if "map" not in self._cache:
            latest = self._latest_map()
            if latest is None:
                df = pd.DataFrame({"window_id": np.empty(0, np.int64), "x": np.empty(0, np.float32),
                                   "y": np.empty(0, np.float32)})
            else:
                _, ids, coords, _ = latest
                df = pd.DataFrame({"window_id": ids, "x": coords[:, 0], "y": coords[:, 1]})
            self._cache["map"] = df
        return self._cache["map"].copy()

    def _place_in_map(self, recording_ids: list[int]) -> dict | None:
        """Place windows missing from the latest map into it (no re-fit); store as a new run."""
        from labeler.embedding import place

        latest = self._latest_map()
        if latest is None:
            return None
        run, ids, coords, state = latest
        X, _ = self.features()
        all_ids = self.windows()["id"].to_numpy()
        new = ~np.isin(all_ids, ids)
        if not new.any():
            return None
        placed = place(state, X[new])
        keep = np.isin(ids, all_ids)
        out_ids = np.concatenate([ids[keep], all_ids[new]])
        out = np.concatenate([coords[keep], placed])
        order = np.argsort(out_ids, kind="stable")
        params = dict(run["params"])
        params["placed_into_run"] = int(run["id"])
        summary = {"n_windows": int(out_ids.size), "n_fitted": int(run["summary"].get("n_fitted", 0)),
                   "n_placed": int(run["summary"].get("n_placed", 0)) + int(new.sum()),
                   "placed_recordings": [int(r) for r in recording_ids]}
        return self._store_map(params, summary, out_ids[order], out[order], state)


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
                             f"{int(known.min())} to {int(known.max())}); give ids in that range")
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

        self._refuse_own_file(path)
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
        for _ in range(attempts):
            before = self.store.last_event_id()
            snap = {"windows": self.windows(), "labels": self.labels(), "as_of_event": before}
            snap.update(self._export_proposals())
            if self.store.last_event_id() == before:
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

    # ------------------------------------------------------------------ proposals
    # Label spreading over the window graph (labeler.graph, labeler.spreading), the review queue
    # (labeler.review) and accuracy estimates (labeler.quality). The graph is cached as a blob and
    # rebuilt only when the recordings, the feature set or the graph parameters change; each
    # refresh is a run (kind "proposals") with its parameters and summary, and the latest per-window
    # results are kept as one blob. Proposed labels are suggestions for a person to review.

    _GRAPH_BLOB = "proposals/graph"
    _LATEST_BLOB = "proposals/latest"

    def _graph_key(self, params: dict) -> str:
        import hashlib
        import json

        recs = self.recordings()
        ident = {"recordings": [[int(i), str(h)] for i, h in zip(recs["id"], recs["content_hash"])],
                 "features": self.feature_set_version, "n_windows": self.n_windows, **params}
        return hashlib.sha256(json.dumps(ident, sort_keys=True).encode()).hexdigest()[:16]

    def _graph_seq(self) -> tuple[np.ndarray, np.ndarray]:
        """(recording id, sequence) per window for temporal edges: consecutive windows of one
        recording are one window step apart; a gap in the recording adds a jump of 2."""
        w = self.windows()
        recs = self.recordings().set_index("id")
        rid = w["recording_id"].to_numpy(np.int64)
        start = w["start_sample"].to_numpy(np.int64)
        seq = np.zeros(len(w), dtype=np.int64)
        for r in np.unique(rid):
            idx = np.flatnonzero(rid == r)
            idx = idx[np.argsort(start[idx], kind="stable")]
            step = int(recs.loc[r, "window_step"])
            jumps = np.where(np.diff(start[idx]) == step, 1, 2)
            seq[idx] = np.concatenate([[0], np.cumsum(jumps)])
        return rid, seq

    def _graph(self, params: dict, progress: Progress | None = None):
        """(graph, key, rebuilt): the cached window graph, built when missing or outdated."""
        import io

        from scipy import sparse

        from labeler.graph import build_graph

        key = self._graph_key(params)
        cached = self._cache.get("graph")
        if cached is not None and cached[1] == key:
            return cached[0], key, False
        got = self.store.get_blob(self._GRAPH_BLOB)
        if got is not None and got[1].get("key") == key:
            W = sparse.load_npz(io.BytesIO(got[0])).tocsr()
            self._cache["graph"] = (W, key)
            return W, key, False
        X, _ = self.features()
        if X.shape[0] < 2:
            raise InputError(f"{self.path}: proposals need at least 2 windows; add recordings "
                             "first with `labeler add`")
        if progress:
            progress(0.1, f"graph of {X.shape[0]} windows")
        rid, seq = self._graph_seq()
        pca = params["pca_components"]
        W = build_graph(X, recording=rid, seq=seq, n_neighbors=params["n_neighbors"],
                        temporal_weight=params["temporal_weight"],
                        pca_components=pca if pca and pca < X.shape[1] else None)
        buf = io.BytesIO()
        sparse.save_npz(buf, W)
        self.store.put_blob(self._GRAPH_BLOB, buf.getvalue(), {"key": key, **params})
        self._cache["graph"] = (W, key)
        return W, key, True

    def _latest_proposals(self) -> dict | None:
        """The latest stored proposal arrays (npz) with their run, or None."""
        import io

        got = self.store.get_blob(self._LATEST_BLOB)
        if got is None:
            return None
        with np.load(io.BytesIO(got[0]), allow_pickle=False) as z:
            out = {k: z[k] for k in z.files}
        out["meta"] = got[1]
        return out

    def _class_codes(self, y: np.ndarray, names: list[str]) -> np.ndarray:
        """Label vector as class ids (stable across runs), -1 unlabeled."""
        ids = {str(n): int(i) for i, n in zip(self.classes()["id"], self.classes()["name"])}
        lut = np.array([ids[n] for n in names], dtype=np.int64) if names else np.zeros(0, np.int64)
        return np.where(y >= 0, lut[np.maximum(y, 0)] if lut.size else -1, -1)

    def refresh_proposals(self, *, alpha: float | None = None, n_neighbors: int = 10,
                          temporal_weight: float | None = None, pca_components: int | None = 30,
                          progress: Progress | None = None) -> dict:
        """Spread the confirmed labels over the window graph; store the result as a run.

        Starts from the previous run's scores (warm start) when the graph is unchanged. Returns
        the run's summary (run id, confirmed windows, classes, proposed windows, mean confidence,
        solver iterations, seconds, whether the graph was rebuilt).
        """
        import io
        import time

        from labeler.graph import DEFAULT_TEMPORAL_WEIGHT
        from labeler.spreading import DEFAULT_ALPHA, LabelSpreader

        t0 = time.perf_counter()
        alpha = DEFAULT_ALPHA if alpha is None else float(alpha)
        if not 0 < alpha < 1:
            raise InputError(f"alpha {alpha} must lie strictly between 0 and 1; give e.g. 0.9")
        tw = DEFAULT_TEMPORAL_WEIGHT if temporal_weight is None else float(temporal_weight)
        gparams = {"n_neighbors": int(n_neighbors), "temporal_weight": tw,
                   "pca_components": None if pca_components is None else int(pca_components)}
        y_idx, names = self.label_vector()
        y = self._class_codes(y_idx, names)
        if not (y >= 0).any():
            raise InputError(f"{self.path}: no confirmed window yet; confirm a few windows of each "
                             "activity first (e.g. `labeler confirm` or the review queue)")
        try:
            W, key, rebuilt = self._graph(gparams, progress)
        except ValueError as exc:
            raise InputError(f"{self.path}: {exc}") from None
        if progress:
            progress(0.6, "spreading labels")
        spreader = LabelSpreader(alpha=alpha)
        prev = self._latest_proposals()
        init = init_classes = None
        if prev is not None and prev["meta"].get("graph_key") == key \
                and prev["meta"].get("alpha") == alpha and prev["F"].shape[0] == y.size:
            init, init_classes = prev["F"].astype(np.float64), prev["classes"]
        spreader.fit(W, y, init=init, init_classes=init_classes)
        if prev is not None and prev["meta"].get("graph_key") == key \
                and prev["meta"].get("alpha") == alpha and "reference" in prev:
            reference = prev["reference"].astype(np.float64)
        else:
            reference = spreader.reference_mass()
        out = spreader.outputs(y, reference=reference)
        unconf = y < 0
        counts = {self.class_name(int(c)): int((y == c).sum()) for c in spreader.classes_}
        summary = {"confirmed": int((~unconf).sum()), "windows": int(y.size),
                   "classes": counts, "proposed": int(unconf.sum()),
                   "mean_confidence": float(out.confidence[unconf].mean()) if unconf.any() else None,
                   "low_support": int((out.support[unconf] < 0.05).sum()),
                   "conflicts": int(((~unconf) & (out.conflict > 0.5)).sum()),
                   "iterations": int(spreader.n_iter_), "warm_start": init is not None,
                   "graph_rebuilt": bool(rebuilt), "graph_edges": int(W.nnz // 2)}
        params = {"alpha": alpha, **gparams, "solver": spreader.solver, "tol": spreader.tol,
                  "method": "label spreading (Zhou et al. 2004) on a kNN graph with local "
                            "scaling (Zelnik-Manor & Perona 2004)", "graph_key": key}
        buf = io.BytesIO()
        np.savez(buf, window_id=self.windows()["id"].to_numpy(np.int64),
                 F=spreader.label_mass_.astype(np.float32), classes=spreader.classes_,
                 label=out.label, confidence=out.confidence.astype(np.float32),
                 margin=out.margin.astype(np.float32), support=out.support.astype(np.float32),
                 conflict=out.conflict.astype(np.float32), y=y,
                 reference=np.asarray(reference, dtype=np.float32))
        summary["seconds"] = round(time.perf_counter() - t0, 3)
        with self.store.atomic():
            run_id = self.store.add_run("proposals", params, summary, created_by=self.annotator)
            self.store.put_blob(self._LATEST_BLOB, buf.getvalue(),
                                {"run_id": run_id, "graph_key": key, "alpha": alpha}, run_id=run_id)
        self._invalidate("proposals")
        if progress:
            progress(1.0, "done")
        return {"run_id": run_id, **summary}

    def proposals(self) -> pd.DataFrame:
        """Latest proposals: window_id, label (class name), class_id, confidence, margin, support,
        conflict, confirmed (whether the window was confirmed at that run). Empty when none yet."""
        cols = ["window_id", "label", "class_id", "confidence", "margin", "support", "conflict",
                "confirmed"]
        if "proposals" in self._cache:
            return self._cache["proposals"].copy()
        p = self._latest_proposals()
        if p is None:
            return pd.DataFrame(columns=cols)
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df = pd.DataFrame({"window_id": p["window_id"], "class_id": p["label"],
                           "confidence": p["confidence"].astype(np.float64),
                           "margin": p["margin"].astype(np.float64),
                           "support": p["support"].astype(np.float64),
                           "conflict": p["conflict"].astype(np.float64),
                           "confirmed": p["y"] >= 0})
        df.insert(1, "label", df["class_id"].map(names))
        df = df[df["window_id"].isin(self.windows()["id"])][cols].reset_index(drop=True)
        self._cache["proposals"] = df
        return df.copy()

    def _open_audit_windows(self) -> np.ndarray:
        lab = set(self.labels()["window_id"].tolist())
        return np.array(sorted(set(self.store.audited_window_ids()) - lab), dtype=np.int64)

    def review_queue(self, n: int = 50) -> pd.DataFrame:
        """Windows to look at next: window_id, reason (conflict, disagreement, uncertain,
        unexplored), score, proposed label and its confidence. Uses the latest proposals; before
        any confirmation it spreads its picks over the graph."""
        from labeler.review import review_queue as _queue
        from labeler.spreading import WindowOutputs

        if int(n) != n or n < 1:
            raise InputError(f"queue length {n} must be a whole number >= 1")
        w = self.windows()
        if len(w) < 2:
            raise InputError(f"{self.path}: the project has fewer than 2 windows; add recordings first")
        run = self.store.latest_run("proposals")
        gp = {k: run["params"][k] for k in ("n_neighbors", "temporal_weight", "pca_components")} \
            if run else None
        if gp is None:
            from labeler.graph import DEFAULT_TEMPORAL_WEIGHT
            gp = {"n_neighbors": 10, "temporal_weight": DEFAULT_TEMPORAL_WEIGHT, "pca_components": 30}
        W, key, _ = self._graph(gp)
        ids = w["id"].to_numpy(np.int64)
        lab = self.labels()
        labeled = np.isin(ids, lab["window_id"].to_numpy())
        # a window confirmed while looked at alone (queue or audit) is not raised as a conflict
        # again: the person has seen its signal and the proposal; bulk picks are where slips hide
        looked = np.isin(ids, lab.loc[lab["source"].isin(("queue", "audit")), "window_id"])
        p = self._latest_proposals()
        outputs = None
        if p is not None and p["meta"].get("graph_key") == key and p["window_id"].size == ids.size:
            outputs = WindowOutputs(p["classes"], p["label"], np.zeros((ids.size, 0)),
                                    p["confidence"], p["margin"], p["support"], p["conflict"])
            # a conflict is about the label confirmed at the run; newer confirmations are not
            outputs.conflict = np.where((p["y"] >= 0) & ~looked, p["conflict"], 0.0)
        dis = np.isin(ids, self.disagreements())
        excl = np.isin(ids, self._open_audit_windows())
        rid, seq = self._graph_seq()
        q = _queue(W, outputs, labeled, rid, seq, n=int(n), disagreement=dis, exclude=excl)
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df = pd.DataFrame({"window_id": ids[q.index], "reason": q.reason, "score": q.score})
        if outputs is not None:
            df["proposed"] = pd.Series(outputs.label[q.index]).map(names).to_numpy()
            df["confidence"] = outputs.confidence[q.index].astype(np.float64)
        else:
            df["proposed"] = None
            df["confidence"] = np.nan
        w_idx = w.set_index("id").loc[df["window_id"]]
        df["recording"] = w_idx["recording"].to_numpy()
        df["start_s"] = w_idx["start_s"].to_numpy()
        return df

    def draw_audit(self, n: int = 30, *, random_state=None) -> pd.DataFrame:
        """Draw a uniformly random sample of ``n`` proposed, unconfirmed windows for an audit.

        The proposal and its confidence are stored with the draw (for the accuracy estimate) and
        are not returned, so the annotator labels the windows without seeing them. Returns
        window_id, position, recording, start_s. Confirm the windows with source "audit".
        """
        from labeler.quality import draw_audit as _draw

        if int(n) != n or n < 1:
            raise InputError(f"audit size {n} must be a whole number >= 1; give e.g. 30")
        p = self._latest_proposals()
        if p is None:
            raise InputError(f"{self.path}: no proposals yet; run `labeler propose` first")
        w = self.windows()
        ids = p["window_id"]
        known = np.isin(ids, w["id"].to_numpy())
        labeled = np.isin(ids, self.labels()["window_id"].to_numpy())
        in_audit = np.isin(ids, self.store.audited_window_ids())
        cand = known & ~labeled & ~in_audit & (p["support"] > 0)
        if not cand.any():
            raise InputError(f"{self.path}: no unconfirmed window with a proposal is left to audit")
        seed = random_state if random_state is not None else int.from_bytes(os.urandom(4), "little")
        pick = _draw(cand, int(n), random_state=seed)
        start = self.store.add_audit(
            p["meta"]["run_id"], self.annotator,
            [(ids[i], p["label"][i], p["confidence"][i]) for i in pick])
        wi = w.set_index("id").loc[ids[pick]]
        return pd.DataFrame({"window_id": ids[pick], "position": start + np.arange(pick.size),
                             "recording": wi["recording"].to_numpy(),
                             "start_s": wi["start_s"].to_numpy()})

    def audit_status(self) -> pd.DataFrame:
        """Every audited window: window_id, run_id, proposed (at draw time), confidence, answer
        (its current label, None while unanswered), correct."""
        df = pd.DataFrame(self.store.audits(),
                          columns=["id", "run_id", "window_id", "position", "drawn_at",
                                   "drawn_by", "proposed_class_id", "confidence"])
        cur = dict(zip(self.labels()["window_id"], self.labels()["class_id"]))
        names = dict(zip(self.classes()["id"], self.classes()["name"]))
        df["answer_class_id"] = df["window_id"].map(cur)
        df["proposed"] = df["proposed_class_id"].map(names)
        df["answer"] = df["answer_class_id"].map(names)
        df["correct"] = np.where(df["answer_class_id"].isna(), None,
                                 df["answer_class_id"] == df["proposed_class_id"])
        return df[["window_id", "run_id", "position", "proposed", "confidence", "answer", "correct"]]

    def accuracy_estimate(self, *, cross_validate: bool = True) -> dict:
        """Accuracy of the proposals, with what it rests on (see :mod:`labeler.quality`).

        An audit of at least ``quality.MIN_AUDIT`` answered windows is preferred; otherwise
        cross-validation on the confirmed windows (biased; the note says why). Keys: value, low,
        high, basis, n, scope, level, ece, note, accuracy (= value), training_set (the same for the
        exported set, confirmed windows counted as right), run_id.
        """
        from labeler.quality import (accuracy_estimate as _choose, audit_accuracy,
                                     cross_validated_accuracy, training_set_estimate)
        from labeler.spreading import LabelSpreader

        run = self.store.latest_run("proposals")
        if run is None:
            raise InputError(f"{self.path}: no proposals yet; run `labeler propose` first")
        a = self.audit_status()
        done = a[a["answer"].notna()]
        audit = audit_accuracy(done["proposed"].to_numpy(object), done["answer"].to_numpy(object),
                               done["confidence"].to_numpy(np.float64) if len(done) else None) \
            if len(done) else None
        cv = None
        if cross_validate and (audit is None or audit.n < 30):
            gp = {k: run["params"][k] for k in ("n_neighbors", "temporal_weight", "pca_components")}
            W, _, _ = self._graph(gp)
            y_idx, names = self.label_vector()
            y = self._class_codes(y_idx, names)
            cv = cross_validated_accuracy(W, y, spreader=LabelSpreader(alpha=run["params"]["alpha"]))
        est = _choose(audit=audit, cv=cv)
        out = est.as_dict()
        out["accuracy"] = out["value"]
        out["run_id"] = int(run["id"])
        if audit is not None and est.basis == "audit":
            runs = sorted(set(done["run_id"].astype(int)))
            out["note"] += f"; drawn from proposal run(s) {', '.join(map(str, runs))}"
        p = self.proposals()
        n_conf = int(len(self.labels()))
        n_prop = int(max(0, len(p) - p["window_id"].isin(self.labels()["window_id"]).sum()))
        if est.basis != "none" and n_conf + n_prop:
            out["training_set"] = training_set_estimate(est, n_conf, n_prop).as_dict()
        for k in ("value", "low", "high", "accuracy"):
            if isinstance(out[k], float) and not np.isfinite(out[k]):
                out[k] = None
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
