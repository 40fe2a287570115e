"""Interval files with clock times: ISO-8601 start and end, placed by the recording's own clock."""

from datetime import datetime
from zoneinfo import ZoneInfo

import pandas as pd
import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from conftest import sensor_frame


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": "ana"})


@pytest.fixture
def project(tmp_path, write_csv):
    clocked = sensor_frame(3000, seed=1)
    clocked["time"] = (pd.Timestamp("2026-09-14T06:30:00Z")
                       + pd.to_timedelta(clocked["time"], unit="s")).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings([write_csv(clocked, "alpha.csv"), write_csv(sensor_frame(2000, seed=2), "beta.csv")])
    yield p
    p.close()


def labels_of(p):
    w = p.windows().set_index("id")
    return sorted((w.at[r.window_id, "recording"], int(w.at[r.window_id, "seq"]), r._1)
                  for r in p.labels()[["window_id", "class"]].itertuples(index=False))


def test_clock_times_label_the_same_windows_as_seconds(project, tmp_path):
    seconds = tmp_path / "s.csv"
    seconds.write_text("recording,start,end,label\nalpha,10,20,walking\n")
    other = Project.create(tmp_path / "q.labeler", annotator="ana")
    other.add_recordings([project.recordings()["source_path"][0]])
    other.import_intervals(seconds)
    # 06:30:10 UTC is 08:30:10 in Vienna in September (summer time, UTC+2; IANA zone database via
    # Python's zoneinfo)
    local = datetime(2026, 9, 14, 8, 30, 10, tzinfo=ZoneInfo("Europe/Vienna"))
    assert local.utcoffset().total_seconds() == 7200
    clock = tmp_path / "c.csv"
    clock.write_text("recording,start,end,label\n"
                     "alpha,2026-09-14T08:30:10+02:00,2026-09-14T06:30:20Z,walking\n")
    r = project.import_intervals(clock)
    assert r.windows == other.import_intervals(seconds, dry_run=True).windows > 0
    assert labels_of(project) == labels_of(other)
    other.close()


def test_zoneless_clock_times_need_tz(project, tmp_path):
    f = tmp_path / "z.csv"
    f.write_text("recording,start,end,label\nalpha,2026-09-14 08:30:10,2026-09-14 08:30:20,sitting\n")
    with pytest.raises(InputError) as err:
        project.import_intervals(f)
    assert str(err.value) == (f"{f}: row 2, column 'start': '2026-09-14 08:30:10' has no zone; write "
                              "it with one (Z or +02:00) or give the zone with --tz, e.g. --tz "
                              "Europe/Vienna")
    g = tmp_path / "secs.csv"
    g.write_text("recording,start,end,label\nalpha,10,20,sitting\n")
    assert project.import_intervals(f, tz="Europe/Vienna", dry_run=True).windows == \
        project.import_intervals(g, dry_run=True).windows == 8
    r = run("import", project.path, f, "--tz", "Mars/Olympus")
    assert r.exit_code == 2 and r.stderr.strip() == (
        "Error: --tz: unknown time zone 'Mars/Olympus'; use an IANA zone name like Europe/Vienna, "
        "America/Chicago or UTC")


def test_clock_refusals(project, tmp_path):
    cases = {
        "beta,2026-09-14T06:30:10Z,2026-09-14T06:30:20Z,walking\n":
            "row 2: recording 'beta' has no clock (its file gave seconds); give start and end as "
            "seconds from its first sample",
        "alpha,2026-09-14T06:30:10Z,25,walking\n":
            "row 2, column 'end': '25' is not an ISO-8601 time like the other end; write both ends as "
            "clock times or both as seconds",
        "alpha,2026-09-14T06:00:00Z,2026-09-14T06:10:00Z,walking\n":
            "row 2: ends at 2026-09-14T06:10:00Z, before recording 'alpha' begins; fix the row or "
            "the recording name",
        "alpha,2026-09-14T06:30:30Z,2026-09-14T06:30:20Z,walking\n":
            "row 2: end 2026-09-14T06:30:20Z is not after start 2026-09-14T06:30:30Z; swap them or "
            "fix the row",
    }
    for row, message in cases.items():
        f = tmp_path / "bad.csv"
        f.write_text("recording,start,end,label\n" + row)
        with pytest.raises(InputError) as err:
            project.import_intervals(f)
        assert str(err.value) == f"{f}: {message}"


def test_a_clock_interval_before_the_recording_is_cut_at_its_start(project, tmp_path):
    f = tmp_path / "early.csv"
    f.write_text("recording,start,end,label\nalpha,2026-09-14T06:00:00Z,2026-09-14T06:30:10Z,sitting\n")
    g = tmp_path / "secs.csv"
    g.write_text("recording,start,end,label\nalpha,0,10,sitting\n")
    assert project.import_intervals(f, dry_run=True).windows == \
        project.import_intervals(g, dry_run=True).windows > 0
