"""Start-up of the everyday commands on a large project: `labeler status`, `queue`, `history`,
`accuracy`.

Builds a project of simulated recordings (the demo scenario, several pickers: 5 x 8 h is about
112k windows), confirms 20 windows of each activity from the simulator's truth in a few batches,
proposes once and asks for the accuracy estimate (so that the graph, the proposals and the
estimate are stored, as after `labeler propose`); a copy of it gets a blind audit of 30 windows
answered from the simulator's truth (so `accuracy` reads the answers too, the slow path before).
Then it runs each command as a new process
(`python -m labeler.cli ...`), best of ``--repeats``. Beside each time it prints the peers: a bare
start of Python (`python -c pass`), Python opening SQLite (`import sqlite3`) and Python with numpy
imported; the CPU time (user + system) of each, which stays near the command's cost when the
shared machine is loaded; how much of the command is spent importing modules (from
``python -X importtime``) and whether numpy, pandas, scipy or scikit-learn were imported. Goal: each
command under 0.5 s.

Run: python benchmarks/bench_cli.py [--recordings 5] [--hours 8] [--repeats 3] [--keep FILE]
(--keep keeps FILE and its audited copy FILE.audited beside it, and reuses them when there)
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

GOAL = 0.5
COMMANDS = (["status"], ["queue"], ["history"], ["accuracy"], ["accuracy", "audited"])
AUDIT = 30
PEERS = (("python -c pass", "pass"), ("python -c 'import sqlite3'", "import sqlite3"),
         ("python -c 'import numpy'", "import numpy"))
HEAVY = ("numpy", "pandas", "scipy", "sklearn", "pyarrow")


def audited(path: Path) -> Path:
    return path.with_name(path.name + ".audited")


def build(path: Path, recordings: int, hours: float) -> int:
    from labeler.project import Project
    from labeler.recordings import recording_from_frame
    from labeler.synthetic import simulate_recording, window_truth

    project = Project.create(path, annotator="bench")
    try:
        truths = {}
        for k in range(recordings):
            sim = simulate_recording(hours * 3600, seed=10 + k, person=k, name=f"picker{k + 1}")
            rec = recording_from_frame(sim.frame, where=f"picker{k + 1}.csv",
                                       content_hash=f"bench-{k}", name=f"picker{k + 1}")
            project.add_recording_data([rec])
            truths[rec.name] = sim.truth
        w = project.windows()
        rng = np.random.default_rng(0)
        for name, truth in truths.items():
            sub = w[w["recording"] == name]
            labels = window_truth(truth, sub["start_s"].to_numpy(), sub["stop_s"].to_numpy())
            for activity in sorted({str(a) for a in labels if a is not None}):
                ids = sub["id"].to_numpy()[labels == activity]
                pick = rng.choice(ids, size=min(4, ids.size), replace=False)
                project.confirm(pick.tolist(), activity, source="cli", create_class=True)
        project.refresh_proposals()
        project.accuracy_estimate()  # stored with the run, as `labeler propose` does
    finally:
        project.close()
    # the copy with a blind audit answered from the truth
    shutil.copyfile(path, audited(path))
    project = Project.open(audited(path), annotator="bench")
    try:
        drawn = project.draw_audit(AUDIT, random_state=0)
        for name, truth in truths.items():
            sub = w[w["recording"] == name].set_index("id")
            ids = drawn.loc[drawn["recording"] == name, "window_id"].to_numpy()
            labels = window_truth(truth, sub.loc[ids, "start_s"].to_numpy(),
                                  sub.loc[ids, "stop_s"].to_numpy())
            for wid, activity in zip(ids, labels):
                if activity is None:  # no activity covers it: the annotator would say so
                    project.answer([int(wid)], "unsure", source="audit")
                else:
                    project.confirm([int(wid)], str(activity), source="audit", create_class=True)
        project.accuracy_estimate()
    finally:
        project.close()
    return len(w)


def run(args: list[str], env: dict) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the process: user + system) of one command."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run([sys.executable, *args], env=env, check=True, stdout=subprocess.DEVNULL,
                   stderr=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def best(args: list[str], env: dict, repeats: int) -> tuple[float, float]:
    """The best wall time and the best CPU time of ``repeats`` runs."""
    runs = [run(args, env) for _ in range(repeats)]
    return min(w for w, _ in runs), min(c for _, c in runs)


def import_seconds(args: list[str], env: dict) -> tuple[float, list[str]]:
    """Seconds a command spends importing modules (the self times of ``-X importtime`` add up),
    and which of the heavy libraries it imported."""
    res = subprocess.run([sys.executable, "-X", "importtime", *args], env=env, check=True,
                         stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    total = sum(int(m.group(1)) for m in re.finditer(r"import time:\s+(\d+) \|", res.stderr)) / 1e6
    # a package counts when any of its modules was imported (one imported through importlib,
    # as labeler.deferred does, has no line of its own for the package)
    heavy = [h for h in HEAVY if re.search(rf"\|\s+{h}(\.\S+)?$", res.stderr, re.M)]
    return total, heavy


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--recordings", type=int, default=5)
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--keep", type=Path, help="build the project here (or reuse it when it exists)")
    args = ap.parse_args()
    env = dict(os.environ, LABELER_ANNOTATOR="bench")
    # as after an install: the modules' bytecode is cached (written by the first run of each
    # command, which is not timed), not compiled from source at every start
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    with tempfile.TemporaryDirectory() as tmp:
        path = args.keep or Path(tmp) / "bench.labeler"
        if not (path.exists() and audited(path).exists()):
            t0 = time.perf_counter()
            n = build(path, args.recordings, args.hours)
            print(f"project: {n} windows ({args.recordings} simulated recordings of {args.hours:g} h), "
                  f"built in {time.perf_counter() - t0:.0f} s")
        else:
            print(f"project: {path} (reused)")
        print(f"load (uptime): {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} "
              f"{os.getloadavg()[2]:.2f} on {os.cpu_count()} cores")
        peers, cpus = {}, {}
        for name, code in PEERS:
            peers[name], cpus[name] = best(["-c", code], env, args.repeats)
            print(f"peer {name:<28} {peers[name]:5.2f} s  (CPU {cpus[name]:.2f} s)")
        bare = peers["python -c pass"]
        for cmd in COMMANDS:
            argv = ["-m", "labeler.cli", cmd[0], str(audited(path) if "audited" in cmd else path)]
            run(argv, env)  # writes the bytecode cache
            wall, cpu = best(argv, env, args.repeats)
            imp, heavy = import_seconds(argv, env)
            print(f"labeler {' '.join(cmd):<17} {wall:5.2f} s  (CPU {cpu:.2f} s; imports {imp:.2f} s, "
                  f"heavy: {', '.join(heavy) or 'none'}; {wall / bare:.1f}x python -c pass, "
                  f"{wall / peers[PEERS[1][0]]:.1f}x import sqlite3; goal < {GOAL} s: "
                  f"{'met' if wall < GOAL else 'MISSED'})")
        print("CPU: user + system time of the command's process; on a loaded machine it stays "
              "near what the command costs, while the wall time grows with the load")


if __name__ == "__main__":
    main()
