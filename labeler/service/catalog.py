"""What was recorded: recordings, their signal, windows and features.

Reading and checking files happens before the one transaction that adds them, so a bad file leaves
the project as it was.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

from labeler import features as _features
from labeler.errors import InputError, ProjectError
from labeler.preparing import CHUNK_SECONDS, PreparedRecording, prepare_recording  # noqa: F401
from labeler.recordings import Recording, read_recording
from labeler.service.context import Context, Progress
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, window_samples
from storage import StoreError

RECORDING_COLUMNS = ["id", "name", "source_path", "content_hash", "rate", "channels", "units",
                     "n_samples", "start_time", "added_at", "added_by", "repairs", "window_length",
                     "window_step"]


@dataclass
class AddedRecording:
    id: int
    name: str
    n_samples: int
    rate: float
    n_windows: int
    duration_s: float
    repairs: list[str]


class Catalog:
    """Recordings, signal, windows and features of one project."""

    def __init__(self, ctx: Context):
        self.ctx = ctx

    # ------------------------------------------------------------------ settings
    @property
    def window_length_s(self) -> float:
        return float(self.ctx.store.setting("window_length_s", DEFAULT_LENGTH_S))

    @property
    def window_step_s(self) -> float:
        return float(self.ctx.store.setting("window_step_s", DEFAULT_STEP_S))

    @property
    def feature_set_version(self) -> str:
        return str(self.ctx.store.setting("feature_set_version", _features.FEATURE_SET_VERSION))

    # ------------------------------------------------------------------ adding
    def read_files(self, paths: Sequence[str | os.PathLike], *, rate: float | None = None,
                   time_column: str | None = None, acc_unit: str = "g", gyr_unit: str = "deg/s",
                   progress: Progress | None = None) -> list[Recording]:
        """Read and check recording files (nothing is written)."""
        if not paths:
            raise InputError("no recording files given; pass one or more CSV or Parquet files")
        recs: list[Recording] = []
        for i, p in enumerate(paths):
            self.ctx.refuse_own_file(p)
            if progress:
                progress(i / (2 * len(paths)), f"reading {Path(p).name}")
            recs.append(read_recording(p, rate=rate, time_column=time_column, acc_unit=acc_unit,
                                       gyr_unit=gyr_unit))
        return recs

    def add(self, recordings: Sequence[Recording], *, progress: Progress | None = None,
            offset: float = 0.0) -> list[AddedRecording]:
        """Add already-read recordings in one transaction: all of them or none."""
        self.check_new([(r.name, r.source_path, r.content_hash) for r in recordings])
        prepared = []
        for i, rec in enumerate(recordings):
            if progress:
                progress(offset + (1 - offset) * i / max(1, len(recordings)),
                         f"features of {rec.name}")
            prepared.append(self._prepare(rec))
        added = self.add_prepared(prepared)
        if progress:
            progress(1.0, "done")
        return added

    def check_new(self, items: Sequence[tuple[str, str, str]]) -> None:
        """Refuse (name, source path, content hash) triples already in the project or repeated."""
        rows = self.ctx.store.recordings()
        existing = {r["content_hash"]: r["name"] for r in rows}
        names = {r["name"] for r in rows}
        seen: dict[str, str] = {}
        for name, source, digest in items:
            if digest in existing:
                raise InputError(f"{source}: already in the project as recording "
                                 f"{existing[digest]!r} (same content); nothing added")
            if digest in seen:
                raise InputError(f"{source}: same content as {seen[digest]}; "
                                 "give each recording once; nothing added")
            seen[digest] = source
            if name in names:
                raise InputError(f"{source}: a recording named {name!r} is already in "
                                 "the project; rename the file; nothing added")
            names.add(name)

    def add_prepared(self, prepared: Sequence[PreparedRecording]) -> list[AddedRecording]:
        """Store recordings prepared elsewhere (:func:`labeler.preparing.prepare_recording`, e.g.
        on workers) in one transaction: all of them or none."""
        self.check_new([(p.name, p.source_path, p.content_hash) for p in prepared])
        for p in prepared:
            length, step = window_samples(p.rate, self.window_length_s, self.window_step_s)
            if (int(p.row["window_length"]), int(p.row["window_step"])) != (length, step):
                raise InputError(f"{p.source_path}: prepared with other window settings than "
                                 "the project's; prepare it again")
        store = self.ctx.store
        added = []
        try:
            with store.atomic():
                for p in prepared:
                    rid = store.add_recording(p.row, p.chunks, p.windows, p.features)
                    added.append(AddedRecording(rid, p.name, p.n_samples, p.rate, p.n_windows,
                                                p.duration_s, list(p.row["repairs"])))
        except StoreError as exc:
            raise InputError(str(exc)) from None
        self.ctx.invalidate()
        return added

    def _prepare(self, rec: Recording) -> PreparedRecording:
        return prepare_recording(rec, self.window_length_s, self.window_step_s, self.ctx.annotator)

    # ------------------------------------------------------------------ recordings
    def recordings(self) -> pd.DataFrame:
        return pd.DataFrame(self.ctx.store.recordings(), columns=RECORDING_COLUMNS)

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
        for s0, n, c, data in self.ctx.store.signal_chunks(rid, a, b):
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
        cache = self.ctx.cache
        if "windows" not in cache:
            df = pd.DataFrame(self.ctx.store.windows_columns())
            names = dict(zip(*[self.recordings()[c] for c in ("id", "name")]))
            df.insert(2, "recording", df["recording_id"].map(names))
            cache["windows"] = df
        return cache["windows"].copy()

    def features(self) -> tuple[np.ndarray, list[str]]:
        """(X float32 (n_windows, n_features), names), rows in window-id order."""
        cache = self.ctx.cache
        if "features" not in cache:
            blocks, names = [], None
            for row in self.ctx.store.features():
                if names is not None and row["names"] != names:
                    raise ProjectError(f"{self.ctx.path}: recordings have different channels; "
                                       "features cannot be compared across them")
                names = row["names"]
                blocks.append(np.frombuffer(row["data"], dtype=np.float32).reshape(
                    row["n_windows"], row["n_features"]))
            X = np.concatenate(blocks) if blocks else np.empty((0, 0), np.float32)
            cache["features"] = (X, names or [])
        X, names = cache["features"]
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

    def window_sequence(self) -> tuple[np.ndarray, np.ndarray]:
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
