"""Reliability figures: SIGKILL crash runs, 4 x 500 concurrent confirmations, the bad-input corpus.

    python benchmarks/bench_reliability.py [--kills 40] [--batches 500]

Prints figures; asserts nothing (the tests in tests/reliability/ do).
"""

from __future__ import annotations

import argparse
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
    args = ap.parse_args()
    from rel_support import file_state, fresh_project
    from test_concurrency import run_concurrent
    from test_crash import run_kills, verify_acked

    work = Path(tempfile.mkdtemp(prefix="labeler-bench-rel-"))
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


if __name__ == "__main__":
    main()
