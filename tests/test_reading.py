"""Reading device files: column mapping, device profiles, time units and zones, gzip, preambles, the
level-at-rest check of acceleration units, and `labeler add --dry-run`. Each refusal is checked with
its exact message."""

import gzip
import json
from datetime import datetime
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from labeler.channels import STANDARD_GRAVITY
from labeler.cli import cli
from labeler.errors import InputError
from labeler.gravity import judge_level, rest_level
from labeler.profiles import ReadOptions, load_profile, parse_column_options, save_profile
from labeler.recordings import read_recording
from conftest import sensor_frame

ACC = [f"{s}_acc_{a}" for s in ("wrist", "hip") for a in "xyz"]


def refusal(path, **kw) -> str:
    with pytest.raises(InputError) as err:
        read_recording(path, **kw)
    text = str(err.value)
    assert "\n" not in text
    return text


# ------------------------------------------------------------------ time units
def test_unix_milliseconds_are_found_and_noted(write_csv):
    frame = sensor_frame(600)
    truth = frame.copy()
    # 2026-09-14T06:30:00Z as Unix time: 1789367400 s (computed with Python's datetime below)
    start = int(datetime(2026, 9, 14, 6, 30, tzinfo=ZoneInfo("UTC")).timestamp())
    assert start == 1_789_367_400
    frame["time"] = start * 1000 + np.arange(600) * 20
    rec = read_recording(write_csv(frame))
    assert rec.rate == 50.0 and rec.n_samples == 600
    assert rec.start_time == "2026-09-14T06:30:00.000000Z"
    assert rec.notes == ["read column 'time' as Unix time in ms (from its size and step); say so "
                         "with --time-unit ms to silence this"]
    assert rec.found == {"time_unit": "ms"}
    np.testing.assert_allclose(rec.signal[:, 0], truth["wrist_acc_x"], rtol=1e-6, atol=1e-6)
    # the nominal rate may be given too: it agrees with the found unit (never advised, then refused)
    assert read_recording(write_csv(frame, "b.csv"), rate=50.0).rate == 50.0


@pytest.mark.parametrize("unit, factor", [("ms", 1e3), ("us", 1e6), ("ns", 1e9)])
def test_time_units_given(write_csv, unit, factor):
    frame = sensor_frame(300)
    frame["time"] = (frame["time"] * factor).round().astype(np.int64)
    rec = read_recording(write_csv(frame), time_unit=unit)
    assert rec.rate == 50.0 and rec.n_samples == 300 and rec.notes == []
    assert rec.time_read == f"column 'time': {dict(ms='milliseconds', us='microseconds', ns='nanoseconds')[unit]} from any origin"


def test_milliseconds_from_zero_ask_for_the_unit(write_csv):
    frame = sensor_frame(300).assign(time=np.arange(300) * 20)
    path = write_csv(frame)
    assert refusal(path) == (f"{path}: column 'time': median time step 20 s is not a sampling rate "
                             "(0.05 Hz); if the time is in milliseconds, give --time-unit ms")
    assert refusal(path, rate=50.0) == (
        f"{path}: column 'time': samples come every 20 s (0.05 Hz) but --rate says 50 Hz; if the "
        "time is in milliseconds, give --time-unit ms")
    assert read_recording(path, time_unit="ms", rate=50.0).rate == 50.0


def test_seconds_declared_as_milliseconds(write_csv):
    path = write_csv(sensor_frame(300))
    assert refusal(path, time_unit="ms") == (
        f"{path}: column 'time': median time step 0.02 ms is not a sampling rate (5e+04 Hz); if the "
        "time is in seconds, give --time-unit s")


# ------------------------------------------------------------------ clock times and zones
def _clock(frame, start="2026-09-14T06:30:00", layout="%Y-%m-%dT%H:%M:%S.%f"):
    return frame.assign(time=(pd.Timestamp(start) + pd.to_timedelta(frame["time"], unit="s"))
                        .dt.strftime(layout))


def test_zoneless_clock_times_are_never_utc_silently(write_csv):
    path = write_csv(_clock(sensor_frame(300)))
    assert refusal(path) == (
        f"{path}: column 'time': clock times without a zone (row 2: '2026-09-14T06:30:00.000000'); "
        "give the zone they were written in with --tz, e.g. --tz Europe/Vienna or --tz UTC")
    rec = read_recording(path, tz="Europe/Vienna")
    # Vienna keeps summer time (UTC+2) in September: the IANA zone database, read through Python's
    # zoneinfo, is the reference
    expected = datetime(2026, 9, 14, 6, 30, tzinfo=ZoneInfo("Europe/Vienna")).astimezone(ZoneInfo("UTC"))
    assert rec.start_time == expected.strftime("%Y-%m-%dT%H:%M:%S.%fZ") == "2026-09-14T04:30:00.000000Z"
    assert read_recording(path, tz="UTC").start_time == "2026-09-14T06:30:00.000000Z"
    assert rec.time_read == "column 'time': ISO-8601 clock times in Europe/Vienna (--tz)"


def test_clock_times_with_offsets_are_converted_to_utc(write_csv):
    frame = _clock(sensor_frame(300), layout="%Y-%m-%dT%H:%M:%S.%f+02:00")
    rec = read_recording(write_csv(frame), tz="America/Chicago")  # the file's zone wins
    assert rec.start_time == "2026-09-14T04:30:00.000000Z" and rec.rate == 50.0


def test_a_time_without_the_zone_the_others_have(write_csv):
    frame = _clock(sensor_frame(300), layout="%Y-%m-%dT%H:%M:%S.%fZ")
    frame.loc[40, "time"] = frame.loc[40, "time"][:-1]
    path = write_csv(frame)
    assert refusal(path) == (f"{path}: row 42, column 'time': '2026-09-14T06:30:00.800000' has no "
                             "zone while row 2 has one; write every time with its zone (Z or +02:00)")


def test_daylight_saving_gap_is_refused(write_csv):
    # 2026-03-29 is the last Sunday of March: clocks in the EU go from 02:00 to 03:00 (EU summer-time
    # rule, Directive 2000/84/EC); 02:10 does not exist in Vienna
    path = write_csv(_clock(sensor_frame(300), start="2026-03-29T02:10:00"))
    assert refusal(path, tz="Europe/Vienna") == (
        f"{path}: row 2, column 'time': '2026-03-29T02:10:00.000000' does not exist or is ambiguous "
        "in Europe/Vienna (a daylight-saving change); write the times with their offset, e.g. +02:00")


def test_day_first_times_need_their_layout(write_csv):
    frame = _clock(sensor_frame(300), layout="%d/%m/%Y %H:%M:%S.%f")
    path = write_csv(frame)
    assert refusal(path) == (
        f"{path}: row 2, column 'time': '14/09/2026 06:30:00.000000' is not ISO-8601; give its layout "
        "with --time-format, e.g. --time-format '%d/%m/%Y %H:%M:%S.%f'")
    assert refusal(path, time_format="%m/%d/%Y %H:%M:%S.%f", tz="UTC") == (
        f"{path}: row 2, column 'time': '14/09/2026 06:30:00.000000' does not match --time-format "
        "'%m/%d/%Y %H:%M:%S.%f'; fix the cell or the layout")
    rec = read_recording(path, time_format="%d/%m/%Y %H:%M:%S.%f", tz="UTC")
    assert rec.start_time == "2026-09-14T06:30:00.000000Z" and rec.rate == 50.0
    # month first is suggested when a first field goes past 12 in the second place
    us = _clock(sensor_frame(300), start="2026-01-31T23:59:59", layout="%m/%d/%Y %H:%M:%S")
    us["time"] = us["time"] + "." + pd.Series(np.arange(300) % 50 * 20).astype(str).str.zfill(3)
    assert "--time-format '%m/%d/%Y %H:%M:%S.%f'" in refusal(write_csv(us, "us.csv"))


# ------------------------------------------------------------------ gzip, preamble
def test_gzip_and_preamble(tmp_path):
    frame = sensor_frame(400)
    text = "Device: orchard band v2\nSerial: 0042\n" + frame.to_csv(index=False)
    path = tmp_path / "band.csv.gz"
    path.write_bytes(gzip.compress(text.encode()))
    rec = read_recording(path)
    assert rec.name == "band" and rec.n_samples == 400
    assert rec.repairs == ["read gzip-compressed text"]
    assert rec.notes == ["skipped 2 line(s) before the column names on line 3 (a preamble); say so "
                         "with --skip-rows 2"]
    assert read_recording(path, skip_rows=2).notes == []
    cut = tmp_path / "cut.csv.gz"
    cut.write_bytes(path.read_bytes()[:700])
    assert refusal(cut) == (f"{cut}: a damaged gzip file (Compressed file ended before the "
                            "end-of-stream marker was reached); compress or copy the recording again")
    assert refusal(path, skip_rows=900) == (f"{path}: --skip-rows 900 skips every line of the file; "
                                            "give the number of lines before the column names")


def test_row_numbers_count_the_preamble(tmp_path):
    frame = sensor_frame(300).astype({"hip_acc_y": object})
    frame.loc[7, "hip_acc_y"] = "x"
    path = tmp_path / "p.csv"
    path.write_text("Serial: 0042\n" + frame.to_csv(index=False))
    assert refusal(path) == (f"{path}: row 10, column 'hip_acc_y': 'x' is not a number; fix the cell "
                             "or leave it empty (gaps are filled or skipped)")


# ------------------------------------------------------------------ column mapping, profiles
def test_column_mapping(write_csv):
    frame = sensor_frame(300).rename(columns={"wrist_acc_x": "ax", "wrist_acc_y": "ay",
                                              "wrist_acc_z": "az", "time": "ts"})
    path = write_csv(frame)
    cols = parse_column_options(["ax=wrist_acc_x,ay=wrist_acc_y", "az=wrist_acc_z"])
    rec = read_recording(path, columns=cols, time_column="ts")
    assert rec.channels[:3] == ["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]
    assert rec.sources["wrist_acc_x"] == "ax" and rec.sources["hip_acc_x"] == "hip_acc_x"
    assert refusal(path, columns={"accel_x": "wrist_acc_x"}, time_column="ts") == (
        f"{path}: no column 'accel_x' for the column mapping (--column accel_x=wrist_acc_x); columns "
        "are ts, ax, ay, az, wrist_gyr_x, wrist_gyr_y, wrist_gyr_z, hip_acc_x, hip_acc_y, hip_acc_z, "
        "hip_gyr_x, hip_gyr_y; fix the mapping")
    with pytest.raises(InputError) as err:
        parse_column_options(["ax=wrist_acc_x,ay=wrist_acc_x"])
    assert str(err.value) == ("--column: columns 'ax' and 'ay' both map to wrist_acc_x; map each "
                              "channel once")
    with pytest.raises(InputError) as err:
        parse_column_options(["ax"])
    assert str(err.value) == "--column 'ax': not a pair; write FILE_COLUMN=CHANNEL, e.g. accel_x=wrist_acc_x"


def test_profile_round_trip_and_precedence(tmp_path):
    opts = ReadOptions(columns={"ax": "wrist_acc_x[m/s2]"}, time_column="ts", time_unit="ms",
                       tz="Europe/Vienna", skip_rows=2, acc_unit="m/s2")
    path = tmp_path / "band.json"
    save_profile(opts, path)
    data = json.loads(path.read_text())
    assert data == {"labeler_device_profile": 1, "columns": {"ax": "wrist_acc_x[m/s2]"},
                    "time_column": "ts", "time_unit": "ms", "tz": "Europe/Vienna", "skip_rows": 2,
                    "acc_unit": "m/s2"}
    back = load_profile(path)
    assert back.columns == opts.columns and back.time_unit == "ms" and back.origin == str(path)
    merged = back.merged(ReadOptions(time_unit="us", columns={"ay": "wrist_acc_y"}))
    assert merged.time_unit == "us" and merged.tz == "Europe/Vienna"
    assert merged.columns == {"ax": "wrist_acc_x[m/s2]", "ay": "wrist_acc_y"}
    path.write_text('{"labeler_device_profile": 1, "skip_rows": -3}')
    with pytest.raises(InputError) as err:
        load_profile(path)
    assert str(err.value) == f"{path}: 'skip_rows': -3 lines; give a whole number from 0 to 1000"


# ------------------------------------------------------------------ level at rest
def test_rest_level_of_a_still_sensor_is_its_gravity():
    # a still sensor reads 1 g along gravity (standard gravity 9.80665 m/s², CGPM 1901); moving
    # stretches around it do not move the level
    rng = np.random.default_rng(0)
    still = np.full(3000, STANDARD_GRAVITY) + rng.normal(0, 0.02, 3000)
    busy = STANDARD_GRAVITY + 4.0 * np.sin(np.arange(6000) / 3.0) + rng.normal(0, 1.0, 6000)
    level = rest_level(np.concatenate([busy[:3000], still, busy[3000:]]))
    assert abs(level - STANDARD_GRAVITY) < 0.05
    assert judge_level(level, "g", stated=False).unit == "m/s2"
    assert judge_level(level, "g", stated=True).action == "refuse"
    assert judge_level(level / STANDARD_GRAVITY, "g", stated=False).action == "ok"
    assert judge_level(0.05, "g", stated=False).action == "note"     # gravity removed
    assert judge_level(3.0, "g", stated=False).action == "refuse"    # no unit fits
    assert judge_level(3.0, "g", stated=True).action == "note"       # as stated


def test_metres_per_second_squared_without_a_unit_are_converted_with_a_note(write_csv):
    # still for the first half (|acc| = 1 g exactly: 0.6 and 0.8 g on two axes), moving after
    frame = sensor_frame(1000, sites=("wrist",))
    still = frame.index < 500
    frame.loc[still, ["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]] = [0.0, 0.6, 0.8]
    truth = frame["wrist_acc_z"].to_numpy()
    frame[["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]] *= STANDARD_GRAVITY
    path = write_csv(frame)
    rec = read_recording(path)
    assert rec.units["wrist_acc_z"] == "m/s2" and rec.found == {"acc_unit": "m/s2"}
    np.testing.assert_allclose(rec.signal[:, rec.channels.index("wrist_acc_z")], truth, rtol=1e-5)
    assert rec.notes == ["read wrist_acc_x/wrist_acc_y/wrist_acc_z as m/s2: at rest |acc| is 9.81 g "
                         "if read as g, 1 g as m/s2; say so with --acc-unit m/s2 to silence this"]
    assert refusal(path, acc_unit="g") == (
        f"{path}: columns wrist_acc_x/wrist_acc_y/wrist_acc_z: at rest |acc| is 9.81 g in the "
        "stated unit g but 1 g in m/s2; the values are in m/s2: give --acc-unit m/s2")
    assert read_recording(path, acc_unit="m/s2").notes == []


def test_milli_g_in_columns_named_g_is_refused(write_csv):
    frame = sensor_frame(1000, sites=("hip",))
    frame.loc[frame.index < 500, ["hip_acc_x", "hip_acc_y", "hip_acc_z"]] = [0.8, 0.0, -0.6]
    frame[["hip_acc_x", "hip_acc_y", "hip_acc_z"]] *= 1000.0
    named = frame.rename(columns={c: c + "[g]" for c in ("hip_acc_x", "hip_acc_y", "hip_acc_z")})
    path = write_csv(named)
    assert refusal(path) == (
        f"{path}: columns hip_acc_x[g]/hip_acc_y[g]/hip_acc_z[g]: at rest |acc| is 1e+03 g in the "
        "stated unit g but 1 g in mg; the values are in mg: name the columns hip_acc_x[mg] ...")
    frame = frame.rename(columns={c: c + "[mg]" for c in ("hip_acc_x", "hip_acc_y", "hip_acc_z")})
    rec = read_recording(write_csv(frame, "mg.csv"))
    assert rec.units["hip_acc_x"] == "mg" and rec.notes == []


def test_a_level_no_unit_explains_is_refused_unless_stated(write_csv):
    frame = sensor_frame(1000, sites=("wrist",))
    frame.loc[frame.index < 500, ["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]] = [0.0, 0.0, 1.0]
    frame[["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]] *= 4096.0  # raw counts of a +-8 g sensor
    path = write_csv(frame)
    assert refusal(path) == (
        f"{path}: columns wrist_acc_x/wrist_acc_y/wrist_acc_z: at rest |acc| is 4.1e+03 g, far from "
        "1 g in g, m/s2 or mg; check the sensor's scale (raw counts?) and the column mapping")
    frame[["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]] *= 2.5 / 4096.0  # a scale error: 2.5 g
    path = write_csv(frame, "scaled.csv")
    assert refusal(path) == (
        f"{path}: columns wrist_acc_x/wrist_acc_y/wrist_acc_z: at rest |acc| is 2.5 g, far from "
        "1 g in g, m/s2 or mg; check the sensor's scale (raw counts?) and the column mapping, or "
        "state the unit with --acc-unit to keep the values")
    rec = read_recording(path, acc_unit="g")  # stated: kept, with a note
    assert rec.notes == ["wrist_acc_x/wrist_acc_y/wrist_acc_z: at rest |acc| is 2.5 g, not 1 g; "
                         "kept in the stated unit g"]


def test_gravity_removed_is_noted_not_refused(write_csv):
    frame = sensor_frame(600, sites=("wrist",))
    frame["wrist_acc_z"] -= 1.0  # linear acceleration: gravity taken out by the device
    rec = read_recording(write_csv(frame))
    assert rec.units["wrist_acc_z"] == "g"
    assert rec.notes and "gravity seems removed by the device" in rec.notes[0]


# ------------------------------------------------------------------ gaps are not jitter
def test_a_pause_is_a_gap_not_jitter(write_csv):
    frame = sensor_frame(2000).drop(index=range(800, 900))
    rec = read_recording(write_csv(frame))
    assert rec.repairs == ["kept 1 pause(s) longer than 1 s as gaps"]
    assert rec.gaps() == [(16.0, 2.0)]


# ------------------------------------------------------------------ the dry run
def test_dry_run_prints_what_it_found_and_writes_nothing(tmp_path):
    frame = sensor_frame(3000).drop(index=range(1000, 1200))
    frame["time"] = 1_789_367_400_000 + (frame["time"] * 1000).round().astype(np.int64)
    frame = frame.rename(columns={"wrist_acc_x": "ax"})
    path = tmp_path / "band.csv.gz"
    path.write_bytes(gzip.compress(("Serial: 7\n" + frame.to_csv(index=False)).encode()))
    proj = tmp_path / "p.labeler"
    run = lambda *a: CliRunner().invoke(cli, [str(x) for x in a], env={"LABELER_ANNOTATOR": "t"})
    assert run("new", proj).exit_code == 0
    before = proj.read_bytes()
    r = run("add", proj, path, "--dry-run", "--column", "ax=wrist_acc_x",
            "--save-profile", tmp_path / "band.json")
    assert r.exit_code == 0, r.output
    lines = r.output.splitlines()
    assert lines[0] == "would add band: 1.0 min at 50 Hz, 41 windows"
    assert lines[1] == f"  file: {path}"
    assert lines[2] == ("  time: column 'time': Unix time in ms (found from the values); first "
                        "sample 2026-09-14T06:30:00.000000Z")
    assert lines[3] == "  rate: 50 Hz, 3000 samples on the grid"
    assert lines[4].startswith("  channels (12): wrist_acc_x <- ax [g], wrist_acc_y [g], ")
    assert lines[5] == "  gaps: 1, 4.0 s in all: at 20.0 s for 4.00 s"
    assert lines[-2] == f"wrote device profile {tmp_path / 'band.json'}"
    assert lines[-1] == "dry run: nothing written to the project"
    assert proj.read_bytes() == before
    assert json.loads((tmp_path / "band.json").read_text()) == {
        "labeler_device_profile": 1, "columns": {"ax": "wrist_acc_x"}, "time_unit": "ms",
        "skip_rows": 1}
    r = run("add", proj, path, "--profile", tmp_path / "band.json")
    assert r.exit_code == 0, r.output
    assert r.output.splitlines()[0] == "added band: 1.0 min at 50 Hz, 41 windows"
    assert "note:" not in r.output  # the profile states what was found
