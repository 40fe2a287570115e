import sqlite3

import numpy as np
import pytest

from storage import SCHEMA_VERSION, NewerSchemaError, NotAProjectError, Store, StoreError
from storage import store as store_mod


def _add_recording(store, name="r1", n_windows=20, content_hash=None):
    row = {"name": name, "source_path": f"{name}.csv", "content_hash": content_hash or name,
           "rate": 50.0, "channels": ["wrist_acc_x"], "units": {"wrist_acc_x": "g"},
           "n_samples": 64 * n_windows, "start_time": None, "added_by": "t", "repairs": [],
           "window_length": 128, "window_step": 64}
    sig = np.zeros((64 * n_windows, 1), np.float32)
    starts = np.arange(n_windows - 1) * 64
    wins = {"seq": np.arange(starts.size), "start_sample": starts, "stop_sample": starts + 128,
            "start_s": starts / 50, "stop_s": (starts + 128) / 50}
    feats = {"version": "t", "names": ["f"], "n_windows": starts.size, "n_features": 1,
             "data": np.zeros(starts.size, np.float32).tobytes()}
    return store.add_recording(row, [(0, sig.shape[0], 1, sig.tobytes())], wins, feats)


@pytest.fixture
def store(tmp_path):
    s = Store.create(tmp_path / "p.labeler", {"window_length_s": 2.56})
    yield s
    s.close()


def test_create_sets_schema_wal_and_marker(store):
    assert store.meta()["schema_version"] == str(SCHEMA_VERSION)
    assert store.conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert store.conn.execute("PRAGMA application_id").fetchone()[0] == store_mod.APPLICATION_ID
    assert store.setting("window_length_s") == 2.56
    assert store.integrity_check() == "ok"


def test_create_refuses_existing(tmp_path, store):
    with pytest.raises(StoreError, match="exists"):
        Store.create(store.path)


def test_refuses_non_projects(tmp_path):
    (tmp_path / "text.labeler").write_text("hello")
    with pytest.raises(NotAProjectError, match="not a labeler project file"):
        Store.open(tmp_path / "text.labeler")
    foreign = tmp_path / "foreign.db"
    c = sqlite3.connect(foreign)
    c.execute("create table t (x)")
    c.commit()
    c.close()
    before = foreign.read_bytes()
    with pytest.raises(NotAProjectError, match="a SQLite file, but not a labeler project"):
        Store.open(foreign)
    assert foreign.read_bytes() == before
    with pytest.raises(StoreError, match="no such project file"):
        Store.open(tmp_path / "missing.labeler")


def test_refuses_truncated(tmp_path, store):
    _add_recording(store)
    store.close()
    data = store.path.read_bytes()
    (tmp_path / "cut.labeler").write_bytes(data[:50])
    with pytest.raises(NotAProjectError, match="truncated"):
        Store.open(tmp_path / "cut.labeler")


def test_newer_schema_refused(tmp_path, store):
    store.db["meta"].upsert({"key": "schema_version", "value": str(SCHEMA_VERSION + 1)}, pk="key")
    store.close()
    with pytest.raises(NewerSchemaError, match="newer labeler"):
        Store.open(store.path)


def test_migration_runs_once(tmp_path, monkeypatch, store):
    store.close()
    calls = []

    def m2(db):
        calls.append(1)
        db["extra"].create({"id": int}, pk="id")

    monkeypatch.setattr(store_mod, "MIGRATIONS", store_mod.MIGRATIONS + [m2])
    monkeypatch.setattr(store_mod, "SCHEMA_VERSION", len(store_mod.MIGRATIONS))
    s = Store.open(store.path)
    assert calls == [1] and "extra" in s.db.table_names()
    assert s.meta()["schema_version"] == str(SCHEMA_VERSION + 1)
    s.close()
    Store.open(store.path).close()
    assert calls == [1]


def test_duplicate_content_refused(store):
    _add_recording(store, "a", content_hash="h")
    with pytest.raises(StoreError, match="already in the project"):
        _add_recording(store, "b", content_hash="h")
    assert [r["name"] for r in store.recordings()] == ["a"]


def test_batches_replay_and_current_label_rule(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    c2 = store.add_class("standing", "#56B4E9", "ann")
    store.apply_batch("ann", "confirm", "cli", [(1, c1), (2, c1), (3, c1)])
    store.apply_batch("bea", "confirm", "cli", [(2, c2)])
    store.apply_batch("ann", "withdraw", "cli", [(3, None)])
    ann, current = store.replay()
    assert ann == {(1, "ann"): c1, (2, "ann"): c1, (2, "bea"): c2}
    # the most recent confirmation of a window wins
    assert current == {1: c1, 2: c2}
    assert {(w, c) for w, c, *_ in store.current_labels()} == set(current.items())
    assert {(w, who): c for w, who, c in store.annotations()} == ann


def test_failed_batch_leaves_nothing(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    with pytest.raises(StoreError, match="refused by the project file's checks") as info:
        store.apply_batch("ann", "confirm", "cli", [(1, c1), (2, 999)])  # unknown class
    assert isinstance(info.value.__cause__, sqlite3.IntegrityError)
    assert store.events() == [] and store.batches() == [] and store.current_labels() == []


def test_backup_is_consistent_copy(tmp_path, store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    store.apply_batch("ann", "confirm", "cli", [(1, c1)])
    store.backup(tmp_path / "copy.labeler")
    copy = Store.open(tmp_path / "copy.labeler")
    assert copy.replay() == store.replay()
    assert copy.integrity_check() == "ok"
    copy.close()


def test_audit_draws_keep_positions_and_order(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    run = store.add_run("proposals", {}, {})
    assert store.audits() == [] and store.audited_window_ids() == []
    assert store.add_audit(run, "ann", [(5, c1, 0.9), (2, c1, 0.5)]) == 0
    # a second draw continues after the first, so no two picks share a position
    assert store.add_audit(run, "bea", [(7, c1, 0.75)]) == 2
    rows = store.audits()
    assert [(r["window_id"], r["position"], r["drawn_by"]) for r in rows] == [
        (5, 0, "ann"), (2, 1, "ann"), (7, 2, "bea")]
    assert [r["confidence"] for r in rows] == [0.9, 0.5, 0.75]
    assert {r["run_id"] for r in rows} == {run} and {r["proposed_class_id"] for r in rows} == {c1}
    assert rows[0]["drawn_at"].endswith("Z")
    assert store.audited_window_ids() == [2, 5, 7]


def test_audit_draw_is_all_or_nothing(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    store.add_audit(1, "ann", [(1, c1, 0.5)])
    with pytest.raises(ValueError):
        store.add_audit(1, "ann", [(2, c1, 0.5), (3, c1, "not a number")])
    assert [r["window_id"] for r in store.audits()] == [1]


def test_last_event_id_follows_the_history(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    assert store.last_event_id() == 0
    store.apply_batch("ann", "confirm", "cli", [(1, c1), (2, c1)])
    assert store.last_event_id() == max(e["id"] for e in store.events()) == 2
    store.apply_batch("ann", "withdraw", "cli", [(1, None)])
    assert store.last_event_id() == 3


_PROBE_LOCK = """
import fcntl, sys
with open(sys.argv[1], "r+b") as fh:
    try:
        fcntl.lockf(fh, fcntl.LOCK_EX | fcntl.LOCK_NB, 0, 0, 0)
    except OSError:
        print("held")
    else:
        print("free")
"""


def _lock_seen_by_another_process(path) -> str:
    import subprocess
    import sys

    return subprocess.run([sys.executable, "-c", _PROBE_LOCK, str(path)], capture_output=True,
                          text=True, check=True).stdout.strip()


def test_opening_again_keeps_this_process_locks(store):
    # A connection in WAL mode holds a shared POSIX lock on the file as long as it is open; closing
    # any plain descriptor of the file in this process would drop it (SQLite documentation, "How To
    # Corrupt An SQLite Database File", section 2.2), so opening the project a second time (as the
    # app does for its proposal worker) must go through SQLite alone.
    _add_recording(store)
    assert _lock_seen_by_another_process(store.path) == "held"
    second = Store.open(store.path)
    readonly = Store.open(store.path, readonly=True)
    try:
        assert _lock_seen_by_another_process(store.path) == "held"
        store.apply_batch("a", "confirm", "map", [(1, None)])
        assert _lock_seen_by_another_process(store.path) == "held"
    finally:
        readonly.close()
        second.close()
    assert _lock_seen_by_another_process(store.path) == "held"


def test_events_take_keyword_filters(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    c2 = store.add_class("sitting", "#0072B2", "ann")
    b1 = store.apply_batch("ann", "confirm", "cli", [(1, c1), (2, c1)])
    store.apply_batch("bea", "confirm", "map", [(2, c2)])
    assert [e["window_id"] for e in store.events(annotator="ann")] == [1, 2]
    assert [e["annotator"] for e in store.events(class_id=c2)] == ["bea"]
    assert [e["window_id"] for e in store.events(source="cli", batch_id=b1)] == [1, 2]
    assert store.events(source="map", annotator="ann") == []
    first = store.events()[0]["at"]
    assert len(store.events(since=first)) == 3 and len(store.events(until=first)) >= 2


def test_change_mark_moves_with_changes_made_through_another_connection(store):
    _add_recording(store)
    other = Store.open(store.path)
    try:
        mark = store.change_mark()
        assert store.change_mark() == mark                     # nothing changed: same mark
        c1 = other.add_class("walking", "#E69F00", "b")
        assert store.change_mark() != mark
        mark = store.change_mark()
        other.apply_batch("b", "confirm", "cli", [(1, c1)])
        assert store.change_mark()[0] > mark[0] and store.change_mark()[1:] == mark[1:]
        mark = store.change_mark()
        other.put_blob("proposals/x", b"1")                    # not a label, class or recording
        assert store.change_mark() == mark
    finally:
        other.close()


def test_audit_strata_and_queue_draws_are_kept(store):
    _add_recording(store)
    c1 = store.add_class("walking", "#E69F00", "ann")
    run = store.add_run("proposals", {}, {})
    store.add_audit(run, "ann", [(5, c1, 0.9, 1, 40), (2, c1, 0.5)])
    rows = store.audits()
    assert [(r["stratum"], r["stratum_size"]) for r in rows] == [(1, 40), (None, None)]
    store.add_queue_draws(run, "ann", [(3, 0.25, 8), (4, 0.5, 8)])
    store.add_queue_draws(run, "bea", [(3, 0.125, 7)])  # drawn again: the latest draw stands
    got = {r["window_id"]: (r["probability"], r["pool"], r["drawn_by"]) for r in store.queue_draws()}
    assert got == {3: (0.125, 7, "bea"), 4: (0.5, 8, "ann")}
    with pytest.raises(ValueError):
        store.add_queue_draws(run, "ann", [(6, 0.5, 8), (7, "not a number", 8)])
    assert 6 not in {r["window_id"] for r in store.queue_draws()}


def test_blobs_by_prefix_take_the_prefix_as_written(store):
    # "_" and "%" are LIKE's wildcards and LIKE ignores case; a prefix is a plain string here
    for key in ("a_b/1", "axb/2", "A_B/3", "a%b/4", "a_b"):
        store.put_blob(key, key.encode())
    assert sorted(store.blob_keys("a_b/")) == ["a_b/1"]
    assert sorted(store.get_blobs(["axb/2"], prefix="a%b/")) == ["a%b/4", "axb/2"]
    assert store.get_blobs([], prefix="a_b/")["a_b/1"][0] == b"a_b/1"
    store.delete_blobs("a_b")
    assert sorted(store.blob_keys("")) == ["A_B/3", "a%b/4", "axb/2"]


def _grew(store, before):
    return store.path.stat().st_size - before  # stat() opens no descriptor (no lock dropped)


def test_a_commit_left_for_a_later_checkpoint_is_in_the_log_and_survives_a_crash(store):
    # SQLite's automatic checkpoint copies the log into the file at a commit that leaves it past
    # wal_autocheckpoint pages (1000 by default, 4 MB): a deferred commit does not; the copy
    # comes with Store.checkpoint, or with the next commit
    big = np.random.default_rng(0).bytes(6 << 20)
    size = store.path.stat().st_size
    with store.atomic():
        store.put_blob("a", big)
    assert _grew(store, size) >= len(big)  # checkpointed at the commit
    size = store.path.stat().st_size
    with store.atomic(defer_checkpoint=True):
        store.put_blob("b", big[::-1])
    assert store.checkpoint_due and _grew(store, size) == 0
    assert store.conn.execute("PRAGMA wal_autocheckpoint").fetchone()[0] == 1000  # as it was
    # another connection reads it (it is committed), and so does one after a crash: a process
    # that dies now, before any checkpoint, with a deferred commit of its own
    import subprocess
    import sys
    code = ("import sys, os; from storage import Store; s = Store.open(sys.argv[1]);\n"
            "with s.atomic(defer_checkpoint=True): s.put_blob('c', b'x' * (6 << 20))\n"
            "os._exit(0)")
    subprocess.run([sys.executable, "-c", code, str(store.path)], check=True)
    other = Store.open(store.path)
    try:
        assert other.get_blob("b")[0] == big[::-1] and other.get_blob("c")[0] == b"x" * (6 << 20)
    finally:
        other.close()
    size = store.path.stat().st_size
    assert store.checkpoint() and not store.checkpoint_due
    assert _grew(store, size) > 0 and not store.checkpoint()  # nothing due any more


def test_at_most_one_commit_is_left_for_later(store):
    big = np.random.default_rng(1).bytes(6 << 20)
    with store.atomic(defer_checkpoint=True):
        store.put_blob("a", big)
    size = store.path.stat().st_size
    with store.atomic(defer_checkpoint=True):  # one is due: this one checkpoints as usual
        store.put_blob("b", big)
    assert _grew(store, size) >= len(big) and not store.checkpoint_due
    with store.atomic(defer_checkpoint=True):
        store.put_blob("c", big)
    assert store.checkpoint_due
    size = store.path.stat().st_size
    store.close()  # closing checkpoints what is due
    assert _grew(store, size) > 0
