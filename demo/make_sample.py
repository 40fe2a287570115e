"""Regenerate the committed demo sample (deterministic).

Run from the repository root: python demo/make_sample.py

Writes, next to this file:
- recordings/<name>.csv: one file per picker, column "time" (s from the first sample) then the 12
  sensor channels (wrist_acc_x ... hip_gyr_z, g and deg/s): acceleration to 0.1 mg, angular rate
  to 0.01 deg/s (4-5 significant digits, finer than the simulated sensors' own resolution of about
  0.24 mg and 0.06 deg/s), time to 1 ms (the time stamps jitter by about 2 ms); empty cells are
  dropouts;
- partial_labels.csv: interval labels (recording, start, end, label; seconds from the recording's
  first sample) for a few bouts only, one per activity, spread over the pickers, each trimmed by
  1 s at both ends as a careful annotator would;
- truth/<name>.csv: the ground truth of each recording (recording, start_s, end_s, activity), for
  checking proposals; not for labeling.

The scenario is described in SCENARIO.md.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from labeler.synthetic import BOUT_ACTIVITIES, CHANNELS, simulate_shift

SEED = 36  # a shift in which every activity has a bout long enough to label (checked below)
PEOPLE = 3
MINUTES = 10.0
TRIM_S = 1.0
MIN_BOUT_S = {"climbing": 12.0}  # ladder climbs are short
DEFAULT_MIN_BOUT_S = 20.0

HERE = Path(__file__).resolve().parent


def _fmt(values: np.ndarray, decimals: int) -> list[str]:
    """Fixed decimals without trailing zeros ("0.25", "-1", "" for NaN)."""
    out = []
    for x in values:
        if np.isnan(x):
            out.append("")
            continue
        t = f"{x:.{decimals}f}".rstrip("0").rstrip(".")
        out.append("0" if t in ("-0", "") else t)
    return out


def _write_csv(frame: pd.DataFrame, path: Path) -> None:
    out = pd.DataFrame({"time": _fmt(frame["time"].to_numpy(), 3)})
    for c in CHANNELS:
        # acceleration to 0.1 mg, angular rate to 0.01 deg/s: 4-5 significant digits for most
        # values, below the sensors' own resolution (0.24 mg, 0.06 deg/s)
        out[c] = _fmt(frame[c].to_numpy(np.float64), 4 if "_acc_" in c else 2)
    tmp = path.with_suffix(".csv.tmp")
    out.to_csv(tmp, index=False)
    tmp.replace(path)


def pick_partial_labels(recs) -> pd.DataFrame:
    """One bout per activity: the longest long-enough bout, preferring pickers not used yet."""
    rows, used = [], []
    for activity in BOUT_ACTIVITIES:
        choices = []
        for k, rec in enumerate(recs):
            t = rec.truth
            d = t["end_s"] - t["start_s"]
            ok = (t["activity"] == activity) & (d >= MIN_BOUT_S.get(activity, DEFAULT_MIN_BOUT_S))
            for row in t[ok].itertuples(index=False):
                choices.append((used.count(k), -(row.end_s - row.start_s), k, row))
        if not choices:
            raise SystemExit(f"no bout of {activity!r} long enough to label; change SEED")
        _, _, k, row = min(choices, key=lambda c: c[:3])
        used.append(k)
        rows.append({"recording": recs[k].name, "start": round(row.start_s + TRIM_S, 2),
                     "end": round(row.end_s - TRIM_S, 2), "label": activity})
    return pd.DataFrame(rows).sort_values(["recording", "start"]).reset_index(drop=True)


def main() -> None:
    recs = simulate_shift(PEOPLE, MINUTES * 60.0, seed=SEED)
    (HERE / "recordings").mkdir(exist_ok=True)
    (HERE / "truth").mkdir(exist_ok=True)
    for old in list((HERE / "recordings").glob("*.csv")) + list((HERE / "truth").glob("*.csv")):
        old.unlink()
    total = 0
    for rec in recs:
        path = HERE / "recordings" / f"{rec.name}.csv"
        _write_csv(rec.frame, path)
        truth = rec.truth.copy()
        truth.insert(0, "recording", rec.name)
        truth.to_csv(HERE / "truth" / f"{rec.name}.csv", index=False, float_format="%.2f")
        total += path.stat().st_size
        print(f"{path.relative_to(HERE)}: {len(rec.frame)} rows, "
              f"{path.stat().st_size / 1e6:.1f} MB, activities: "
              + ", ".join(sorted(set(rec.truth["activity"]) - {"transition"})))
    labels = pick_partial_labels(recs)
    labels.to_csv(HERE / "partial_labels.csv", index=False)
    print(f"partial_labels.csv: {len(labels)} intervals")
    print(f"recordings: {total / 1e6:.1f} MB in all")


if __name__ == "__main__":
    main()
