"""Reliability figures: SIGKILL crash runs, 4 x 500 concurrent confirmations, the bad-input corpus,
and confirmations acknowledged vs found after each fault (a process holding the file while others
open it, disk full, read-only folder, file busy past the retry bound, the app's process killed
mid-batch, two app processes on one file).

    python benchmarks/bench_reliability.py [--kills 40] [--batches 500] [--app-kills 5]
                                           [--only faults]

Prints figures; asserts nothing (the tests in tests/reliability/ do).
"""

from __future__ import annotations

import argparse
import contextlib
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parents[1] / "tests" / "reliability"
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE / "bad_inputs"))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--kills", type=int, default=40)
    ap.add_argument("--batches", type=int, default=500)
    ap.add_argument("--app-kills", type=int, default=5)
    ap.add_argument("--only", choices=["faults"], default=None)
    args = ap.parse_args()
    from rel_support import file_state, fresh_project
    from test_concurrency import run_concurrent
    from test_crash import run_kills, verify_acked

    work = Path(tempfile.mkdtemp(prefix="labeler-bench-rel-"))
    faults(work, args.app_kills)
    if args.only == "faults":
        return
    p = fresh_project(work, "crash.labeler")
    acked, kills, checks = run_kills(p, n_fresh=3, n_forked=max(0, args.kills - 3), seed=99)
    final, lost = verify_acked(p, acked, checks)
    print(f"crash: kills survived {kills}, batches acknowledged {len(acked)}, lost {len(lost)}, "
          f"batches in file {len(final['batches'])}, partial {len(final['partial'])}")

    p = fresh_project(work, "conc.labeler")
    r = run_concurrent(p, n_writers=4, n_batches=args.batches)
    print(f"concurrency: 4 x {args.batches} batches, written {len(r['acked'])}, lost "
          f"{len(r['lost'])}, errors {len(r['errors'])}, worst lock wait {r['worst_wait_s']:.3f} s, "
          f"retries {r['retries']}, slowest confirm {r['slowest_call_s']:.3f} s, "
          f"elapsed {r['elapsed_s']:.1f} s")
    for k, info in r["side"].items():
        print(f"  {k}: {info['summary']}")

    from click.testing import CliRunner
    from make_corpus import build

    from labeler.cli import cli

    cases = build(work / "corpus")
    tried = clear = changed = repaired = 0
    for c in cases:
        proj = fresh_project(work, "bad.labeler") if not (work / "bad.labeler").exists() else \
            work / "bad.labeler"
        before = file_state(proj)
        cmd = "add" if c["kind"] == "recording" else "import"
        res = CliRunner().invoke(cli, [cmd, str(proj), str(work / "corpus" / c["file"]),
                                       *c["args"]], env={"LABELER_ANNOTATOR": "bench"})
        tried += 1
        if c["expect"] == "repaired":
            repaired += res.exit_code == 0
            (work / "bad.labeler").unlink()
            continue
        lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
        if res.exit_code == 2 and len(lines) == 1 and "Traceback" not in res.output:
            clear += 1
        changed += file_state(proj) != before
    print(f"bad inputs (recording and interval files): tried {tried}, clear one-line errors "
          f"{clear} of {tried - sum(c['expect'] == 'repaired' for c in cases)}, repaired "
          f"{repaired}, project files changed {changed}")


def faults(work: Path, app_kills: int) -> None:
    """Acknowledged vs found after each fault scenario (goal: equal in every one)."""
    import test_faults as tf
    import test_held_file as th
    from rel_support import fresh_project

    def line(name: str, r: dict, extra: str = "") -> None:
        print(f"fault {name}: confirmations acknowledged {r['acknowledged']}, found {r['found']}, "
              f"partial {r['partial']}, integrity {r['integrity']}{extra}")

    folder = work / "held"
    folder.mkdir()
    line("held file, status/propose/export/backup in between", th.run_held(folder))
    for how in ("page-limit", "tmpfs"):
        with tf.scratch_mount(4096) if how == "tmpfs" else _here(work / how) as folder:
            if folder is None:
                print("fault disk full (tmpfs): not run (cannot mount here)")
                continue
            r = tf.run_disk_full(folder, how)
            refused = "refused" if r["refused"] is not None else "never full"
            line(f"disk full ({how}) while full", r["during"], f"; {refused}")
            line(f"disk full ({how}) after space is back", r["after"])
    with tf.read_only_folder(work / "ro-fallback") as made:
        if made is None:
            print("fault read-only folder: not run (cannot make one here)")
        else:
            r = tf.run_read_only_folder(*made)
            line("read-only folder, refused write", r["during"])
            line("read-only folder, writable again", r["after"])
    (work / "busy").mkdir()
    r = tf.run_busy(fresh_project(work / "busy"))
    line("busy past the retry bound", r["during"], f"; refused after {r['waited_s']:.2f} s")
    line("busy, lock released", r["after"])
    (work / "kill").mkdir()
    line(f"app process killed x {app_kills}", tf.run_app_kills(fresh_project(work / "kill"),
                                                               kills=app_kills))
    (work / "two").mkdir()
    r = tf.run_two_apps(fresh_project(work / "two"))
    line("two app processes", r, f"; errors {len(r['errors'])}")


@contextlib.contextmanager
def _here(folder: Path):
    folder.mkdir(parents=True, exist_ok=True)
    yield folder


if __name__ == "__main__":
    main()
