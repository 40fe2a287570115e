"""What was recorded: recordings, their signal, windows and features.

Reading and checking files happens before the one transaction that adds them, so a bad file leaves
the project as it was.
"""

from __future__ import annotations

import contextlib
import os
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Sequence

from labeler import features as _features
from labeler.errors import InputError, ProjectError
from labeler.preparing import CHUNK_SECONDS, PreparedRecording, prepare_recording  # noqa: F401
from labeler.results import RecordingSummary, RemovedRecording
from labeler.service.context import Context, Progress
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, window_samples
from storage import StoreError

if TYPE_CHECKING:  # pandas is imported where a table is made
    import pandas as pd

    from labeler.recordings import Recording

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

RECORDING_COLUMNS = ["id", "name", "source_path", "content_hash", "rate", "channels", "units",
                     "n_samples", "start_time", "added_at", "added_by", "repairs", "window_length",
                     "window_step", "person", "removed_at", "removed_by"]


@dataclass
class AddedRecording:
    id: int
    name: str
    n_samples: int
    rate: float
    n_windows: int
    duration_s: float
    repairs: list[str]
    notes: list[str] = field(default_factory=list)
    recording: Recording | None = None  # what was read (a dry run prints it)


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
    def read_files(self, paths: Sequence[str | os.PathLike], *, progress: Progress | None = None,
                   **read_options) -> list[Recording]:
        """Read and check recording files (nothing is written). ``read_options`` go to
        :func:`labeler.recordings.read_recording` (see :class:`labeler.profiles.ReadOptions`)."""
        from labeler.recordings import read_recording

        if not paths:
            raise InputError("no recording files given; pass one or more CSV or Parquet files")
        recs: list[Recording] = []
        for i, p in enumerate(paths):
            self.ctx.refuse_own_file(p)
            if progress:
                progress(i / (2 * len(paths)), f"reading {Path(p).name}")
            recs.append(read_recording(p, **read_options))
        return recs

    def add(self, recordings: Sequence[Recording], *, progress: Progress | None = None,
            offset: float = 0.0, dry_run: bool = False, person: str | None = None
            ) -> list[AddedRecording]:
        """Add already-read recordings in one transaction: all of them or none (``dry_run``: check
        them and write nothing; ``person``: who wore the sensors, for grouped splits)."""
        from labeler.recordings import conform_channels

        if person is not None:
            person = check_person(person)
        # one channel set per project: features of different channels cannot be compared
        live = self.ctx.store.recordings()
        channels = list(live[0]["channels"]) if live else (
            list(recordings[0].channels) if recordings else [])
        recordings = [conform_channels(rec, channels) for rec in recordings]
        self.check_new([(r.name, r.source_path, r.content_hash) for r in recordings])
        prepared = []
        for i, rec in enumerate(recordings):
            if progress:
                progress(offset + (1 - offset) * i / max(1, len(recordings)),
                         f"features of {rec.name}")
            prepared.append(self._prepare(rec))
        if dry_run:
            return [AddedRecording(-1, rec.name, rec.n_samples, rec.rate, p.n_windows,
                                   rec.duration_s, rec.repairs, rec.notes, rec)
                    for rec, p in zip(recordings, prepared)]
        added = self.add_prepared(prepared, person=person, sources=recordings)
        if progress:
            progress(1.0, "done")
        return added

    def check_new(self, items: Sequence[tuple[str, str, str]]) -> None:
        """Refuse (name, source path, content hash) triples already in the project or repeated,
        and names of recordings removed from it."""
        rows = self.ctx.store.recordings()
        existing = {r["content_hash"]: r["name"] for r in rows}
        names = {r["name"] for r in rows}
        removed = {r["name"] for r in self.ctx.store.recordings(include_removed=True)} - names
        seen: dict[str, str] = {}
        for name, source, digest in items:
            if name in removed:
                raise InputError(f"{source}: a recording named {name!r} was removed from the "
                                 "project; rename the file to add it again; nothing added")
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

    def add_prepared(self, prepared: Sequence[PreparedRecording], *, person: str | None = None,
                     sources: Sequence[Recording] | None = None) -> list[AddedRecording]:
        """Store recordings prepared elsewhere (:func:`labeler.preparing.prepare_recording`, e.g.
        on workers) in one transaction: all of them or none. ``sources``: the recordings they were
        prepared from, when at hand (their notes go into the report)."""
        self.check_new([(p.name, p.source_path, p.content_hash) for p in prepared])
        live = self.ctx.store.recordings()
        channels = list(live[0]["channels"]) if live else (
            list(prepared[0].row["channels"]) if prepared else [])
        for p in prepared:
            length, step = window_samples(p.rate, self.window_length_s, self.window_step_s)
            if (int(p.row["window_length"]), int(p.row["window_step"])) != (length, step):
                raise InputError(f"{p.source_path}: prepared with other window settings than "
                                 "the project's; prepare it again")
            if str(p.features.get("version")) != self.feature_set_version:
                raise InputError(f"{p.source_path}: prepared with feature set "
                                 f"{p.features.get('version')}, the project uses "
                                 f"{self.feature_set_version}; prepare it again")
            if list(p.row["channels"]) != channels:
                raise InputError(f"{p.source_path}: its channels differ from the project's "
                                 f"({', '.join(channels[:6])} ...); map its columns to them with "
                                 "--column, or add it to a project of its own")
        store = self.ctx.store
        added = []
        try:
            with store.atomic():
                for i, p in enumerate(prepared):
                    rid = store.add_recording(dict(p.row, person=person), p.chunks, p.windows,
                                              p.features)
                    rec = sources[i] if sources is not None else None
                    added.append(AddedRecording(rid, p.name, p.n_samples, p.rate, p.n_windows,
                                                p.duration_s, list(rec.repairs if rec is not None
                                                                   else p.row["repairs"]),
                                                list(rec.notes) if rec is not None else [], rec))
        except StoreError as exc:
            raise InputError(str(exc)) from None
        self.ctx.invalidate()
        return added

    def _prepare(self, rec: Recording) -> PreparedRecording:
        return prepare_recording(rec, self.window_length_s, self.window_step_s, self.ctx.annotator,
                                 self.feature_set_version)

    # ------------------------------------------------------------------ recordings
    def recordings(self, include_removed: bool = False) -> pd.DataFrame:
        """The recordings in the project (and removed ones, with ``removed_at``, if asked)."""
        import pandas as pd

        return pd.DataFrame(self.ctx.store.recordings(include_removed=include_removed),
                            columns=RECORDING_COLUMNS)

    def remove(self, name_or_id: str | int, confirmed: int) -> RemovedRecording:
        """Take a recording out of the project (see :meth:`labeler.project.Project.remove_recording`);
        ``confirmed`` is how many of its windows carry a current label (for the report)."""
        rid = self.recording_id(name_or_id)
        n_windows = int((self.windows()["recording_id"] == rid).sum())
        try:
            row = self.ctx.store.remove_recording(rid, self.ctx.annotator)
        except StoreError as exc:
            raise InputError(str(exc)) from None
        self.ctx.invalidate()
        with contextlib.suppress(sqlite3.Error):  # best effort: readers may hold the old pages
            self.ctx.store.conn.execute("PRAGMA wal_checkpoint(PASSIVE)")
        return RemovedRecording(id=rid, name=row["name"], windows=n_windows, confirmed=confirmed)

    def recording_summaries(self) -> list[RecordingSummary]:
        """Name, length, rate, start and wearer of each recording in the project."""
        return [RecordingSummary(r["name"], int(r["n_samples"]), float(r["rate"]),
                                 r["start_time"] if isinstance(r["start_time"], str) else None,
                                 r["person"] if isinstance(r["person"], str) else None)
                for r in self.ctx.store.recordings()]

    def n_windows(self) -> int:
        """How many windows the project has (counted by the file unless already read)."""
        cached = self.ctx.cache.get("windows")
        return len(cached) if cached is not None else int(self.ctx.store.count_windows())

    def names_of(self, window_ids) -> dict[int, str]:
        """"<recording>#<number>" of the windows asked for (those of removed recordings marked
        " (removed)"), by window id; ids of no window are left out. Reads only those windows."""
        return {wid: f"{name}#{seq}" + (" (removed)" if removed else "")
                for wid, (name, seq, removed) in self.ctx.store.window_names(window_ids).items()}

    def window_names(self) -> pd.Series:
        """"<recording>#<number>" of every window, removed recordings' included (marked
        " (removed)"), indexed by window id: what the label history names."""
        import pandas as pd

        cols = self.ctx.store.windows_columns(include_removed=True)
        recs = self.recordings(include_removed=True).set_index("id")
        rid = pd.Series(cols["recording_id"])
        names = rid.map(recs["name"]) + "#" + pd.Series(cols["seq"]).astype(str)
        gone = rid.map(recs["removed_at"].notna()).fillna(False).astype(bool)
        names[gone] = names[gone] + " (removed)"
        return pd.Series(names.to_numpy(), index=pd.Index(cols["id"], name="window_id"))

    def set_person(self, name_or_id: str | int, person: str | None) -> None:
        """Who wore the sensor of a recording (None: unknown)."""
        self.ctx.store.set_person(self.recording_id(name_or_id),
                                  None if person is None else check_person(person))

    def recording_id(self, name_or_id: str | int) -> int:
        return int(self._recording_row(name_or_id)["id"])

    def _recording_row(self, name_or_id: str | int) -> dict:
        """The store's row of a recording given by id or name (plain rows: no table is built,
        as the signal of one window is read often)."""
        recs = self.ctx.store.recordings()
        hit = []
        if isinstance(name_or_id, (int, np.integer)) or str(name_or_id).isdigit():
            hit = [r for r in recs if int(r["id"]) == int(name_or_id)]
        if not hit:
            hit = [r for r in recs if r["name"] == str(name_or_id)]
        if not hit:
            known = ", ".join(r["name"] for r in recs[:8]) or "none yet"
            raise InputError(f"no recording {name_or_id!r} in the project; recordings: {known}")
        return hit[0]

    def signal(self, recording: str | int, start_s: float | None = None,
               stop_s: float | None = None) -> tuple[np.ndarray, np.ndarray, list[str]]:
        """(time in s, signal (n, channels) float32 with NaN in gaps, channel names) of a span."""
        rec = self._recording_row(recording)
        rid = int(rec["id"])
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
        import pandas as pd

        cache = self.ctx.cache
        if "windows" not in cache:
            df = pd.DataFrame(self.window_arrays())
            names = {r["id"]: r["name"] for r in self.ctx.store.recordings()}
            df.insert(2, "recording", df["recording_id"].map(names))
            cache["windows"] = df
        return cache["windows"].copy()

    def window_arrays(self) -> dict[str, np.ndarray]:
        """The columns of :meth:`windows` but the recording's name, as arrays (read-only)."""
        cache = self.ctx.cache
        if "window_arrays" not in cache:
            # a recording's windows are written with it and never change, so the windows are
            # those of the recordings in the project: kept across a reread with their ids
            key = [[int(r["id"]), str(r["content_hash"])] for r in self.ctx.store.recordings()]
            kept = cache.get("window_arrays_kept")
            if kept is not None and kept[1] == key:
                out = kept[0]
            else:
                cols = self.ctx.store.windows_columns()
                out = {k: np.array(cols[k], dtype=np.int64) for k in
                       ("id", "recording_id", "seq", "start_sample", "stop_sample")}
                out.update({k: np.array(cols[k], dtype=np.float64) for k in ("start_s", "stop_s")})
                for a in out.values():
                    a.flags.writeable = False
                cache["window_arrays_kept"] = (out, key)
            cache["window_arrays"] = out
        return dict(cache["window_arrays"])

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
        w = self.window_arrays()
        steps = {r["id"]: int(r["window_step"]) for r in self.ctx.store.recordings()}
        rid = w["recording_id"].copy()
        start = w["start_sample"]
        seq = np.zeros(rid.size, dtype=np.int64)
        for r in np.unique(rid):
            idx = np.flatnonzero(rid == r)
            idx = idx[np.argsort(start[idx], kind="stable")]
            jumps = np.where(np.diff(start[idx]) == steps[int(r)], 1, 2)
            seq[idx] = np.concatenate([[0], np.cumsum(jumps)])
        return rid, seq


def check_person(person: str) -> str:
    text = str(person).strip()
    if not text or len(text) > 60 or not text.isprintable():
        raise InputError(f"person {str(person)[:70]!r} must be 1-60 printable characters; "
                         "shorten it")
    return text
