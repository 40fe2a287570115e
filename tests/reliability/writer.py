"""Helper processes of the reliability tests: writers, readers and other users of one project file.

Every line printed is one JSON object, written with a single flushed write, so a process killed at any
moment leaves only whole lines behind (a cut last line is ignored by the reader of the output).

    python writer.py confirm PROJECT SEED N [ANNOTATOR [pure]]
                                                           N batches (0: until killed), one "ack" each;
                                                           "pure": confirmations only
    python writer.py zygote PROJECT                        import once, then fork a confirming child
                                                           per "fork SEED" line on stdin
    python writer.py reader PROJECT STOPFILE               read transactions until STOPFILE exists
    python writer.py other PROJECT STOPFILE                another kind of write until STOPFILE exists
    python writer.py slowread PROJECT STOPFILE             long read transactions until STOPFILE exists
    python writer.py app PROJECT SEED N ANNOTATOR          the app's document (page connection and
                                                           proposal worker) confirms N picks (0:
                                                           until killed), one "ack" each
    python writer.py holder PROJECT SEED                   hold the file with two connections (as the
                                                           app: the page's and the proposal worker's);
                                                           per "confirm N" line on stdin confirm N
                                                           batches, then print "round"; "quit" closes

An acknowledgement is printed only after ``Project.confirm`` (or ``withdraw`` / ``undo``) returned.
"""

from __future__ import annotations

import json
import os
import sys
import time
import traceback

import numpy as np


def emit(obj: dict) -> None:
    sys.stdout.write(json.dumps(obj) + "\n")
    sys.stdout.flush()


def confirm_loop(project: str, seed: int, n: int, annotator: str, mixed: bool = True) -> None:
    from labeler.project import Project

    rng = np.random.default_rng(seed)
    p = Project.open(project, annotator=annotator)
    ids = p.windows()["id"].to_numpy()
    classes = p.active_classes()
    cid = {c: int(i) for i, c in zip(p.classes()["id"], p.classes()["name"])}
    emit({"ready": os.getpid()})
    done = 0
    slowest = 0.0
    while n == 0 or done < n:
        k = int(rng.integers(1, min(40, ids.size) + 1))
        pick = sorted(int(w) for w in rng.choice(ids, size=k, replace=False))
        roll = rng.random() if mixed else 1.0
        t0 = time.perf_counter()
        if roll < 0.08:
            bid = p.withdraw(pick, source="map").batch_id
            rec = {"ack": bid, "action": "withdraw", "events": [[w, None] for w in pick]}
        elif roll < 0.12:
            try:
                bid = p.undo().batch_id
            except Exception as exc:  # nothing to undo yet is fine
                if "nothing to undo" not in str(exc):
                    raise
                continue
            rec = {"ack": bid, "action": "undo", "events": None}
        else:
            c = classes[int(rng.integers(len(classes)))]
            bid = p.confirm(pick, c, source=str(rng.choice(["map", "timeline", "queue"]))).batch_id
            rec = {"ack": bid, "action": "confirm", "events": [[w, cid[c]] for w in pick]}
        slowest = max(slowest, time.perf_counter() - t0)
        emit(rec)
        done += 1
    stats = dict(getattr(p.store, "lock_stats", {}) or {})
    emit({"done": done, "slowest_call_s": slowest, "lock_stats": stats})
    p.close()


def zygote(project: str) -> None:
    import labeler.project  # noqa: F401  (imported once; children start in milliseconds)

    emit({"zygote": os.getpid()})
    for line in sys.stdin:
        cmd = line.split()
        if not cmd or cmd[0] == "quit":
            break
        if cmd[0] == "fork":
            seed = int(cmd[1])
            pid = os.fork()
            if pid == 0:
                code = 0
                try:
                    confirm_loop(project, seed, 0, f"writer-{seed % 3}")
                except BaseException:
                    emit({"error": traceback.format_exc()})
                    code = 1
                os._exit(code)
            emit({"child": pid})
            # reap finished children so none stays a zombie
            try:
                while os.waitpid(-1, os.WNOHANG)[0]:
                    pass
            except ChildProcessError:
                pass


def reader(project: str, stopfile: str, hold_s: float = 0.0) -> None:
    """Read in one transaction again and again; every batch seen must be whole."""
    import sqlite3

    from rel_support import read_snapshot

    conn = sqlite3.connect(f"file:{project}?mode=ro", uri=True, isolation_level=None, timeout=30)
    conn.execute("PRAGMA busy_timeout = 30000")
    reads, bad, most, errors = 0, [], 0, []
    last_seen = 0
    while not os.path.exists(stopfile):
        try:
            conn.execute("BEGIN")
            snap = read_snapshot(conn)
            if hold_s:
                time.sleep(hold_s)
                again = read_snapshot(conn)  # same snapshot: nothing may have changed
                if again["batches"] != snap["batches"] or again["events"] != snap["events"]:
                    bad.append("a read transaction saw the data change")
            conn.execute("COMMIT")
        except sqlite3.Error as exc:
            errors.append(str(exc))
            conn.execute("ROLLBACK") if conn.in_transaction else None
            continue
        reads += 1
        n = len(snap["batches"])
        if n < last_seen:
            bad.append(f"batches went from {last_seen} to {n}")
        last_seen = n
        most = max(most, n)
        if snap["partial"]:
            bad.append(f"partial batch {snap['partial'][0]}")
        if snap["orphan_events"]:
            bad.append(f"{snap['orphan_events']} events without their batch")
        if not snap["annotations_ok"] or not snap["current_ok"]:
            bad.append("label tables differ from the replay of the events")
        time.sleep(0.005)  # leave the CPU to the writers between reads
    emit({"reads": reads, "violations": bad[:5], "n_violations": len(bad), "max_batches": most,
          "errors": errors[:5]})


def other(project: str, stopfile: str) -> None:
    """A different kind of write while the confirmers run: proposals when the project has them,
    else adding classes and setting a value, each its own transaction."""
    from labeler.project import Project

    p = Project.open(project, annotator="other")
    refresh = getattr(p, "refresh_proposals", None)
    kind = "refresh_proposals" if callable(refresh) else "classes"
    n, errors, slowest = 0, [], 0.0
    while not os.path.exists(stopfile):
        t0 = time.perf_counter()
        try:
            if kind == "refresh_proposals":
                refresh()
            else:
                p.add_class(f"extra-{os.getpid()}-{n}")
                p.store.set_setting("reliability_marker", n)
        except Exception as exc:
            errors.append(f"{type(exc).__name__}: {exc}")
            if len(errors) > 20:
                break
        slowest = max(slowest, time.perf_counter() - t0)
        n += 1
        if kind == "classes":
            time.sleep(0.01)
    emit({"other": kind, "n": n, "errors": errors[:5], "slowest_call_s": slowest,
          "lock_stats": dict(getattr(p.store, "lock_stats", {}) or {})})
    p.close()


def app_loop(project: str, seed: int, n: int, annotator: str) -> None:
    """The app's own document, driven as a person would: pick windows on the map, press a class
    key. A batch is acknowledged once the page shows it (the key's callback returned)."""
    from bokeh.document import Document

    from labeler.app.document import build_document

    rng = np.random.default_rng(seed)
    app = build_document(Document(), project, annotator)
    ids = {str(name): int(i) for i, name in zip(app.project.classes()["id"],
                                                 app.project.classes()["name"])}
    emit({"ready": os.getpid()})
    done = 0
    while n == 0 or done < n:
        s = app.state
        codes = s.active_codes()
        rows = np.sort(rng.choice(s.n, size=int(rng.integers(1, 20)), replace=False))
        key = int(rng.integers(1, min(9, len(codes)) + 1))
        before = s.last_batch
        app.select_map(rows)
        app.press(str(key))
        if s.last_batch is before or s.last_batch is None:
            emit({"refused": app.message})
            continue
        cid = ids[s.class_names[codes[key - 1]]]
        emit({"ack": s.last_batch.batch_id, "action": "confirm",
              "events": [[int(w), cid] for w in sorted(s.ids[rows].tolist())]})
        done += 1
        while app._pending:  # what the proposal worker handed back, as the next tick would
            app._pending.pop(0)()
    app.drain(120)
    emit({"done": done})
    app.close()


def holder(project: str, seed: int) -> None:
    """Two connections in one process, as the app holds them, confirming when told to."""
    from labeler.project import Project

    rng = np.random.default_rng(seed)
    page = Project.open(project, annotator="holder")
    ids = page.windows()["id"].to_numpy()
    classes = page.active_classes()
    cid = {c: int(i) for i, c in zip(page.classes()["id"], page.classes()["name"])}
    worker = Project.open(project, annotator="holder")  # the proposal worker's connection
    emit({"ready": os.getpid()})
    for line in sys.stdin:
        cmd = line.split()
        if not cmd or cmd[0] == "quit":
            break
        for _ in range(int(cmd[1])):
            pick = sorted(int(w) for w in rng.choice(ids, size=int(rng.integers(1, 20)),
                                                     replace=False))
            c = classes[int(rng.integers(len(classes)))]
            bid = page.confirm(pick, c, source="map").batch_id
            emit({"ack": bid, "action": "confirm", "events": [[w, cid[c]] for w in pick]})
        emit({"round": int(worker.status().confirmed)})  # the worker reads too
    worker.close()
    page.close()
    emit({"closed": os.getpid()})


def main(argv: list[str]) -> None:
    mode, project = argv[0], argv[1]
    try:
        if mode == "confirm":
            annotator = argv[4] if len(argv) > 4 else "writer"
            mixed = not (len(argv) > 5 and argv[5] == "pure")
            confirm_loop(project, int(argv[2]), int(argv[3]), annotator, mixed=mixed)
        elif mode == "zygote":
            zygote(project)
        elif mode == "reader":
            reader(project, argv[2])
        elif mode == "slowread":
            reader(project, argv[2], hold_s=0.3)
        elif mode == "app":
            app_loop(project, int(argv[2]), int(argv[3]), argv[4])
        elif mode == "holder":
            holder(project, int(argv[2]))
        elif mode == "other":
            other(project, argv[2])
        else:
            raise SystemExit(f"unknown mode {mode}")
    except Exception:
        emit({"error": traceback.format_exc()})
        raise SystemExit(1)


if __name__ == "__main__":
    main(sys.argv[1:])
