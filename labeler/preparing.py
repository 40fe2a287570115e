"""A read recording turned into what a project stores: signal chunks, windows and features.

Pure: no project file is touched, so the work can run anywhere (this process, a process pool, a
Dask worker) and a single writer stores the result (:meth:`labeler.project.Project.add_prepared`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from labeler import features as _features
from labeler.errors import InputError
from labeler.windows import cut_windows, window_samples

if TYPE_CHECKING:
    from labeler.recordings import Recording

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

CHUNK_SECONDS = 60.0


@dataclass
class PreparedRecording:
    """One recording ready for :meth:`storage.Store.add_recording` (row, chunks, windows, features)."""

    row: dict
    chunks: list[tuple[int, int, int, bytes]]
    windows: dict[str, np.ndarray]
    features: dict

    @property
    def name(self) -> str:
        return str(self.row["name"])

    @property
    def source_path(self) -> str:
        return str(self.row["source_path"])

    @property
    def content_hash(self) -> str:
        return str(self.row["content_hash"])

    @property
    def n_windows(self) -> int:
        return int(self.features["n_windows"])

    @property
    def n_samples(self) -> int:
        return int(self.row["n_samples"])

    @property
    def rate(self) -> float:
        return float(self.row["rate"])

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate


def window_starts(rec: Recording, length_s: float, step_s: float) -> tuple[np.ndarray, int, int]:
    """(window start samples, length, step in samples) of a recording; InputError when it holds no
    window of the project's length."""
    length, step = window_samples(rec.rate, length_s, step_s)
    starts = cut_windows(rec.valid, length, step)
    if starts.size == 0:
        raise InputError(
            f"{rec.source_path}: {rec.duration_s:.2f} s of usable signal holds no window of "
            f"{length_s:g} s; give a longer recording or a project with shorter windows")
    return starts, length, step


def recording_features(rec: Recording, starts: np.ndarray, length: int,
                       version: str = _features.FEATURE_SET_VERSION
                       ) -> tuple[np.ndarray, list[str]]:
    """(X float32 (n_windows, n_features), names) of a recording's windows in feature set
    ``version``; InputError when a feature is not finite."""
    X, names = _features.window_features(rec.signal, starts, length, rec.rate, rec.channels,
                                         version=version)
    X = np.ascontiguousarray(X, dtype=np.float32)
    if not np.isfinite(X).all():
        bad = names[int(np.flatnonzero(~np.isfinite(X).all(axis=0))[0])]
        raise InputError(f"{rec.source_path}: feature {bad} is not finite; check the recording "
                         "for constant or broken channels")
    return X, list(names)


def prepare_recording(rec: Recording, length_s: float, step_s: float, added_by: str,
                      version: str = _features.FEATURE_SET_VERSION) -> PreparedRecording:
    """Windows (``length_s`` every ``step_s``, never across a gap), features and signal chunks."""
    starts, length, step = window_starts(rec, length_s, step_s)
    X, names = recording_features(rec, starts, length, version)
    row = {"name": rec.name, "source_path": rec.source_path, "content_hash": rec.content_hash,
           "rate": rec.rate, "channels": rec.channels, "units": rec.units,
           "n_samples": rec.n_samples, "start_time": rec.start_time,
           "added_by": added_by, "repairs": rec.repairs + list(getattr(rec, "notes", [])), "window_length": length,
           "window_step": step}
    chunk = max(1, int(CHUNK_SECONDS * rec.rate))
    sig = np.asarray(rec.signal, dtype=np.float32)  # any memory order: tobytes() writes rows
    chunks = [(a, min(chunk, rec.n_samples - a), sig.shape[1], sig[a:a + chunk].tobytes())
              for a in range(0, rec.n_samples, chunk)]
    wins = {"seq": np.arange(starts.size), "start_sample": starts,
            "stop_sample": starts + length, "start_s": starts / rec.rate,
            "stop_s": (starts + length) / rec.rate}
    feats = {"version": str(version), "names": names,
             "n_windows": int(X.shape[0]), "n_features": int(X.shape[1]), "data": X.tobytes()}
    return PreparedRecording(row, chunks, wins, feats)
