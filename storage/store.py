"""The SQLite project file.

One file holds everything a project needs (raw signal, windows, features, classes, the label history,
runs and their results), so a project can be moved, shared and reopened with nothing lost.

Writes follow three rules:

- every multi-row write happens inside :meth:`Store.atomic` (``BEGIN IMMEDIATE`` ... ``COMMIT``), so a
  batch is present whole or not at all, even if the process is killed mid-way;
- the label history (``events``) is append-only; the per-annotator state (``annotations``) and the current
  label of each window (``current_labels``) are updated in the same transaction as the events that change
  them, and always equal a replay of the events;
- the schema evolves through numbered migrations; a file written by a newer schema is refused.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import functools
import json
import os
import random
import sqlite3
import time
import urllib.parse
import uuid
from pathlib import Path
from typing import TYPE_CHECKING, Any, Iterable, Iterator, Sequence

from labeler.errors import LabelerError  # a leaf module: storage imports nothing else of labeler

if TYPE_CHECKING:  # imported where the schema is written (a command that only reads starts faster)
    import sqlite_utils

APPLICATION_ID = 0x4C424C52  # marks a labeler project file (PRAGMA application_id)
BUSY_TIMEOUT_S = 30.0
#: a blob key that starts with a given prefix (parameters: the prefix's length, the prefix),
#: compared as written: LIKE would take "_" and "%" in the prefix as wildcards and ignore case
_STARTS_WITH = "substr(key, 1, ?) = ?"


class StoreError(LabelerError):
    """A project file cannot be used as asked; the message says which file and what to do."""


class NotAProjectError(StoreError):
    """The file is not a labeler project, or is damaged past use."""


class NewerSchemaError(StoreError):
    """The file was written by a newer labeler."""


class BusyError(StoreError):
    """Another process held the write lock for longer than the retry bound."""


class DiskFullError(StoreError):
    """The disk (or the file's size limit) is full; the change was rolled back."""


class ReadOnlyError(StoreError):
    """The project file or its folder cannot be written."""


def store_error(path: Path, exc: sqlite3.Error) -> StoreError:
    """A one-line StoreError, naming the file and what to do, for an error SQLite raised.

    Every write runs in one transaction, so whatever failed was rolled back: the messages say
    nothing was written of the change.
    """
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    if name.startswith("SQLITE_FULL") or "full" in text:
        return DiskFullError(f"{path}: the disk is full; nothing of this change was written; free "
                             "some space, then try again")
    if name.startswith("SQLITE_READONLY") or "readonly" in text:
        return ReadOnlyError(f"{path}: the project file or its folder is read-only; nothing was "
                             "written; make both writable, then try again")
    if name.startswith(("SQLITE_BUSY", "SQLITE_LOCKED")) or "locked" in text:
        return BusyError(f"{path}: the project file stayed busy ({text}); another process holds "
                         "it; try again")
    if name.startswith(("SQLITE_CORRUPT", "SQLITE_NOTADB")) or "malformed" in text:
        return NotAProjectError(f"{path}: the project file is damaged ({text}); restore it from a "
                                "backup")
    if name.startswith("SQLITE_CANTOPEN") or "unable to open" in text:
        return StoreError(f"{path}: cannot open the project file or make its -wal and -shm files "
                          f"beside it ({text}); check that the file and its folder exist and "
                          "that the folder is writable")
    if name.startswith("SQLITE_IOERR"):
        return StoreError(f"{path}: the disk refused a read or write ({text}); nothing of this "
                          "change was written; check the disk and the file, then try again")
    if isinstance(exc, sqlite3.IntegrityError):
        return StoreError(f"{path}: the change was refused by the project file's checks ({text}); "
                          "nothing of it was written")
    if isinstance(exc, sqlite3.ProgrammingError) and "closed" in text:
        return StoreError(f"{path}: the project is closed; open it again")
    return StoreError(f"{path}: the project file could not be used ({text})")


def _raising_store_errors(method):
    """Wrap a Store method so that SQLite's errors leave it as :class:`StoreError`."""
    @functools.wraps(method)
    def call(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except sqlite3.Error as exc:
            raise store_error(self.path, exc) from exc
    return call


def utc_now() -> str:
    """UTC time as ISO-8601 with microseconds and a Z."""
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


# --------------------------------------------------------------------------- schema migrations

def _m1_initial(db: sqlite_utils.Database) -> None:
    db["meta"].create({"key": str, "value": str}, pk="key")
    db["recordings"].create(
        {
            "id": int, "name": str, "source_path": str, "content_hash": str, "rate": float,
            "channels": str, "units": str, "n_samples": int, "start_time": str, "added_at": str,
            "added_by": str, "repairs": str, "window_length": int, "window_step": int,
        },
        pk="id", not_null={"name", "content_hash", "rate", "channels", "n_samples"},
    )
    db["recordings"].create_index(["name"], unique=True)
    db["recordings"].create_index(["content_hash"], unique=True)
    db["signal_chunks"].create(
        {"recording_id": int, "chunk": int, "start_sample": int, "n_samples": int,
         "n_channels": int, "data": bytes},
        pk=("recording_id", "chunk"), foreign_keys=[("recording_id", "recordings", "id")],
    )
    db["windows"].create(
        {"id": int, "recording_id": int, "seq": int, "start_sample": int, "stop_sample": int,
         "start_s": float, "stop_s": float},
        pk="id", foreign_keys=[("recording_id", "recordings", "id")],
    )
    db["windows"].create_index(["recording_id", "seq"], unique=True)
    db["features"].create(
        {"recording_id": int, "version": str, "names": str, "n_windows": int, "n_features": int,
         "data": bytes},
        pk="recording_id", foreign_keys=[("recording_id", "recordings", "id")],
    )
    db["classes"].create(
        {"id": int, "name": str, "colour": str, "position": int, "created_at": str,
         "created_by": str, "retired_at": str, "merged_into": int},
        pk="id", not_null={"name"},
    )
    db.execute("CREATE UNIQUE INDEX idx_classes_name ON classes (name COLLATE NOCASE)")
    db["class_log"].create(
        {"id": int, "at": str, "annotator": str, "action": str, "class_id": int, "detail": str},
        pk="id",
    )
    db["batches"].create(
        {"id": str, "at": str, "annotator": str, "action": str, "source": str, "n_events": int,
         "note": str, "undoes": str, "undone_by": str},
        pk="id",
    )
    db["batches"].create_index(["annotator", "at"])
    db.execute(
        """CREATE TABLE events (
            id INTEGER PRIMARY KEY AUTOINCREMENT,
            at TEXT NOT NULL,
            annotator TEXT NOT NULL,
            action TEXT NOT NULL,
            window_id INTEGER NOT NULL REFERENCES windows(id),
            class_id INTEGER REFERENCES classes(id),
            source TEXT NOT NULL,
            batch_id TEXT NOT NULL REFERENCES batches(id),
            note TEXT
        )"""
    )
    db["events"].create_index(["window_id"])
    db["events"].create_index(["batch_id"])
    db["annotations"].create(
        {"window_id": int, "annotator": str, "class_id": int, "event_id": int, "at": str,
         "source": str},
        pk=("window_id", "annotator"),
    )
    db["annotations"].create_index(["class_id"])
    db["current_labels"].create(
        {"window_id": int, "class_id": int, "annotator": str, "event_id": int, "at": str,
         "source": str},
        pk="window_id",
    )
    db["runs"].create(
        {"id": int, "kind": str, "created_at": str, "created_by": str, "params": str,
         "summary": str},
        pk="id",
    )
    db["blobs"].create(
        {"key": str, "run_id": int, "created_at": str, "meta": str, "data": bytes}, pk="key",
    )
    db["audits"].create(
        {"id": int, "run_id": int, "window_id": int, "position": int, "drawn_at": str,
         "drawn_by": str, "proposed_class_id": int, "confidence": float},
        pk="id",
    )
    db["audits"].create_index(["window_id"])


def _m2_recording_person_and_removal(db: sqlite_utils.Database) -> None:
    """Who wore the sensor (``person``, for grouped splits of a training set), and removal: a
    removed recording keeps its row and its windows (so the label history still names them) with
    the time and the person of the removal; its signal and features are deleted."""
    db.execute("ALTER TABLE recordings ADD COLUMN person TEXT")
    db.execute("ALTER TABLE recordings ADD COLUMN removed_at TEXT")
    db.execute("ALTER TABLE recordings ADD COLUMN removed_by TEXT")


def _m3_weighted_answers(db: sqlite_utils.Database) -> None:
    """Audit draws remember their confidence band (stratum) and its size; windows the review
    queue drew at random remember the probability of the draw, for weighted accuracy estimates."""
    have = {c.name for c in db["audits"].columns}
    for col in ("stratum", "stratum_size"):
        if col not in have:  # a file that has them already is left as it is
            db["audits"].add_column(col, int)
    if not db["queue_draws"].exists():
        db["queue_draws"].create(
            {"window_id": int, "run_id": int, "probability": float, "pool": int, "drawn_at": str,
             "drawn_by": str},
            pk="window_id",
        )


MIGRATIONS = [_m1_initial, _m2_recording_person_and_removal, _m3_weighted_answers]
SCHEMA_VERSION = len(MIGRATIONS)

# The current label of a window: among the annotators' current labels of that window, the one set by
# the most recent event wins (later confirmation supersedes earlier, whoever made it).
_REFRESH_CURRENT = """
DELETE FROM current_labels WHERE window_id IN (SELECT window_id FROM temp.touched);
INSERT INTO current_labels (window_id, class_id, annotator, event_id, at, source)
SELECT a.window_id, a.class_id, a.annotator, a.event_id, a.at, a.source
FROM annotations a
WHERE a.window_id IN (SELECT window_id FROM temp.touched)
  AND a.event_id = (SELECT max(b.event_id) FROM annotations b WHERE b.window_id = a.window_id);
DELETE FROM temp.touched;
"""


# a row whose window_id belongs to a recording still in the project (not removed); looked up
# row by row through the primary keys, so asking about a few labels reads a few windows (an
# `IN (SELECT ...)` list would gather every window of the project first)
_LIVE_WINDOW = ("(SELECT r.removed_at IS NULL FROM windows w JOIN recordings r ON r.id = "
                "w.recording_id WHERE w.id = window_id)")


class Store:
    """An open project file. Use :meth:`create` or :meth:`open`."""

    def __init__(self, path: Path, conn: sqlite3.Connection):
        self.path = path
        self.conn = conn
        self._depth = 0
        self._readonly = False
        #: a commit left its WAL checkpoint for later (``atomic(defer_checkpoint=True)``)
        self.checkpoint_due = False
        # how long this connection waited for the write lock (for benchmarks and diagnostics)
        self.lock_stats = {"transactions": 0, "retries": 0, "worst_wait_s": 0.0,
                           "total_wait_s": 0.0}

    @functools.cached_property
    def db(self) -> "sqlite_utils.Database":
        """The connection through sqlite-utils (for writing the schema and whole rows)."""
        import sqlite_utils

        return sqlite_utils.Database(self.conn)

    def _query(self, sql: str, args: Sequence[Any] = ()) -> Iterator[dict[str, Any]]:
        """Rows of a query as dicts (column name -> value)."""
        cur = self.conn.execute(sql, tuple(args))
        names = [d[0] for d in cur.description]
        for row in cur:
            yield dict(zip(names, row))

    # ------------------------------------------------------------------ opening
    @staticmethod
    def _connect(path: Path) -> sqlite3.Connection:
        conn = sqlite3.connect(str(path), timeout=BUSY_TIMEOUT_S, isolation_level=None,
                               check_same_thread=False)
        conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        return conn

    @classmethod
    def create(cls, path: str | os.PathLike, settings: dict[str, Any] | None = None,
               tool_version: str = "") -> "Store":
        path = Path(path)
        if path.exists():
            raise StoreError(f"{path}: a file of that name exists; choose another name or open it")
        if not path.parent.exists():
            raise StoreError(f"{path}: folder {path.parent} does not exist; create it first")
        tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex[:8]}.tmp")
        try:
            conn = cls._connect(tmp)
        except sqlite3.Error as exc:
            raise store_error(path, exc) from exc
        try:
            conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            import sqlite_utils

            db = sqlite_utils.Database(conn)
            with conn:
                pass
            conn.execute("BEGIN")
            for step in MIGRATIONS:
                step(db)
            now = utc_now()
            rows = {"schema_version": str(SCHEMA_VERSION), "tool_version": tool_version,
                    "created_at": now, "project_id": uuid.uuid4().hex}
            for k, v in (settings or {}).items():
                rows[k] = json.dumps(v)
            db["meta"].insert_all([{"key": k, "value": v} for k, v in rows.items()])
            conn.execute("COMMIT")
            conn.execute("PRAGMA journal_mode = WAL")
            conn.close()
            os.replace(tmp, path)  # the project appears whole or not at all
        except BaseException as exc:
            conn.close()
            for p in (tmp, Path(f"{tmp}-wal"), Path(f"{tmp}-shm")):
                with contextlib.suppress(FileNotFoundError):
                    p.unlink()
            if isinstance(exc, sqlite3.Error):
                raise store_error(path, exc) from exc
            raise
        return cls.open(path)

    @classmethod
    def open(cls, path: str | os.PathLike, *, readonly: bool = False) -> "Store":
        path = Path(path)
        if not path.exists():
            raise StoreError(f"{path}: no such project file; create one with `labeler new {path}`")
        if path.is_dir():
            raise NotAProjectError(f"{path}: is a folder, not a project file; give the .labeler file")
        writable = os.access(path, os.W_OK) and os.access(path.parent, os.W_OK)
        if not writable and not readonly:
            raise ReadOnlyError(
                f"{path}: the project file or its folder is read-only (labeler writes the file "
                "and keeps its -wal and -shm files beside it); nothing was written; make both "
                "writable, or copy the project to a writable folder")
        try:
            if not writable:
                # without a -wal to share, a folder no one here can write holds a file no one
                # here changes: read it as it is (SQLite cannot make the -shm a reader needs)
                immutable = "" if Path(f"{path}-wal").exists() else "&immutable=1"
                conn = sqlite3.connect(f"file:{urllib.parse.quote(str(path))}?mode=ro{immutable}",
                                       uri=True, timeout=BUSY_TIMEOUT_S, isolation_level=None,
                                       check_same_thread=False)
            else:
                # a read-only use of a writable file still opens it read-write, with writes
                # refused (query_only): so the connection removes the -wal it creates when it
                # closes, and a refused file is left exactly as it was
                conn = cls._connect(path)
        except sqlite3.Error as exc:
            raise store_error(path, exc) from exc
        store = cls(path, conn)
        store._readonly = readonly
        try:
            store._check_header()
            store._check_and_migrate()
            if not readonly:
                conn.execute("PRAGMA journal_mode = WAL")
                # FULL: a confirmation acknowledged to the user is on disk, even across a power
                # loss (NORMAL keeps the file consistent but may lose the last commits)
                conn.execute("PRAGMA synchronous = FULL")
            conn.execute("PRAGMA foreign_keys = ON")
            conn.execute("CREATE TEMP TABLE IF NOT EXISTS touched (window_id INTEGER PRIMARY KEY)")
            if readonly:
                conn.execute("PRAGMA query_only = ON")
        except sqlite3.Error as exc:
            conn.close()
            raise store_error(path, exc) from exc
        except BaseException:
            conn.close()
            raise
        return store

    def _check_header(self) -> None:
        """Is the file a labeler project, whole? Asked of SQLite through this connection.

        Never through a plain open() of the file: closing any other descriptor of a file drops
        every POSIX lock this process holds on it, the locks of its open connections included;
        another process may then take itself for the last user and delete the -wal under them
        (SQLite documentation, "How To Corrupt An SQLite Database File", section 2.2).
        """
        path = self.path
        try:
            app_id = self.conn.execute("PRAGMA application_id").fetchone()[0]
            n_pages = self.conn.execute("PRAGMA page_count").fetchone()[0]
            page_size = self.conn.execute("PRAGMA page_size").fetchone()[0]
        except sqlite3.DatabaseError as exc:
            raise NotAProjectError(
                f"{path}: not a labeler project file (not SQLite, or truncated: {exc}); give a "
                "file made by `labeler new`, or restore it from a backup") from exc
        if n_pages == 0:
            raise NotAProjectError(
                f"{path}: not a labeler project file (empty, or truncated); give a file made by "
                "`labeler new`, or restore it from a backup")
        if app_id != APPLICATION_ID:
            raise NotAProjectError(
                f"{path}: a SQLite file, but not a labeler project; give a file made by `labeler new`")
        # a file shorter than the pages SQLite counts was cut (a copy or download broke off); only
        # meaningful without a -wal, which may hold pages a checkpoint has not yet written (stat()
        # opens no descriptor)
        wal = Path(f"{path}-wal")
        size = path.stat().st_size
        if not (wal.exists() and wal.stat().st_size) and size < n_pages * page_size:
            raise NotAProjectError(
                f"{path}: the project file is truncated ({size} of {n_pages * page_size} bytes); "
                "restore it from a backup")

    def _check_and_migrate(self) -> None:
        try:
            row = self.conn.execute(
                "SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        except sqlite3.OperationalError as exc:
            raise NotAProjectError(
                f"{self.path}: not a labeler project (no meta table); give a file made by "
                "`labeler new`") from exc
        if row is None:
            raise NotAProjectError(f"{self.path}: not a labeler project (no schema version)")
        version = int(row[0])
        if version > SCHEMA_VERSION:
            raise NewerSchemaError(
                f"{self.path}: written by a newer labeler (schema {version}, this one reads up to "
                f"{SCHEMA_VERSION}); upgrade labeler to open it")
        if version < SCHEMA_VERSION and getattr(self, "_readonly", False):
            raise StoreError(
                f"{self.path}: written by an older labeler (schema {version}); open it once "
                "for writing (e.g. `labeler open`) to upgrade it, then read it")
        if version < SCHEMA_VERSION:
            with self.atomic():
                for step in MIGRATIONS[version:]:
                    step(self.db)
                self.db["meta"].upsert({"key": "schema_version", "value": str(SCHEMA_VERSION)},
                                       pk="key")

    @property
    def readonly(self) -> bool:
        """Opened read-only: writes are refused."""
        return bool(getattr(self, "_readonly", False))

    def close(self) -> None:
        self.checkpoint()  # what a deferred commit left (SQLite does it only for the last user)
        self.conn.close()

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ transactions
    @contextlib.contextmanager
    def atomic(self, timeout_s: float | None = None, *,
               defer_checkpoint: bool = False) -> Iterator[None]:
        """One write transaction (nested calls join the outer one).

        ``BEGIN IMMEDIATE`` takes the write lock up front, so a transaction never fails half-way on a
        lock. While another process holds the lock, ``BEGIN IMMEDIATE`` is retried after short
        jittered sleeps (1 ms growing to 20 ms) for up to ``timeout_s`` (default 30 s), then a
        StoreError says the file stayed busy. Short sleeps keep the wait close to the time the lock
        is actually held (SQLite's own busy handler sleeps up to 100 ms per try and lets a busy
        writer starve the others for seconds).

        ``defer_checkpoint`` (the outer transaction's): its commit does not copy the write-ahead
        log into the file when the log has grown past SQLite's threshold (the automatic
        checkpoint, which a commit of a few MB pays nearly every time); :meth:`checkpoint` does
        it later (:attr:`checkpoint_due`). The commit is as durable either way: it is in the log,
        synced (``synchronous = FULL``), and a crash replays it. At most one commit is left so:
        while a checkpoint is due, the next commit checkpoints as usual (the log stays bounded).
        """
        if self._depth:
            self._depth += 1
            try:
                yield
            finally:
                self._depth -= 1
            return
        t0 = time.perf_counter()
        deadline = t0 + (BUSY_TIMEOUT_S if timeout_s is None else timeout_s)
        delay = 0.001
        self.conn.execute("PRAGMA busy_timeout = 0")
        try:
            while True:
                try:
                    self.conn.execute("BEGIN IMMEDIATE")
                    break
                except sqlite3.OperationalError as exc:
                    busy = "locked" in str(exc) or "busy" in str(exc)
                    if not busy:
                        raise store_error(self.path, exc) from exc
                    if time.perf_counter() >= deadline:
                        raise BusyError(
                            f"{self.path}: the project file stayed busy ({exc}); another process "
                            "holds it; try again") from exc
                    self.lock_stats["retries"] += 1
                    time.sleep(delay * (0.5 + random.random()))
                    delay = min(delay * 1.5, 0.02)
        finally:
            self.conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        wait = time.perf_counter() - t0
        stats = self.lock_stats
        stats["transactions"] += 1
        stats["total_wait_s"] += wait
        stats["worst_wait_s"] = max(stats["worst_wait_s"], wait)
        self._depth = 1
        try:
            yield
        except BaseException as exc:
            self._depth = 0
            self._roll_back()
            if isinstance(exc, sqlite3.Error):
                raise store_error(self.path, exc) from exc
            raise
        self._depth = 0
        defer = defer_checkpoint and not self.checkpoint_due
        try:
            if defer:
                before = self.conn.execute("PRAGMA wal_autocheckpoint").fetchone()[0]
                self.conn.execute("PRAGMA wal_autocheckpoint = 0")
            try:
                self.conn.execute("COMMIT")
            finally:
                if defer:
                    self.conn.execute(f"PRAGMA wal_autocheckpoint = {int(before)}")
        except sqlite3.Error as exc:
            self._roll_back()  # a failed COMMIT leaves the transaction open: undo it
            raise store_error(self.path, exc) from exc
        if defer:
            self.checkpoint_due = True
        elif self.checkpoint_due and self.conn.execute("PRAGMA wal_autocheckpoint").fetchone()[0]:
            self.checkpoint_due = False  # the automatic checkpoint applied to this commit

    def checkpoint(self) -> bool:
        """Copy the write-ahead log into the file now (a passive checkpoint: it waits for no
        reader or writer and leaves what they still need), when a commit left it for later
        (:meth:`atomic` with ``defer_checkpoint``); True when one was run. Best effort: a busy
        file is left to the next commit's automatic checkpoint."""
        if not self.checkpoint_due or self.conn.in_transaction:
            return False
        self.checkpoint_due = False
        with contextlib.suppress(sqlite3.Error):
            self.conn.execute("PRAGMA wal_checkpoint(PASSIVE)")
        return True

    def _roll_back(self) -> None:
        """Roll back the open transaction, if SQLite has not already (e.g. on a full disk)."""
        if self.conn.in_transaction:
            with contextlib.suppress(sqlite3.Error):
                self.conn.execute("ROLLBACK")

    # ------------------------------------------------------------------ meta
    def meta(self) -> dict[str, str]:
        return {r[0]: r[1] for r in self.conn.execute("SELECT key, value FROM meta")}

    def setting(self, key: str, default: Any = None) -> Any:
        row = self.conn.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return default if row is None else json.loads(row[0])

    def set_setting(self, key: str, value: Any) -> None:
        with self.atomic():
            self.db["meta"].upsert({"key": key, "value": json.dumps(value)}, pk="key")

    # ------------------------------------------------------------------ recordings
    def add_recording(self, row: dict[str, Any], chunks: Iterable[tuple[int, int, int, bytes]],
                      windows: dict[str, Sequence], features: dict[str, Any]) -> int:
        """Insert a recording, its signal chunks, windows and features in one transaction.

        ``chunks``: (start_sample, n_samples, n_channels, float32 bytes); ``windows``: columns seq,
        start_sample, stop_sample, start_s, stop_s; ``features``: version, names, n_windows,
        n_features, data (float32 bytes). Returns the recording id.
        """
        with self.atomic():
            dup = self.conn.execute("SELECT name FROM recordings WHERE content_hash = ?",
                                    (row["content_hash"],)).fetchone()
            if dup is not None:
                raise StoreError(f"{row['source_path']}: already in the project as recording "
                                 f"{dup[0]!r} (same content); nothing added")
            dup = self.conn.execute("SELECT 1 FROM recordings WHERE name = ?",
                                    (row["name"],)).fetchone()
            if dup is not None:
                raise StoreError(f"{row['source_path']}: a recording named {row['name']!r} is "
                                 "already in the project; rename the file or pass another --name")
            row = dict(row, added_at=utc_now())
            for key in ("channels", "units", "repairs"):
                if not isinstance(row.get(key), str):
                    row[key] = json.dumps(row.get(key))
            cur = self.conn.execute(
                "INSERT INTO recordings (" + ", ".join(row) + ") VALUES ("
                + ", ".join("?" * len(row)) + ")", list(row.values()))
            rid = cur.lastrowid
            self.conn.executemany(
                "INSERT INTO signal_chunks (recording_id, chunk, start_sample, n_samples, "
                "n_channels, data) VALUES (?, ?, ?, ?, ?, ?)",
                ((rid, i, s, n, c, d) for i, (s, n, c, d) in enumerate(chunks)))
            self.conn.executemany(
                "INSERT INTO windows (recording_id, seq, start_sample, stop_sample, start_s, "
                "stop_s) VALUES (?, ?, ?, ?, ?, ?)",
                zip([rid] * len(windows["seq"]), *(_py(windows[k]) for k in
                    ("seq", "start_sample", "stop_sample", "start_s", "stop_s"))))
            self.conn.execute(
                "INSERT INTO features (recording_id, version, names, n_windows, n_features, data) "
                "VALUES (?, ?, ?, ?, ?, ?)",
                (rid, features["version"], json.dumps(features["names"]), features["n_windows"],
                 features["n_features"], features["data"]))
        return rid

    def recordings(self, include_removed: bool = False) -> list[dict[str, Any]]:
        where = "" if include_removed else " WHERE removed_at IS NULL"
        rows = [dict(r) for r in self._query(f"SELECT * FROM recordings{where} ORDER BY id")]
        for r in rows:
            for key in ("channels", "units", "repairs"):
                r[key] = json.loads(r[key]) if r[key] else None
        return rows

    def signal_chunks(self, recording_id: int, start: int | None = None,
                      stop: int | None = None) -> list[tuple[int, int, int, bytes]]:
        sql = ("SELECT start_sample, n_samples, n_channels, data FROM signal_chunks "
               "WHERE recording_id = ?")
        args: list[Any] = [recording_id]
        if start is not None:
            sql += " AND start_sample + n_samples > ?"
            args.append(start)
        if stop is not None:
            sql += " AND start_sample < ?"
            args.append(stop)
        return list(self.conn.execute(sql + " ORDER BY chunk", args))

    def windows_columns(self, include_removed: bool = False) -> dict[str, list]:
        """Windows of the recordings in the project (and of removed ones, if asked)."""
        where = "" if include_removed else (" WHERE recording_id IN (SELECT id FROM recordings "
                                            "WHERE removed_at IS NULL)")
        cur = self.conn.execute("SELECT id, recording_id, seq, start_sample, stop_sample, start_s, "
                                f"stop_s FROM windows{where} ORDER BY id")
        rows = cur.fetchall()
        names = ["id", "recording_id", "seq", "start_sample", "stop_sample", "start_s", "stop_s"]
        return {n: [r[i] for r in rows] for i, n in enumerate(names)}

    def count_windows(self) -> int:
        """How many windows the recordings in the project have."""
        return self.conn.execute(
            "SELECT count(*) FROM windows WHERE recording_id IN (SELECT id FROM recordings "
            "WHERE removed_at IS NULL)").fetchone()[0]

    def window_starts(self, window_ids: Iterable[int]) -> dict[int, float]:
        """Start (s from the recording's first sample) of each window asked for that exists."""
        ids = sorted({int(i) for i in window_ids})
        out: dict[int, float] = {}
        for at in range(0, len(ids), 500):  # SQLite's bound on host parameters is 999 or more
            part = ids[at:at + 500]
            out.update(self.conn.execute(
                f"SELECT id, start_s FROM windows WHERE id IN ({','.join('?' * len(part))})",
                part).fetchall())
        return out

    def window_names(self, window_ids: Iterable[int]) -> dict[int, tuple[str, int, bool]]:
        """(recording name, sequence number, recording removed) of each window asked for that
        exists, removed recordings' windows included."""
        ids = sorted({int(i) for i in window_ids})
        out: dict[int, tuple[str, int, bool]] = {}
        for at in range(0, len(ids), 500):  # SQLite's bound on host parameters is 999 or more
            part = ids[at:at + 500]
            for wid, name, seq, removed in self.conn.execute(
                    "SELECT w.id, r.name, w.seq, r.removed_at IS NOT NULL FROM windows w "
                    "JOIN recordings r ON r.id = w.recording_id WHERE w.id IN "
                    f"({','.join('?' * len(part))})", part):
                out[int(wid)] = (name, int(seq), bool(removed))
        return out

    def features(self) -> list[dict[str, Any]]:
        rows = [dict(r) for r in self._query(
            "SELECT recording_id, version, names, n_windows, n_features, data FROM features "
            "ORDER BY recording_id")]
        for r in rows:
            r["names"] = json.loads(r["names"])
        return rows

    def remove_recording(self, recording_id: int, annotator: str) -> dict[str, Any]:
        """Take a recording out of the project in one transaction: its signal and features are
        deleted (overwritten on disk: secure_delete), its row and windows stay, marked removed, so
        the label history keeps naming them. Its content hash is set aside, so the same file may be
        added again (under another name). Returns the recording's row as it was."""
        with self.atomic():
            row = self.conn.execute("SELECT id, name, content_hash, removed_at FROM recordings "
                                    "WHERE id = ?", (recording_id,)).fetchone()
            if row is None or row[3] is not None:
                raise StoreError(f"no recording {recording_id} in the project; list them with "
                                 "`labeler recording list`")
            self.conn.execute("PRAGMA secure_delete = ON")
            try:
                self.conn.execute("DELETE FROM signal_chunks WHERE recording_id = ?", (recording_id,))
                self.conn.execute("DELETE FROM features WHERE recording_id = ?", (recording_id,))
            finally:
                self.conn.execute("PRAGMA secure_delete = OFF")
            self.conn.execute(
                "UPDATE recordings SET removed_at = ?, removed_by = ?, content_hash = ? WHERE id = ?",
                (utc_now(), annotator, f"removed:{recording_id}:{row[2]}", recording_id))
        return {"id": row[0], "name": row[1], "content_hash": row[2]}

    def set_person(self, recording_id: int, person: str | None) -> None:
        """Who wore the sensor of a recording (None: not known)."""
        with self.atomic():
            cur = self.conn.execute("UPDATE recordings SET person = ? WHERE id = ? AND removed_at "
                                    "IS NULL", (person, recording_id))
            if cur.rowcount != 1:
                raise StoreError(f"no recording {recording_id} in the project; list them with "
                                 "`labeler recording list`")

    # ------------------------------------------------------------------ classes
    def classes(self, include_retired: bool = True) -> list[dict[str, Any]]:
        sql = "SELECT * FROM classes"
        if not include_retired:
            sql += " WHERE retired_at IS NULL"
        return [dict(r) for r in self._query(sql + " ORDER BY position, id")]

    def class_by_name(self, name: str) -> dict[str, Any] | None:
        rows = list(self._query("SELECT * FROM classes WHERE name = ? COLLATE NOCASE", [name]))
        return dict(rows[0]) if rows else None

    def add_class(self, name: str, colour: str, annotator: str) -> int:
        with self.atomic():
            if self.class_by_name(name) is not None:
                raise StoreError(f"class {name!r} exists already; pick another name")
            pos = self.conn.execute("SELECT coalesce(max(position), 0) + 1 FROM classes").fetchone()[0]
            now = utc_now()
            cid = self.conn.execute(
                "INSERT INTO classes (name, colour, position, created_at, created_by) "
                "VALUES (?, ?, ?, ?, ?)", (name, colour, pos, now, annotator)).lastrowid
            self._log_class(now, annotator, "add", cid, {"name": name, "colour": colour})
        return cid

    def _log_class(self, at: str, annotator: str, action: str, class_id: int, detail: dict) -> None:
        self.conn.execute("INSERT INTO class_log (at, annotator, action, class_id, detail) "
                          "VALUES (?, ?, ?, ?, ?)", (at, annotator, action, class_id,
                                                      json.dumps(detail)))

    def rename_class(self, class_id: int, new_name: str, annotator: str) -> None:
        with self.atomic():
            other = self.class_by_name(new_name)
            if other is not None and other["id"] != class_id:
                raise StoreError(f"class {new_name!r} exists already; merge into it instead")
            old = self.conn.execute("SELECT name FROM classes WHERE id = ?", (class_id,)).fetchone()[0]
            self.conn.execute("UPDATE classes SET name = ? WHERE id = ?", (new_name, class_id))
            self._log_class(utc_now(), annotator, "rename", class_id, {"from": old, "to": new_name})

    def set_class_colour(self, class_id: int, colour: str, annotator: str) -> None:
        with self.atomic():
            self.conn.execute("UPDATE classes SET colour = ? WHERE id = ?", (colour, class_id))
            self._log_class(utc_now(), annotator, "colour", class_id, {"colour": colour})

    def retire_class(self, class_id: int, annotator: str, merged_into: int | None = None) -> None:
        with self.atomic():
            now = utc_now()
            self.conn.execute("UPDATE classes SET retired_at = ?, merged_into = ? WHERE id = ?",
                              (now, merged_into, class_id))
            self._log_class(now, annotator, "merge" if merged_into else "retire", class_id,
                            {"merged_into": merged_into})

    def class_log(self) -> list[dict[str, Any]]:
        return [dict(r) for r in self._query("SELECT * FROM class_log ORDER BY id")]

    # ------------------------------------------------------------------ label history
    def apply_batch(self, annotator: str, action: str, source: str,
                    changes: Sequence[tuple[int, int | None]], note: str | None = None,
                    undoes: str | None = None, batch_id: str | None = None,
                    per_annotator: Sequence[str] | None = None) -> str:
        """Append one batch of events and apply them, all in one transaction.

        ``changes``: (window_id, class_id or None); None withdraws the annotator's label of that
        window. ``per_annotator`` (same length as changes) names whose label each event sets, for
        actions that act on other annotators' labels (merging classes, undoing); default: annotator.
        Returns the batch id.
        """
        batch_id = batch_id or uuid.uuid4().hex
        now = utc_now()
        whose = list(per_annotator) if per_annotator is not None else [annotator] * len(changes)
        with self.atomic():
            self.conn.execute(
                "INSERT INTO batches (id, at, annotator, action, source, n_events, note, undoes) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                (batch_id, now, annotator, action, source, len(changes), note, undoes))
            first = self.last_event_id() + 1
            self.conn.executemany(
                "INSERT INTO events (at, annotator, action, window_id, class_id, source, batch_id, "
                "note) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                ((now, who, action, int(w), None if c is None else int(c), source, batch_id, note)
                 for (w, c), who in zip(changes, whose)))
            self._apply_events_from(first)
            if undoes is not None:
                self.conn.execute("UPDATE batches SET undone_by = ? WHERE id = ?",
                                  (batch_id, undoes))
        return batch_id

    def _apply_events_from(self, first_event_id: int) -> None:
        """Bring annotations and current_labels up to date with events of id >= first_event_id."""
        rows = self.conn.execute(
            "SELECT id, at, annotator, window_id, class_id, source FROM events WHERE id >= ? "
            "ORDER BY id", (first_event_id,)).fetchall()
        # order matters when one batch touches the same (window, annotator) twice: apply in id order
        for eid, at, who, w, c, src in rows:
            if c is None:
                self.conn.execute("DELETE FROM annotations WHERE window_id = ? AND annotator = ?",
                                  (w, who))
            else:
                self.conn.execute(
                    "INSERT OR REPLACE INTO annotations (window_id, annotator, class_id, event_id, "
                    "at, source) VALUES (?, ?, ?, ?, ?, ?)", (w, who, c, eid, at, src))
        self.conn.executemany("INSERT OR IGNORE INTO temp.touched (window_id) VALUES (?)",
                              ((r[3],) for r in rows))
        for statement in _REFRESH_CURRENT.split(";"):  # executescript() would commit
            if statement.strip():
                self.conn.execute(statement)

    def batches(self, annotator: str | None = None) -> list[dict[str, Any]]:
        sql, args = "SELECT * FROM batches", []
        if annotator is not None:
            sql += " WHERE annotator = ?"
            args.append(annotator)
        return [dict(r) for r in self._query(sql + " ORDER BY rowid", args)]

    def batch(self, batch_id: str) -> dict[str, Any] | None:
        rows = list(self._query("SELECT * FROM batches WHERE id = ?", [batch_id]))
        return dict(rows[0]) if rows else None

    def last_undoable_batch(self, annotator: str) -> dict[str, Any] | None:
        rows = list(self._query(
            "SELECT * FROM batches WHERE annotator = ? AND undone_by IS NULL AND undoes IS NULL "
            "AND action != 'undo' ORDER BY rowid DESC LIMIT 1", [annotator]))
        return dict(rows[0]) if rows else None

    def batch_events(self, batch_id: str) -> list[dict[str, Any]]:
        return [dict(r) for r in self._query(
            "SELECT * FROM events WHERE batch_id = ? ORDER BY id", [batch_id])]

    def state_before(self, event_id: int, window_id: int, annotator: str) -> int | None:
        """The class the annotator's label of the window had just before an event (None = none)."""
        row = self.conn.execute(
            "SELECT class_id FROM events WHERE window_id = ? AND annotator = ? AND id < ? "
            "ORDER BY id DESC LIMIT 1", (window_id, annotator, event_id)).fetchone()
        return None if row is None else row[0]

    def annotation(self, window_id: int, annotator: str) -> dict[str, Any] | None:
        rows = list(self._query("SELECT * FROM annotations WHERE window_id = ? AND annotator = ?",
                                  [window_id, annotator]))
        return dict(rows[0]) if rows else None

    def events(self, *, annotator: str | None = None, class_id: int | None = None,
               source: str | None = None, since: str | None = None, until: str | None = None,
               batch_id: str | None = None) -> list[dict[str, Any]]:
        """Events in the order they were written, those matching every filter given (``since`` and
        ``until``: ISO-8601 UTC times, inclusive)."""
        tests = (("annotator = ?", annotator), ("class_id = ?", class_id), ("source = ?", source),
                 ("at >= ?", since), ("at <= ?", until), ("batch_id = ?", batch_id))
        used = [(clause, value) for clause, value in tests if value is not None]
        sql = "SELECT * FROM events"
        if used:
            sql += " WHERE " + " AND ".join(clause for clause, _ in used)
        return [dict(r) for r in self._query(sql + " ORDER BY id", [v for _, v in used])]

    def current_labels(self, include_removed: bool = False) -> list[tuple[int, int, str, str, str]]:
        """(window_id, class_id, annotator, at, source) of every labeled window (of the recordings
        in the project; labels of removed recordings stay in the tables and the history)."""
        return self.conn.execute(
            "SELECT window_id, class_id, annotator, at, source FROM current_labels"
            + ("" if include_removed else f" WHERE {_LIVE_WINDOW}") + " ORDER BY window_id"
        ).fetchall()

    def label_counts(self) -> dict[int, int]:
        """Class id -> how many windows (of the recordings in the project) it is the current
        label of."""
        return {int(c): int(n) for c, n in self.conn.execute(
            f"SELECT class_id, count(*) FROM current_labels WHERE {_LIVE_WINDOW} GROUP BY class_id")}

    def label_annotators(self) -> list[str]:
        """Who set the current labels (of the recordings in the project), sorted."""
        return [r[0] for r in self.conn.execute(
            f"SELECT DISTINCT annotator FROM current_labels WHERE {_LIVE_WINDOW} ORDER BY annotator")]

    def label_batches(self) -> list[tuple[int, str]]:
        """(window_id, batch_id) of every labeled window: the batch of the event that set its
        current label."""
        return self.conn.execute(
            "SELECT c.window_id, e.batch_id FROM current_labels c JOIN events e ON e.id = c.event_id "
            "ORDER BY c.window_id").fetchall()

    def annotations(self, include_removed: bool = False) -> list[tuple[int, str, int]]:
        return self.conn.execute(
            "SELECT window_id, annotator, class_id FROM annotations"
            + ("" if include_removed else f" WHERE {_LIVE_WINDOW}")
            + " ORDER BY window_id, annotator").fetchall()

    def replay(self, include_removed: bool = False
               ) -> tuple[dict[tuple[int, str], int], dict[int, int]]:
        """Recompute (annotations, current labels) from the events alone, without touching tables
        (of the windows :meth:`annotations` and :meth:`current_labels` return)."""
        ann, current = replay_events(self.conn)
        if include_removed:
            return ann, current
        live = {r[0] for r in self.conn.execute(
            "SELECT w.id FROM windows w JOIN recordings r ON r.id = w.recording_id "
            "WHERE r.removed_at IS NULL")}
        return ({k: c for k, c in ann.items() if k[0] in live},
                {w: c for w, c in current.items() if w in live})

    # ------------------------------------------------------------------ runs and results
    def add_run(self, kind: str, params: dict, summary: dict, created_by: str = "") -> int:
        with self.atomic():
            return self.conn.execute(
                "INSERT INTO runs (kind, created_at, created_by, params, summary) "
                "VALUES (?, ?, ?, ?, ?)",
                (kind, utc_now(), created_by, json.dumps(params), json.dumps(summary))).lastrowid

    def runs(self, kind: str | None = None) -> list[dict[str, Any]]:
        sql, args = "SELECT * FROM runs", []
        if kind is not None:
            sql += " WHERE kind = ?"
            args.append(kind)
        rows = [dict(r) for r in self._query(sql + " ORDER BY id", args)]
        for r in rows:
            r["params"] = json.loads(r["params"]) if r["params"] else {}
            r["summary"] = json.loads(r["summary"]) if r["summary"] else {}
        return rows

    def latest_run(self, kind: str) -> dict[str, Any] | None:
        rows = self.runs(kind)
        return rows[-1] if rows else None

    def put_blob(self, key: str, data: bytes, meta: dict | None = None,
                 run_id: int | None = None) -> None:
        with self.atomic():
            self.conn.execute(
                "INSERT OR REPLACE INTO blobs (key, run_id, created_at, meta, data) "
                "VALUES (?, ?, ?, ?, ?)", (key, run_id, utc_now(), json.dumps(meta or {}), data))

    def get_blob(self, key: str) -> tuple[bytes, dict] | None:
        row = self.conn.execute("SELECT data, meta FROM blobs WHERE key = ?", (key,)).fetchone()
        return None if row is None else (row[0], json.loads(row[1] or "{}"))

    def get_blobs(self, keys: Sequence[str], prefix: str | None = None
                  ) -> dict[str, tuple[bytes, dict]]:
        """The blobs ``keys`` (and those whose key starts with ``prefix``) that exist, as
        {key: (data, meta)}, read by one statement (so one state of the file, whatever another
        process commits meanwhile)."""
        params: list = list(keys)
        where = [f"key IN ({', '.join('?' * len(params))})"] if params else []
        if prefix is not None:
            where.append(_STARTS_WITH)
            params += [len(prefix), prefix]
        if not where:
            return {}
        rows = self.conn.execute(f"SELECT key, data, meta FROM blobs WHERE {' OR '.join(where)}",
                                 params).fetchall()
        return {r[0]: (r[1], json.loads(r[2] or "{}")) for r in rows}

    def blob_keys(self, prefix: str) -> list[str]:
        """Keys of the blobs whose key starts with ``prefix``."""
        return [r[0] for r in self.conn.execute(f"SELECT key FROM blobs WHERE {_STARTS_WITH}",
                                                (len(prefix), prefix))]

    def delete_blob(self, key: str) -> None:
        with self.atomic():
            self.conn.execute("DELETE FROM blobs WHERE key = ?", (key,))

    def blob_meta(self, key: str) -> dict | None:
        """The meta of blob ``key`` without its data (None when there is no such blob)."""
        row = self.conn.execute("SELECT meta FROM blobs WHERE key = ?", (key,)).fetchone()
        return None if row is None else json.loads(row[0] or "{}")

    def delete_blobs(self, prefix: str) -> None:
        with self.atomic():
            self.conn.execute(f"DELETE FROM blobs WHERE {_STARTS_WITH}", (len(prefix), prefix))

    # ------------------------------------------------------------------ audits
    def add_audit(self, run_id: int, drawn_by: str,
                  picks: Sequence[tuple]) -> int:
        """Append one audit draw in one transaction: ``picks`` are (window_id, proposed class id,
        confidence[, stratum, stratum size]) in the order they are shown. Positions continue after
        the last drawn window, so two draws never share one. Returns the position of the first
        pick."""
        now = utc_now()
        with self.atomic():
            start = self.conn.execute(
                "SELECT coalesce(max(position), -1) + 1 FROM audits").fetchone()[0]
            self.conn.executemany(
                "INSERT INTO audits (run_id, window_id, position, drawn_at, drawn_by, "
                "proposed_class_id, confidence, stratum, stratum_size) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                ((int(run_id), int(p[0]), start + k, now, drawn_by, int(p[1]), float(p[2]),
                  None if len(p) < 4 else int(p[3]), None if len(p) < 5 else int(p[4]))
                 for k, p in enumerate(picks)))
        return int(start)

    def audits(self) -> list[dict[str, Any]]:
        """Every audited window in the order drawn: id, run_id, window_id, position, drawn_at,
        drawn_by, proposed_class_id, confidence, stratum, stratum_size (None for a draw made
        without strata)."""
        return [dict(r) for r in self._query(
            "SELECT id, run_id, window_id, position, drawn_at, drawn_by, proposed_class_id, "
            "confidence, stratum, stratum_size FROM audits ORDER BY position, id")]

    # ------------------------------------------------------------------ queue draws
    def add_queue_draws(self, run_id: int | None, drawn_by: str,
                        draws: Sequence[tuple[int, float, int]]) -> None:
        """Remember, for windows the review queue drew at random, the probability of the draw and
        the number of windows it was drawn from: ``draws`` are (window_id, probability, pool). A
        window drawn again keeps its latest draw. One transaction."""
        now = utc_now()
        with self.atomic():
            self.conn.executemany(
                "INSERT OR REPLACE INTO queue_draws (window_id, run_id, probability, pool, "
                "drawn_at, drawn_by) VALUES (?, ?, ?, ?, ?, ?)",
                ((int(w), None if run_id is None else int(run_id), float(q), int(m), now, drawn_by)
                 for w, q, m in draws))

    def queue_draws(self) -> list[dict[str, Any]]:
        """Every window's latest random draw by the review queue: window_id, run_id,
        probability, pool, drawn_at, drawn_by."""
        return [dict(r) for r in self._query(
            "SELECT window_id, run_id, probability, pool, drawn_at, drawn_by FROM queue_draws "
            "ORDER BY window_id")]

    def audited_window_ids(self) -> list[int]:
        """Ids of the windows drawn into any audit (each once, ascending)."""
        return [r[0] for r in self.conn.execute(
            "SELECT DISTINCT window_id FROM audits ORDER BY window_id")]

    def change_mark(self) -> tuple[int, int, int, int]:
        """A cheap mark of what anyone may have changed: (newest label event id, newest class change
        id, newest recording id, number of recordings). It differs from an earlier mark exactly
        when labels, classes or recordings changed since, whichever process changed them."""
        row = self.conn.execute(
            "SELECT (SELECT coalesce(max(id), 0) FROM events), "
            "(SELECT coalesce(max(id), 0) FROM class_log), "
            "(SELECT coalesce(max(id), 0) FROM recordings), (SELECT count(*) FROM recordings)"
        ).fetchone()
        return tuple(int(v) for v in row)

    def last_event_id(self) -> int:
        """Id of the newest label event (0 before the first); grows with every change of a label."""
        return int(self.conn.execute("SELECT coalesce(max(id), 0) FROM events").fetchone()[0])

    # ------------------------------------------------------------------ checks and copies
    def integrity_check(self) -> str:
        return self.conn.execute("PRAGMA integrity_check").fetchone()[0]

    def backup(self, dest: str | os.PathLike) -> None:
        """A consistent copy through SQLite's online backup API (safe while others write)."""
        dest = Path(dest)
        if dest.exists():
            raise StoreError(f"{dest}: exists already; choose a new file name for the backup")
        if not dest.parent.is_dir():
            raise StoreError(f"{dest}: folder {dest.parent} does not exist; create it first")
        if dest.resolve() == Path(self.path).resolve():
            raise StoreError(f"{dest}: is the project itself; choose another file name")
        tmp = dest.with_name(f".{dest.name}.{uuid.uuid4().hex[:8]}.tmp")
        target = sqlite3.connect(str(tmp))
        try:
            self.conn.backup(target)  # all pages in one step: one consistent snapshot
            target.execute("PRAGMA journal_mode = DELETE")
            check = target.execute("PRAGMA integrity_check").fetchone()[0]
            if check != "ok":
                raise StoreError(f"{dest}: the copy failed its integrity check ({check}); nothing "
                                 "written; check the disk and try again")
            target.close()
            with open(tmp, "rb+") as fh:  # on disk before it takes the final name
                os.fsync(fh.fileno())
            os.replace(tmp, dest)
        except BaseException:
            target.close()
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
            raise


# Every method of Store raises StoreError, never sqlite3's errors (atomic() converts its own; the
# constructors convert theirs while opening).
for _name, _member in list(vars(Store).items()):
    if (callable(_member) and not _name.startswith("__") and _name not in ("atomic", "_roll_back")
            and not isinstance(_member, (staticmethod, classmethod))):
        setattr(Store, _name, _raising_store_errors(_member))
del _name, _member


def replay_events(conn: sqlite3.Connection) -> tuple[dict[tuple[int, str], int], dict[int, int]]:
    """(annotations, current labels) recomputed from the ``events`` table alone, read through
    ``conn`` (any connection to a project file; the caller decides on the read transaction).

    An event sets (class id) or withdraws (None) one annotator's label of a window; of the
    annotators' labels of a window, the one set by the most recent event is the current label.
    """
    ann: dict[tuple[int, str], tuple[int, int]] = {}
    for eid, who, w, c in conn.execute(
            "SELECT id, annotator, window_id, class_id FROM events ORDER BY id"):
        if c is None:
            ann.pop((w, who), None)
        else:
            ann[(w, who)] = (c, eid)
    current: dict[int, tuple[int, int]] = {}
    for (w, _who), (c, eid) in ann.items():
        if w not in current or eid > current[w][1]:
            current[w] = (c, eid)
    return ({k: v[0] for k, v in ann.items()}, {w: v[0] for w, v in current.items()})


def _py(values: Sequence) -> list:
    """numpy scalars → Python scalars for sqlite3."""
    tolist = getattr(values, "tolist", None)
    return tolist() if tolist is not None else [v.item() if hasattr(v, "item") else v for v in values]
