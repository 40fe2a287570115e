"""Writes the corpus of malformed recording and interval-label files, and ``cases.json``.

The corpus is generated (deterministically: fixed seeds) into a folder by :func:`build`; the tests
build it into a temporary folder. ``python tests/reliability/bad_inputs/make_corpus.py DEST`` writes it
to DEST to look at. Each case in cases.json says

- ``kind``: ``recording`` (given to ``labeler add``) or ``intervals`` (given to ``labeler import``);
- ``file``: the path under this folder; ``args``: extra command-line arguments;
- ``expect``: ``error`` (exit 2, one line naming the file) or ``repaired`` (accepted; the repair is
  reported); ``mentions``: words the one line must contain (the row, the column, the value);
- ``why``: what is wrong with the file.

Intervals refer to the recordings ``worker1`` and ``worker2`` (60 s each) of the reliability tests'
template project. Cases of project files and command-line options are built by the test itself, since
they depend on the current schema.
"""

from __future__ import annotations

import gzip
import io
import json
import random
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
CHANNELS = [f"{s}_{k}_{a}" for s in ("wrist", "hip") for k in ("acc", "gyr") for a in "xyz"]


def table(n: int = 500, rate: float = 50.0, seed: int = 3, time: bool = True) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    data = {"time": np.round(t, 6)} if time else {}
    for c in CHANNELS:
        scale = 0.3 if "_acc_" in c else 40.0
        data[c] = np.round(scale * np.sin(2 * np.pi * 1.3 * t + len(c)) + rng.normal(0, scale / 10, n)
                           + (1.0 if c.endswith("acc_z") else 0.0), 5)
    return pd.DataFrame(data)


def csv_text(frame: pd.DataFrame, sep: str = ",") -> str:
    return frame.to_csv(index=False, sep=sep, lineterminator="\n")


def build(dest: Path) -> list[dict]:
    dest = Path(dest)
    rec = dest / "recordings"
    ivs = dest / "intervals"
    for folder in (rec, ivs):
        folder.mkdir(parents=True, exist_ok=True)
        for old in folder.iterdir():
            old.unlink()
    cases: list[dict] = []

    def add(kind, name, content, expect="error", mentions=(), args=(), why=""):
        folder = rec if kind == "recording" else ivs
        path = folder / name
        if isinstance(content, str):
            path.write_bytes(content.encode("utf-8"))
        else:
            path.write_bytes(content)
        cases.append({"kind": kind, "file": f"{folder.name}/{name}", "args": list(args),
                      "expect": expect, "mentions": list(mentions), "why": why})

    good = table()
    header = ",".join(good.columns) + "\n"
    text = csv_text(good)
    lines = text.splitlines(keepends=True)

    # ---------------------------------------------------------------- recordings
    add("recording", "empty.csv", b"", mentions=["empty"], why="zero bytes")
    add("recording", "header_only.csv", header, mentions=["header only"], why="no samples")
    rnd = random.Random(11)
    add("recording", "binary_junk.csv", bytes(rnd.randrange(256) for _ in range(5000)),
        mentions=["binary"], why="random bytes with NULs")
    add("recording", "gzipped.csv", gzip.compress(text.encode()), expect="repaired",
        mentions=["gzip"], why="a gzip file named .csv: read by its content")
    add("recording", "latin1.csv", (header.replace("time", "zeit") .replace("zeit", "time")
                                    + "".join(lines[1:40])).encode("utf-8")
        + "1.0,é,0,0,0,0,0,0,0,0,0,0,0\n".encode("latin-1"), mentions=["UTF-8"],
        why="a Latin-1 byte in a UTF-8 file")
    add("recording", "pipe_delimited.csv", csv_text(good, sep="|"), mentions=["no sensor channel"],
        why="fields separated by |, which the reader does not guess")
    add("recording", "bom.csv", b"\xef\xbb\xbf" + text.encode(), expect="repaired",
        mentions=["byte-order mark"], why="UTF-8 byte-order mark")
    add("recording", "semicolons.csv", csv_text(good, sep=";"), expect="repaired",
        mentions=["semicolon"], why="semicolon-separated")
    add("recording", "tabs.tsv", csv_text(good, sep="\t"), expect="repaired", mentions=["tab"],
        why="tab-separated")
    add("recording", "semicolons_bom.csv", b"\xef\xbb\xbf" + csv_text(table(seed=4), sep=";").encode(),
        expect="repaired", mentions=["byte-order mark", "semicolon"], why="BOM and semicolons")
    bad = good.astype(object)
    bad.loc[55, "wrist_acc_y"] = "abc"
    add("recording", "non_numeric_cell.csv", csv_text(bad), mentions=["row 57", "wrist_acc_y", "abc"],
        why="text in a numeric column")
    bad = good.astype(object)
    bad.loc[10, "hip_gyr_x"] = "1,5"
    add("recording", "decimal_comma.csv", csv_text(bad), mentions=["row"],
        why="a decimal comma splits a row into one field too many")
    bad = good.copy()
    bad["hip_gyr_z"] = np.nan
    add("recording", "nan_only_channel.csv", csv_text(bad), mentions=["hip_gyr_z", "no values"],
        why="a channel with no values at all")
    bad = good.copy()
    bad.loc[200:, "time"] = bad.loc[200:, "time"] - 5.0
    add("recording", "time_backwards.csv", csv_text(bad), mentions=["row 202", "backwards"],
        why="the clock jumps back 5 s")
    bad = good.copy()
    bad.loc[300, "time"] = bad.loc[299, "time"]
    add("recording", "duplicate_timestamp.csv", csv_text(bad), mentions=["row 302", "duplicate"],
        why="two rows with one time")
    bad = good.copy()
    bad.loc[[40, 41], "time"] = np.nan
    add("recording", "missing_time.csv", csv_text(bad), mentions=["row 42", "time"],
        why="empty time cells")
    notime = csv_text(table(time=False))
    add("recording", "no_time_rate_zero.csv", notime, args=["--rate", "0"],
        mentions=["rate"], why="no time column and a rate of 0 Hz")
    add("recording", "no_time_rate_negative.csv", csv_text(table(time=False, seed=5)),
        args=["--rate", "-50"], mentions=["rate"], why="a negative rate")
    add("recording", "no_time_no_rate.csv", csv_text(table(time=False, seed=6)),
        mentions=["--rate"], why="no time column and no rate")
    bad = good.copy()
    bad["time"] = np.round(bad["time"] * 1000.0, 3)
    add("recording", "time_in_ms.csv", csv_text(bad), mentions=["time", "step"],
        why="milliseconds where seconds are expected (0.05 Hz)")
    bad = good.copy()
    bad["time"] = 0.0
    add("recording", "time_constant.csv", csv_text(bad), mentions=["row 3", "duplicate"],
        why="one time for every row (a rate of zero)")
    bad = good.copy()
    bad.loc[350, "wrist_acc_x"] = 5000.0
    add("recording", "absurd_value.csv", csv_text(bad), mentions=["row 352", "wrist_acc_x", "5000"],
        why="5000 g")
    bad = good.astype(object)
    bad.loc[420, "hip_acc_z"] = "inf"
    add("recording", "infinite_value.csv", csv_text(bad), mentions=["row 422", "hip_acc_z"],
        why="an infinite value")
    bad = good.copy()
    bad.loc[450:, "time"] = bad.loc[450:, "time"] + 1e9
    add("recording", "time_jump_absurd.csv", csv_text(bad), mentions=["row 452", "time"],
        why="the clock jumps 30 years ahead (would need a grid of 5e10 samples)")
    iso = good.copy()
    iso["time"] = (pd.Timestamp("2026-09-14T06:30:00Z") + pd.to_timedelta(iso["time"], unit="s")) \
        .dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ").astype(object)
    iso.loc[77, "time"] = "2026-09-14T06:99:00Z"
    add("recording", "bad_iso_time.csv", csv_text(iso), mentions=["row 79", "ISO-8601"],
        why="a minute of 99")
    add("recording", "short_recording.csv", csv_text(table(n=60, seed=7)),
        mentions=["no window"], why="1.2 s, shorter than one 2.56 s window")
    add("recording", "unknown_unit.csv", text.replace("wrist_acc_x", "wrist_acc_x[furlong/s2]", 1),
        mentions=["wrist_acc_x[furlong/s2]", "unit"], why="a unit that is not known")
    add("recording", "unknown_kind.csv", text.replace("hip_gyr_y", "hip_mag_y", 1),
        mentions=["hip_mag_y", "kind"], why="a sensor kind that is not known")
    add("recording", "no_sensor_columns.csv", "a,b,c\n1,2,3\n4,5,6\n", mentions=["no sensor channel"],
        why="no column follows the channel convention")
    add("recording", "jagged_rows.csv", "".join(lines[:100]) + "1.0,2.0\n" + "".join(lines[100:200])
        + "9,9,9,9,9,9,9,9,9,9,9,9,9,9,9,9\n", mentions=["row"], why="rows with too many fields")
    add("recording", "single_sample.csv", "".join(lines[:2]), mentions=["single sample"],
        why="one row")
    add("recording", "blank_first_line.csv", "\n" + text, expect="repaired",
        mentions=["skipped 1 line(s) before the column names on line 2"],
        why="an empty first line before the header: skipped, with a note")
    add("recording", "blank_lines_only.csv", "\n\n\n", mentions=["line 1", "empty"],
        why="only empty lines")
    add("recording", "duplicate_column.csv", text.replace("hip_acc_x", "wrist_acc_x", 1),
        mentions=["wrist_acc_x"], why="one channel twice")
    buf = io.BytesIO()
    good.to_parquet(buf, index=False)
    raw = buf.getvalue()
    add("recording", "truncated.parquet", raw[: len(raw) // 2], mentions=["Parquet"],
        why="a Parquet file cut in half")
    add("recording", "parquet_named_csv.csv", raw[: len(raw) // 3],
        mentions=["Parquet"], why="a cut Parquet file with a .csv name")
    buf = io.BytesIO()
    good.iloc[:0].to_parquet(buf, index=False)
    add("recording", "empty_rows.parquet", buf.getvalue(), mentions=["header only"],
        why="a Parquet file with the columns and no rows")
    buf = io.BytesIO()
    pbad = good.astype({"wrist_gyr_x": object})
    pbad["wrist_gyr_x"] = pbad["wrist_gyr_x"].astype(str)
    pbad.loc[12, "wrist_gyr_x"] = "n/a"
    pbad.to_parquet(buf, index=False)
    add("recording", "text_column.parquet", buf.getvalue(), mentions=["row 14", "wrist_gyr_x"],
        why="a text cell in a Parquet column")
    bad = good.astype(object)
    bad.loc[33, "hip_acc_y"] = "x"
    odd = "shift 'A' \"night\" ünïcødé [1] (copy).csv"
    add("recording", odd, csv_text(bad), mentions=["row 35", "hip_acc_y"],
        why="spaces, quotes, brackets and unicode in the file name (and a bad cell)")
    add("recording", "name with spaces;and$dollar.csv", text.replace("wrist_gyr_z", "wrist_gyr_w", 1),
        mentions=["wrist_gyr_w", "axis"], why="odd file name, and an unknown axis")

    # ---------------------------------------------------------------- device files
    add("recording", "device.csv.gz", gzip.compress(text.encode()), expect="repaired",
        mentions=["gzip"], why="gzip-compressed CSV")
    add("recording", "cut_short.csv.gz", gzip.compress(text.encode())[:900],
        mentions=["gzip", "again"], why="a gzip file cut short")
    add("recording", "preamble.csv", "Device: orchard band v2\nSerial: 0042\n" + text,
        expect="repaired", mentions=["skipped 2 line(s)", "--skip-rows 2"],
        why="two lines of device information before the column names")
    add("recording", "preamble_skip_too_many.csv", "Serial: 0042\n" + text,
        args=["--skip-rows", "900"], mentions=["--skip-rows 900"],
        why="--skip-rows beyond the end of the file")
    epoch = good.copy()
    epoch["time"] = 1_789_367_400_000 + np.arange(len(epoch)) * 20
    add("recording", "epoch_ms.csv", csv_text(epoch), expect="repaired",
        mentions=["Unix time in ms", "--time-unit ms"], why="Unix time in milliseconds")
    add("recording", "epoch_ms_with_rate.csv", csv_text(epoch.assign(time=epoch["time"] + 7)),
        args=["--rate", "50"], expect="repaired", mentions=["Unix time in ms"],
        why="Unix time in ms with the nominal --rate: accepted, never a --rate that fails")
    rel_ms = good.copy()
    rel_ms["time"] = np.arange(len(rel_ms)) * 20
    add("recording", "relative_ms_with_rate.csv", csv_text(rel_ms), args=["--rate", "50"],
        mentions=["--rate says 50 Hz", "--time-unit ms"],
        why="milliseconds from the start, given with --rate 50")
    add("recording", "seconds_said_ms.csv", text, args=["--time-unit", "ms"],
        mentions=["time step 0.02 ms", "--time-unit s"], why="seconds declared as milliseconds")
    clock = good.copy()
    clock["time"] = (pd.Timestamp("2026-09-14T06:30:00") + pd.to_timedelta(clock["time"], unit="s")) \
        .dt.strftime("%Y-%m-%dT%H:%M:%S.%f")
    add("recording", "iso_without_zone.csv", csv_text(clock), mentions=["without a zone", "--tz"],
        why="clock times without a zone: never taken as UTC silently")
    add("recording", "iso_without_zone_tz.csv", csv_text(clock.assign(
        wrist_acc_x=clock["wrist_acc_x"] + 0.001)), args=["--tz", "Europe/Vienna"],
        expect="repaired", mentions=[], why="clock times without a zone and --tz")
    mixed = good.copy()
    mixed["time"] = (pd.Timestamp("2026-09-14T06:30:00Z") + pd.to_timedelta(mixed["time"], unit="s")) \
        .dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ").astype(object)
    mixed.loc[100, "time"] = mixed.loc[100, "time"][:-1]
    add("recording", "iso_mixed_zone.csv", csv_text(mixed), mentions=["row 102", "zone"],
        why="one time without the zone the others have")
    dst = good.copy()
    dst["time"] = (pd.Timestamp("2026-03-29T02:10:00") + pd.to_timedelta(dst["time"], unit="s")) \
        .dt.strftime("%Y-%m-%d %H:%M:%S.%f")
    add("recording", "dst_gap.csv", csv_text(dst), args=["--tz", "Europe/Vienna"],
        mentions=["row 2", "daylight-saving"], why="clock times in the hour a spring change skips")
    dayfirst = good.copy()
    dayfirst["time"] = (pd.Timestamp("2026-09-14T06:30:00") + pd.to_timedelta(dayfirst["time"], unit="s")) \
        .dt.strftime("%d/%m/%Y %H:%M:%S.%f")
    add("recording", "day_first.csv", csv_text(dayfirst),
        mentions=["row 2", "--time-format '%d/%m/%Y %H:%M:%S.%f'"],
        why="dd/mm/yyyy clock times")
    add("recording", "day_first_wrong_layout.csv", csv_text(dayfirst.assign(
        hip_acc_x=dayfirst["hip_acc_x"] + 0.001)), args=["--time-format", "%m/%d/%Y %H:%M:%S.%f",
                                                          "--tz", "UTC"],
        mentions=["row 2", "does not match --time-format"], why="a layout that does not fit")
    add("recording", "day_first_right_layout.csv", csv_text(dayfirst.assign(
        hip_acc_x=dayfirst["hip_acc_x"] + 0.002)), args=["--time-format", "%d/%m/%Y %H:%M:%S.%f",
                                                          "--tz", "Europe/Vienna"],
        expect="repaired", mentions=[], why="dd/mm/yyyy with its layout and zone")
    acc_cols = [c for c in good.columns if "_acc_" in c]
    mps2 = good.copy()
    mps2[acc_cols] = mps2[acc_cols] * 9.80665
    add("recording", "mps2_unstated.csv", csv_text(mps2), expect="repaired",
        mentions=["as m/s2", "--acc-unit m/s2"], why="m/s² without a unit: level 9.8, read as m/s²")
    add("recording", "mps2_stated_g.csv", csv_text(mps2.assign(time=mps2["time"] + 1)),
        args=["--acc-unit", "g"], mentions=["--acc-unit m/s2"],
        why="m/s² where --acc-unit says g")
    mg = good.copy()
    mg[acc_cols] = mg[acc_cols] * 1000.0
    add("recording", "mg_header_says_g.csv", csv_text(mg.rename(columns={
        c: c + "[g]" for c in acc_cols})), mentions=["wrist_acc_x[g]", "[mg]"],
        why="milli-g in columns whose names say g")
    counts = good.copy()
    counts[acc_cols] = np.round(counts[acc_cols] * 4096.0 * 3.1)
    add("recording", "raw_counts.csv", csv_text(counts), mentions=["far from 1 g", "raw counts"],
        why="raw sensor counts, no unit fits")
    scaled = good.copy()
    scaled[acc_cols] = scaled[acc_cols] * 2.5
    add("recording", "scale_off.csv", csv_text(scaled), mentions=["far from 1 g", "--acc-unit"],
        why="2.5 g at rest: a scale error, no unit fits; stating the unit keeps it")
    device = good.rename(columns={"wrist_acc_x": "accel_x", "wrist_acc_y": "accel_y",
                                  "wrist_acc_z": "accel_z"})
    add("recording", "mapped_columns.csv", csv_text(device), expect="repaired", mentions=[],
        args=["--column", "accel_x=wrist_acc_x,accel_y=wrist_acc_y", "--column",
              "accel_z=wrist_acc_z"], why="device column names mapped to channels")
    add("recording", "mapping_missing_column.csv", csv_text(device.assign(time=device["time"] + 2)),
        args=["--column", "ax=wrist_acc_x"], mentions=["'ax'", "--column ax=wrist_acc_x"],
        why="a mapping from a column the file does not have")
    add("recording", "wrist_only.csv", csv_text(good[["time"] + [c for c in good.columns
                                                              if c.startswith("wrist")]]),
        mentions=["lacks the project's channels", "hip_acc_x", "--column"],
        why="fewer channels than the project's recordings")
    add("recording", "extra_site.csv", csv_text(good.assign(
        ankle_acc_x=0.1, ankle_acc_y=0.2, ankle_acc_z=0.97)), expect="repaired",
        mentions=["left out channels the project does not have: ankle_acc_x"],
        why="more channels than the project's: the shared ones are kept")
    buf = io.BytesIO()
    naive = good.copy()
    naive["time"] = pd.Timestamp("2026-09-14T06:30:00") + pd.to_timedelta(naive["time"], unit="s")
    naive.to_parquet(buf, index=False)
    add("recording", "naive_timestamps.parquet", buf.getvalue(), mentions=["--tz"],
        why="Parquet timestamps without a zone")

    # ---------------------------------------------------------------- interval-label files
    ok_rows = "worker1,0,10,walking\nworker2,5,20,sitting\n"
    hdr = "recording,start,end,label\n"
    add("intervals", "empty.csv", b"", mentions=["empty"], why="zero bytes")
    add("intervals", "header_only.csv", hdr, mentions=["header only"], why="no intervals")
    add("intervals", "binary_junk.csv", bytes(rnd.randrange(256) for _ in range(3000)),
        mentions=[], why="random bytes")
    add("intervals", "latin1.csv", (hdr + "worker1,0,10,").encode() + "marché\n".encode("latin-1"),
        mentions=["UTF-8"], why="Latin-1 text")
    add("intervals", "missing_label_column.csv", "recording,start,end\nworker1,0,10\n",
        mentions=["label"], why="no label column")
    add("intervals", "unknown_column.csv", "recording,start,end,label,colour\nworker1,0,10,walking,red\n",
        mentions=["colour"], why="a column that is not known")
    add("intervals", "start_not_number.csv", hdr + ok_rows + "worker1,ten,20,walking\n",
        mentions=["row 4", "ten"], why="a start that is not a number")
    add("intervals", "end_before_start.csv", hdr + "worker1,30,20,walking\n",
        mentions=["row 2", "end"], why="end before start")
    add("intervals", "negative_start.csv", hdr + ok_rows + "worker2,-5,3,walking\n",
        mentions=["row 4", "start"], why="a negative start")
    add("intervals", "infinite_end.csv", hdr + "worker1,0,inf,walking\n", mentions=["row 2"],
        why="an infinite end")
    add("intervals", "unknown_recording.csv", hdr + ok_rows + "worker9,0,10,walking\n",
        mentions=["row 4", "worker9"], why="a recording not in the project")
    add("intervals", "path_as_recording.csv", hdr + "../../../etc/passwd,0,10,walking\n",
        mentions=["row 2", "../../../etc/passwd"],
        why="a path where a recording name belongs: names are looked up, never opened")
    add("intervals", "start_past_end.csv", hdr + "worker1,500,510,walking\n",
        mentions=["row 2", "worker1"], why="an interval after the end of the recording")
    add("intervals", "overlap_conflict.csv", hdr + "worker1,0,10,walking\nworker1,5,15,sitting\n",
        mentions=["rows 2 and 3"], why="overlapping intervals with different labels")
    add("intervals", "label_too_long.csv", hdr + "worker1,0,10," + "x" * 80 + "\n",
        mentions=["row 2", "label"], why="a class name of 80 characters")
    add("intervals", "label_control_char.csv", hdr + "worker1,0,10,walk\x07ing\n",
        mentions=["row 2", "label"], why="a control character in a class name")
    add("intervals", "annotator_control_char.csv",
        "recording,start,end,label,annotator\nworker1,0,10,walking,ann\x1bie\n",
        mentions=["row 2", "annotator"], why="a control character in an annotator name")
    add("intervals", "empty_recording_cell.csv", hdr + ",0,10,walking\n",
        mentions=["row 2", "recording"], why="no recording name")
    add("intervals", "semicolons.csv", "recording;start;end;label\nworker1;0;10;walking\n",
        mentions=[], why="semicolon-separated (one unknown column)")
    add("intervals", "jagged.csv", hdr + "worker1,0,10,walking,extra,more\n", mentions=[],
        why="a row with more fields than the header")
    add("intervals", "clock_on_seconds_recording.csv",
        hdr + "worker1,2026-09-14T06:30:10Z,2026-09-14T06:30:20Z,walking\n",
        mentions=["row 2", "no clock"], why="clock times for a recording whose file gave seconds")
    add("intervals", "clock_and_seconds_mixed.csv", hdr + "worker1,2026-09-14T06:30:10Z,20,walking\n",
        mentions=["row 2", "'end'", "'20'"], why="one end a clock time, the other seconds")
    add("intervals", "bom_ok.csv", b"\xef\xbb\xbf" + (hdr + ok_rows).encode(), expect="repaired",
        mentions=[], why="a byte-order mark (accepted)")

    (dest / "cases.json").write_text(json.dumps(cases, indent=1, ensure_ascii=False) + "\n",
                                     encoding="utf-8")
    return cases


if __name__ == "__main__":
    import sys

    if len(sys.argv) != 2:
        raise SystemExit("usage: make_corpus.py DEST_FOLDER")
    made = build(Path(sys.argv[1]))
    print(f"wrote {len(made)} cases to {sys.argv[1]}")
