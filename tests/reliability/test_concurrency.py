"""Concurrency: several processes confirm batches on one project file at once.

Four writer processes each confirm N batches (random windows, random classes) while

- one more process writes something else (refreshes proposals when ``Project.refresh_proposals``
  exists, else adds classes and sets a value, one transaction each),
- one reader repeatedly reads everything inside one read transaction and checks every batch it sees
  is whole and the label tables equal the replay of the events,
- one slow reader holds each read transaction open for 0.3 s and checks nothing changes under it.

Every batch must be present, no error (such as "database is locked") may reach a writer, and no reader
may see a half-applied batch. The worst wait for the write lock is reported (benchmark) and bounded
loosely here (a stuck lock would take the 30 s busy timeout).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

from rel_support import HERE, check_project, fresh_project, worker_env

WRITER = str(HERE / "writer.py")


def _start(args, env):
    return subprocess.Popen([sys.executable, WRITER, *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, env=env)


def _lines(proc, timeout):
    out, err = proc.communicate(timeout=timeout)
    objs = []
    for raw in out.splitlines():
        try:
            objs.append(json.loads(raw))
        except ValueError:
            pass
    return objs, err.decode(errors="replace"), proc.returncode


def run_concurrent(project: Path, n_writers: int = 4, n_batches: int = 125, seed: int = 7,
                   timeout: float = 600) -> dict:
    """Run the writers, the other writer and two readers; return what they reported."""
    env = worker_env()
    stop = Path(f"{project}.stop")
    stop.unlink(missing_ok=True)
    side = {"reader": _start(["reader", project, stop], env),
            "slowread": _start(["slowread", project, stop], env),
            "other": _start(["other", project, stop], env)}
    t0 = time.perf_counter()
    writers = [_start(["confirm", project, seed + i, n_batches, f"writer-{i}", "pure"], env)
               for i in range(n_writers)]
    results = [_lines(w, timeout) for w in writers]
    elapsed = time.perf_counter() - t0
    stop.touch()
    side_results = {k: _lines(p, 120) for k, p in side.items()}
    acked, errors, done, worst_wait, retries, slowest = [], [], [], 0.0, 0, 0.0
    for objs, err, rc in results:
        acked += [o for o in objs if "ack" in o]
        errors += [o["error"] for o in objs if "error" in o]
        if rc != 0 and not any("error" in o for o in objs):
            errors.append(err.strip().splitlines()[-1] if err.strip() else f"exit {rc}")
        for o in objs:
            if "done" in o:
                done.append(o["done"])
                worst_wait = max(worst_wait, o["lock_stats"].get("worst_wait_s", 0.0))
                retries += o["lock_stats"].get("retries", 0)
                slowest = max(slowest, o["slowest_call_s"])
    side_info = {}
    for k, (objs, err, rc) in side_results.items():
        summary = next((o for o in objs if "reads" in o or "other" in o), None)
        failed = [o["error"] for o in objs if "error" in o]
        if rc != 0 and not failed:
            failed = [err.strip().splitlines()[-1] if err.strip() else f"exit {rc}"]
        side_info[k] = {"summary": summary, "errors": failed}
    snap = check_project(project)
    lost = [a["ack"] for a in acked if a["ack"] not in snap["batches"]]
    wrong = [a["ack"] for a in acked if a["ack"] in snap["batches"]
             and [list(e) for e in snap["events"].get(a["ack"], [])] != a["events"]]
    return {"acked": acked, "errors": errors, "done": done, "elapsed_s": elapsed,
            "worst_wait_s": worst_wait, "retries": retries, "slowest_call_s": slowest,
            "side": side_info, "snapshot": snap, "lost": lost, "wrong": wrong}


def test_four_writers_one_file_nothing_lost_no_lock_error(tmp_path):
    project = fresh_project(tmp_path)
    n = 125  # 4 x 500 runs in benchmarks/bench_reliability.py
    r = run_concurrent(project, n_writers=4, n_batches=n)
    assert r["errors"] == [], r["errors"][0]
    assert r["done"] == [n] * 4
    assert len(r["acked"]) == 4 * n
    assert r["lost"] == [] and r["wrong"] == []
    snap = r["snapshot"]
    confirms = [b for b, info in snap["batches"].items()
                if info["action"] == "confirm" and info["annotator"].startswith("writer-")]
    assert len(confirms) == 4 * n
    assert snap["partial"] == [] and snap["orphan_events"] == 0
    assert snap["replay_ok"] and snap["integrity"] == "ok"
    for k in ("reader", "slowread", "other"):
        info = r["side"][k]
        assert info["errors"] == [], f"{k}: {info['errors'][0]}"
        assert info["summary"] is not None, f"{k} reported nothing"
    for k in ("reader", "slowread"):
        s = r["side"][k]["summary"]
        assert s["errors"] == [] and s["n_violations"] == 0, s
        assert s["reads"] > 0
    assert r["side"]["reader"]["summary"]["reads"] >= 5
    assert r["side"]["other"]["summary"]["errors"] == []
    assert r["side"]["other"]["summary"]["n"] > 0
    # a writer that waited anywhere near the 30 s busy timeout means the lock was held far too long
    assert r["worst_wait_s"] < 10.0
