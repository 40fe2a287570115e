"""Fuzzing the readers: whatever the bytes, only InputError (with one line naming the file) comes out.

Random bytes and random CSV-like text (headers mixing channel names, time columns and junk; cells
mixing numbers, text, empty cells, NaN, inf and huge values; commas, semicolons or tabs; sometimes a
byte-order mark) go to ``labeler.recordings.read_recording`` and ``labeler.importing.read_intervals``.
A reader may accept the file or raise InputError; any other exception, a multi-line message or one
that does not name the file fails the test.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from labeler.errors import InputError
from labeler.importing import read_intervals
from labeler.recordings import read_recording

SETTINGS = settings(max_examples=100, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

COLUMNS = ["time", "t", "timestamp", "wrist_acc_x", "wrist_acc_y", "wrist_acc_z", "hip_gyr_x",
           "hip_gyr_y[rad/s]", "ankle_acc_z[m/s2]", "chest_acc_x[g]", "wrist_mag_x", "wrist_acc_w",
           "wrist_acc_x[bogus]", "note", "", "Wrist_Acc_X", "x y", "\"quoted\"", "ünï_acc_x"]
INTERVAL_COLUMNS = ["recording", "start", "end", "label", "annotator", "note", "windows", "colour",
                    "", "Start"]
CELLS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**30, 10**30).map(str),
    st.sampled_from(["", "nan", "NaN", "inf", "-inf", "1e308", "1e-320", "null", "abc", "1,5",
                     "2026-09-14T06:30:00Z", "2026-13-45T99:99:99", "0", "-0", "True", " 3 ",
                     "\"", "'", "\\", "ü", "\x00", "1e400", "0x10", "1_000"]),
    st.text(max_size=8),
)


def csv_texts(columns):
    return st.builds(
        lambda header, rows, sep, bom, end: (("\ufeff" if bom else "") + sep.join(header) + end
                                             + "".join(sep.join(r) + end for r in rows)),
        st.lists(st.sampled_from(columns), min_size=0, max_size=8),
        st.lists(st.lists(CELLS, min_size=0, max_size=9), min_size=0, max_size=40),
        st.sampled_from([",", ";", "\t", "|"]),
        st.booleans(),
        st.sampled_from(["\n", "\r\n", "\r"]),
    )


class Folder:
    def __enter__(self):
        self.path = Path(tempfile.mkdtemp(prefix="labeler-fuzz-"))
        return self.path

    def __exit__(self, *exc):
        shutil.rmtree(self.path, ignore_errors=True)


def only_input_error(reader, path: Path, **kw):
    try:
        reader(path, **kw)
    except InputError as exc:
        text = str(exc)
        assert "\n" not in text, f"message is not one line: {text!r}"
        assert str(path) in text, f"message does not name the file: {text!r}"


@SETTINGS
@given(data=st.binary(max_size=3000), suffix=st.sampled_from([".csv", ".parquet", ".txt"]))
def test_recording_reader_random_bytes(data, suffix):
    with Folder() as d:
        p = d / f"rec{suffix}"
        p.write_bytes(data)
        only_input_error(read_recording, p)


@SETTINGS
@given(text=csv_texts(COLUMNS), rate=st.sampled_from([None, 50.0, 1.0, 10000.0]))
def test_recording_reader_random_csv(text, rate):
    with Folder() as d:
        p = d / "rec.csv"
        p.write_bytes(text.encode("utf-8", errors="surrogatepass"))
        only_input_error(read_recording, p, rate=rate)


@SETTINGS
@given(data=st.binary(max_size=3000))
def test_interval_reader_random_bytes(data):
    with Folder() as d:
        p = d / "labels.csv"
        p.write_bytes(data)
        only_input_error(read_intervals, p)


@SETTINGS
@given(text=csv_texts(INTERVAL_COLUMNS))
def test_interval_reader_random_csv(text):
    with Folder() as d:
        p = d / "labels.csv"
        p.write_bytes(text.encode("utf-8", errors="surrogatepass"))
        only_input_error(read_intervals, p)


@pytest.mark.parametrize("n", [2, 3, 50])
def test_recording_reader_tiny_valid_tables(n, tmp_path):
    """A valid table of a few samples (a wrist at rest, gravity on z, 50 Hz) is read whole."""
    rows = "".join(f"{i / 50:.2f},{0.01 * (i % 3):.2f},{0.02 * (i % 5):.2f},1.00\n"
                   for i in range(n))
    p = tmp_path / "tiny.csv"
    p.write_text("time,wrist_acc_x,wrist_acc_y,wrist_acc_z\n" + rows)
    rec = read_recording(p)
    assert rec.n_samples == n and rec.rate == pytest.approx(50.0)
    assert rec.channels == ["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]
    np.testing.assert_allclose(rec.signal[:, 2], 1.0)
    np.testing.assert_allclose(rec.signal[:, 0], [0.01 * (i % 3) for i in range(n)], atol=1e-6)
