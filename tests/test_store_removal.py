"""Removing a recording from the store: history kept, signal and features gone from the file."""

import sqlite3

import numpy as np
import pytest

from storage import Store, StoreError
from storage import store as store_mod

MARK = np.float32(1234.5678)  # a value no other sample has, to look for in the file's bytes


def _add(store, name, value):
    n = 64 * 20
    row = {"name": name, "source_path": f"{name}.csv", "content_hash": f"hash-{name}", "rate": 50.0,
           "channels": ["wrist_acc_x"], "units": {"wrist_acc_x": "g"}, "n_samples": n,
           "start_time": None, "added_by": "t", "repairs": [], "window_length": 128,
           "window_step": 64}
    sig = np.full((n, 1), value, np.float32)
    starts = np.arange(19) * 64
    wins = {"seq": np.arange(19), "start_sample": starts, "stop_sample": starts + 128,
            "start_s": starts / 50, "stop_s": (starts + 128) / 50}
    feats = {"version": "t", "names": ["f"], "n_windows": 19, "n_features": 1,
             "data": np.full(19, value, np.float32).tobytes()}
    return store.add_recording(row, [(0, n, 1, sig.tobytes())], wins, feats)


def test_removal_keeps_history_and_deletes_the_signal(tmp_path):
    path = tmp_path / "p.labeler"
    store = Store.create(path)
    keep = _add(store, "keep", 0.25)
    gone = _add(store, "gone", MARK)
    cid = store.add_class("walking", "#000000", "t")
    ids = store.windows_columns()["id"]
    store.apply_batch("ann", "confirm", "cli", [(ids[0], cid), (ids[25], cid)])
    before_events = store.events()
    assert len(store.windows_columns()["id"]) == 38

    info = store.remove_recording(gone, "ann")
    assert info["name"] == "gone"
    assert [r["name"] for r in store.recordings()] == ["keep"]
    removed = [r for r in store.recordings(include_removed=True) if r["name"] == "gone"][0]
    assert removed["removed_by"] == "ann" and removed["removed_at"]
    assert len(store.windows_columns()["id"]) == 19
    assert len(store.windows_columns(include_removed=True)["id"]) == 38
    assert [r["recording_id"] for r in store.features()] == [keep]
    assert store.signal_chunks(gone) == []
    assert store.events() == before_events           # the history is kept, event by event
    ann, cur = store.replay()
    assert cur == {r[0]: r[1] for r in store.current_labels()}
    with pytest.raises(StoreError, match="no recording"):
        store.remove_recording(gone, "ann")
    store.conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    store.close()
    raw = path.read_bytes()
    assert MARK.tobytes() * 4 not in raw, "the removed signal is still in the project file"
    assert np.float32(0.25).tobytes() * 4 in raw
    # the same content may come back (under another name)
    store = Store.open(path)
    _add(store, "again", MARK)
    store.close()


def test_older_files_gain_the_columns(tmp_path):
    path = tmp_path / "old.labeler"
    store = Store.create(path)
    store.close()
    conn = sqlite3.connect(str(path))
    for col in ("person", "removed_at", "removed_by"):  # back to a file of schema 1
        conn.execute(f"ALTER TABLE recordings DROP COLUMN {col}")
    for col in ("stratum", "stratum_size"):
        conn.execute(f"ALTER TABLE audits DROP COLUMN {col}")
    conn.execute("DROP TABLE queue_draws")
    conn.execute("UPDATE meta SET value = '1' WHERE key = 'schema_version'")
    conn.commit()
    conn.close()
    store = Store.open(path)
    cols = {r[1] for r in store.conn.execute("PRAGMA table_info(recordings)")}
    assert {"person", "removed_at", "removed_by"} <= cols
    assert store.meta()["schema_version"] == str(len(store_mod.MIGRATIONS))
    store.close()
