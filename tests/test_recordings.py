import math

import numpy as np
import pandas as pd
import pytest

from labeler.channels import STANDARD_GRAVITY, parse_channel, triads
from labeler.errors import InputError
from labeler.recordings import read_recording, recording_from_frame
from conftest import sensor_frame


def test_channel_convention():
    ch = parse_channel("hip_gyr_z[rad/s]")
    assert (ch.site, ch.kind, ch.axis, ch.unit) == ("hip", "gyr", "z", "rad/s")
    assert parse_channel("label") is None
    with pytest.raises(ValueError, match="unknown unit"):
        parse_channel("wrist_acc_x[furlong]")
    assert triads(["wrist_acc_x", "wrist_acc_y", "wrist_acc_z", "hip_gyr_x"]) == [
        ("wrist", "acc", (0, 1, 2))]


def test_reads_seconds_column(write_csv):
    frame = sensor_frame(500)
    rec = read_recording(write_csv(frame))
    assert rec.rate == 50.0
    assert rec.channels[:3] == ["wrist_acc_x", "wrist_acc_y", "wrist_acc_z"]
    assert rec.signal.dtype == np.float32 and rec.signal.shape == (500, 12)
    assert rec.valid.all() and rec.start_time is None
    np.testing.assert_allclose(rec.signal[:, 0], frame["wrist_acc_x"], rtol=1e-6, atol=1e-6)


def test_iso_timestamps_give_start_time(write_csv):
    frame = sensor_frame(300)
    frame["time"] = (pd.Timestamp("2026-09-14T06:30:00Z")
                     + pd.to_timedelta(frame["time"], unit="s")).dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    rec = read_recording(write_csv(frame))
    assert rec.start_time == "2026-09-14T06:30:00.000000Z"
    assert rec.rate == 50.0 and rec.n_samples == 300


def test_rate_option_without_time_column(write_csv):
    frame = sensor_frame(400).drop(columns="time")
    rec = read_recording(write_csv(frame), rate=100.0)
    assert rec.rate == 100.0 and rec.n_samples == 400
    with pytest.raises(InputError, match="no time column"):
        read_recording(write_csv(frame, "b.csv"))


def test_units_converted(write_csv):
    frame = sensor_frame(200, sites=("wrist",))
    g = frame["wrist_acc_z"].to_numpy()
    w = frame["wrist_gyr_x"].to_numpy()
    frame = frame.rename(columns={"wrist_acc_z": "wrist_acc_z[m/s2]", "wrist_gyr_x": "wrist_gyr_x[rad/s]"})
    frame["wrist_acc_z[m/s2]"] = g * STANDARD_GRAVITY
    frame["wrist_gyr_x[rad/s]"] = np.deg2rad(w)
    rec = read_recording(write_csv(frame))
    np.testing.assert_allclose(rec.signal[:, rec.channels.index("wrist_acc_z")], g, rtol=1e-5)
    np.testing.assert_allclose(rec.signal[:, rec.channels.index("wrist_gyr_x")], w, rtol=1e-5, atol=1e-3)
    assert rec.units["wrist_acc_z"] == "m/s2"


def test_jitter_resampled_onto_grid(write_csv):
    frame = sensor_frame(1000, jitter=0.2)
    rec = read_recording(write_csv(frame))
    assert rec.rate == 50.0
    assert any("resampled" in r for r in rec.repairs)
    # a 1 Hz sine sampled with jitter, resampled linearly: close to the true sine on the grid
    t = np.arange(rec.n_samples) / 50.0 + frame["time"].iloc[0]
    truth = 0.3 * np.sin(2 * np.pi * t)
    assert np.abs(rec.signal[:, 0] - truth).max() < 0.15  # noise sd 0.03 plus interpolation


def test_short_nan_filled_long_gap_kept(write_csv):
    frame = sensor_frame(2000)
    frame.loc[100:103, "wrist_acc_x"] = np.nan           # 4 samples: filled
    frame = frame.drop(index=range(1000, 1200))           # 4 s of rows missing: a gap
    rec = read_recording(write_csv(frame))
    assert np.isfinite(rec.signal[100:104]).all()
    assert rec.n_samples == 2000
    assert not rec.valid[1000:1200].any() and rec.valid[:1000].all() and rec.valid[1200:].all()
    assert np.isnan(rec.signal[1050]).all()


@pytest.mark.parametrize("mutate, message", [
    (lambda f: f.assign(time=f["time"].where(f.index != 10, 0.05)), "row 12, column 'time': time goes backwards"),
    (lambda f: f.assign(time=f["time"].where(f.index != 10, f["time"].iloc[9])), "row 12, column 'time': duplicate timestamp"),
    (lambda f: f.astype({"hip_acc_y": object}).assign(hip_acc_y=["x" if i == 7 else v for i, v in enumerate(f["hip_acc_y"])]), "row 9, column 'hip_acc_y': 'x' is not a number"),
    (lambda f: f.rename(columns={c: f"ch{i}" for i, c in enumerate(f.columns) if c != "time"}), "no sensor channel among the columns"),
    (lambda f: f.rename(columns={"hip_gyr_x": "hip_speed_x"}), "column 'hip_speed_x': unknown sensor kind 'speed'"),
    (lambda f: f.assign(hip_acc_x=np.nan), "column 'hip_acc_x' holds no values"),
    (lambda f: f.assign(wrist_acc_x=f["wrist_acc_x"].where(f.index != 3, 1e7)), "row 5, column 'wrist_acc_x': value 1e+07 is beyond"),
])
def test_refusals_name_row_and_column(write_csv, mutate, message):
    path = write_csv(mutate(sensor_frame(300)))
    with pytest.raises(InputError) as err:
        read_recording(path)
    assert str(err.value).startswith(str(path) + ": ")
    assert message in str(err.value)
    assert "\n" not in str(err.value)


def test_bad_rate_option(write_csv):
    path = write_csv(sensor_frame(100).drop(columns="time"))
    for bad in (0, -5, float("nan")):
        with pytest.raises(InputError, match="sampling rate"):
            read_recording(path, rate=bad)


def test_semicolon_and_bom(tmp_path):
    frame = sensor_frame(200)
    path = tmp_path / "semi.csv"
    path.write_text(frame.to_csv(index=False, sep=";"), encoding="utf-8-sig")
    rec = read_recording(path)
    assert rec.n_samples == 200
    assert any("byte-order" in r for r in rec.repairs) and any("semicolon" in r for r in rec.repairs)


def test_parquet(tmp_path):
    frame = sensor_frame(250)
    path = tmp_path / "r.parquet"
    frame.to_parquet(path)
    rec = read_recording(path)
    assert rec.n_samples == 250 and rec.name == "r"
    (tmp_path / "broken.parquet").write_bytes(path.read_bytes()[: 400])
    with pytest.raises(InputError, match="not a readable Parquet file"):
        read_recording(tmp_path / "broken.parquet")


def test_empty_and_binary(tmp_path):
    (tmp_path / "e.csv").write_bytes(b"")
    with pytest.raises(InputError, match="empty"):
        read_recording(tmp_path / "e.csv")
    (tmp_path / "b.csv").write_bytes(bytes(range(256)) * 4)
    with pytest.raises(InputError, match="binary"):
        read_recording(tmp_path / "b.csv")
    (tmp_path / "h.csv").write_text("time,wrist_acc_x\n")
    with pytest.raises(InputError, match="header only"):
        read_recording(tmp_path / "h.csv")


def _reference_grid(t, values, rate, max_fill):
    """Short-run filling and resampling done the plain way, with numpy.interp per run and channel
    (the reference: numpy's piecewise-linear interpolation)."""
    values = values.copy()
    n = len(t)
    for j in range(values.shape[1]):
        miss = np.isnan(values[:, j])
        edges = np.flatnonzero(np.diff(np.concatenate([[0], miss.astype(int), [0]])))
        for a, b in zip(edges[0::2], edges[1::2]):
            if b - a <= max_fill and a > 0 and b < n:
                values[a:b, j] = np.interp(t[a:b], t[~miss], values[~miss, j])
    ok = ~np.isnan(values).any(axis=1)
    grid = t[0] + np.arange(int(math.floor((t[-1] - t[0]) * rate + 1e-6)) + 1) / rate
    return grid, np.column_stack([np.interp(grid, t[ok], values[ok, j])
                                  for j in range(values.shape[1])])


def test_many_short_dropouts_filled_as_numpy_interp_does():
    rng = np.random.default_rng(3)
    frame = sensor_frame(6000, jitter=0.3, seed=3)
    cols = [c for c in frame.columns if c != "time"]
    values = frame[cols].to_numpy().copy()
    for _ in range(400):  # short runs of one to twelve samples, anywhere, in any channel
        a, m, j = rng.integers(1, 5900), rng.integers(1, 13), rng.integers(0, len(cols))
        values[a:a + m, j] = np.nan
    values[3000:3040, 2] = np.nan  # 0.8 s: too long to fill, kept as a gap
    frame[cols] = values
    frame = frame.drop(index=range(4500, 4700)).reset_index(drop=True)  # a 4 s pause
    rec = recording_from_frame(frame, where="f.csv", content_hash="h", name="r")
    t = frame["time"].to_numpy()
    grid, expected = _reference_grid(t, frame[cols].to_numpy(), 50.0, max_fill=12)
    assert rec.n_samples == grid.size
    assert not rec.valid[int(3005 - t[0] * 50):int(3035 - t[0] * 50)].any()
    assert not rec.valid[(grid > t[4499] + 1e-9) & (grid < t[4500] - 1e-9)].any()
    assert rec.valid.mean() > 0.9
    assert np.isnan(rec.signal[~rec.valid]).all()
    np.testing.assert_allclose(rec.signal[rec.valid], expected[rec.valid].astype(np.float32),
                               rtol=0, atol=1e-6)


def test_clock_within_rounding_of_the_grid_keeps_every_valid_sample_finite():
    # times that differ from the grid by rounding only, rows missing (a pause) and a run of
    # missing values too long to fill: every sample kept valid is a number
    rng = np.random.default_rng(5)
    frame = sensor_frame(3000)
    frame["time"] = np.arange(3000) / 50.0 + rng.uniform(-1e-11, 1e-11, 3000)
    frame.loc[0, "time"] = 0.0
    frame.loc[999, "time"] = 999 / 50.0 - 1e-11  # just before its grid point, a missing value next
    frame.loc[1000:1100, "hip_acc_x"] = np.nan
    frame = frame.drop(index=range(2000, 2200)).reset_index(drop=True)
    rec = recording_from_frame(frame, where="f.csv", content_hash="h", name="r")
    assert rec.n_samples == 3000
    assert np.isfinite(rec.signal[rec.valid]).all()
    assert rec.valid[999] and not rec.valid[1000:1101].any() and rec.valid[1101]
    assert not rec.valid[2000:2200].any() and rec.valid[2200:].all()
    # and each is its own channel's value at that time (the sample at 999 takes its row's value,
    # which numpy.interp gives within rounding of the clock)
    cols = [c for c in frame.columns if c != "time"]
    t = frame["time"].to_numpy()
    grid = np.arange(3000) / 50.0
    for j, c in enumerate(cols):
        ok = ~frame[c].isna().to_numpy()
        expected = np.interp(grid, t[ok], frame[c].to_numpy()[ok])
        np.testing.assert_allclose(rec.signal[rec.valid, j], expected[rec.valid], rtol=0,
                                   atol=1e-5, err_msg=c)


def test_rows_at_or_before_each_grid_point_as_numpy_searchsorted_counts():
    # reference: numpy.searchsorted(t, grid, side="right"), on jittered clocks, clocks within
    # rounding of the grid, pauses, Unix-time origins and rates whose step 1/fs is not exact
    from labeler.recordings import _rows_at_or_before

    rng = np.random.default_rng(11)
    for trial in range(120):
        n = int(rng.integers(2, 2000))
        fs = float(rng.choice([1.0, 12.5, 33.3, 50.0, 100.0, 1000.0]))
        t0 = rng.uniform(1.6e9, 1.8e9) if trial % 3 == 0 else rng.uniform(0, 100)
        k = np.sort(rng.choice(2 * n, n, replace=False)).astype(float)  # rows missing: pauses
        if trial % 2:
            shake = rng.uniform(-0.45, 0.45, n) / fs
        else:
            shake = rng.uniform(-1e-11, 1e-11, n) if trial % 4 == 2 else np.zeros(n)
        t = np.unique(t0 + k / fs + shake)
        grid = t[0] + np.arange(int(math.floor((t[-1] - t[0]) * fs + 1e-6)) + 1) / fs
        np.testing.assert_array_equal(_rows_at_or_before(t, grid, fs),
                                      np.searchsorted(t, grid, side="right"))


def test_large_recording_on_several_threads_as_numpy_interp_and_as_on_one(monkeypatch):
    # reference: numpy.interp per channel (_reference_grid), on a recording long enough for the
    # channels and blocks of grid points to be shared out among threads (several blocks), in
    # float32 as a Parquet file gives them, in m/s2 (scaled on the way onto the grid); one thread
    # and four give the same bytes
    import labeler.recordings as recordings

    n = 3 * recordings._GRID_BLOCK + 1234
    assert n >= recordings._PARALLEL_FROM
    rng = np.random.default_rng(21)
    frame = sensor_frame(n, jitter=0.3, seed=21)
    cols = [c for c in frame.columns if c != "time"]
    values = frame[cols].to_numpy().copy()
    for _ in range(3000):  # short runs of one to twelve samples, anywhere, in any channel
        a, m, j = rng.integers(1, n - 20), rng.integers(1, 13), rng.integers(0, len(cols))
        values[a:a + m, j] = np.nan
    values[50_000:50_040, 4] = np.nan  # too long to fill: a gap
    acc = [j for j, c in enumerate(cols) if "_acc_" in c]
    values[:, acc] *= STANDARD_GRAVITY
    frame[cols] = values.astype(np.float32)
    frame = frame.drop(index=range(70_000, 70_300)).reset_index(drop=True)  # a 6 s pause
    frame = frame.rename(columns={c: f"{c}[m/s2]" for c in cols if "_acc_" in c})
    runs = {}
    for workers in (1, 4):
        monkeypatch.setattr(recordings, "_MAX_WORKERS", workers)
        runs[workers] = recording_from_frame(frame, where="f.parquet", content_hash="h", name="r")
    one, four = runs[1], runs[4]
    assert one.signal.tobytes() == four.signal.tobytes()
    assert one.valid.tobytes() == four.valid.tobytes() and one.repairs == four.repairs
    t = frame["time"].to_numpy()
    scaled = frame.iloc[:, 1:].to_numpy().astype(np.float64)
    scaled[:, acc] /= STANDARD_GRAVITY  # g: the factor m/s2 -> g is 1 / standard gravity
    grid, expected = _reference_grid(t, scaled, 50.0, max_fill=12)
    assert one.n_samples == grid.size and one.signal.shape == (grid.size, 12)
    assert not one.valid[(grid > t[69_999] + 1e-9) & (grid < t[70_000] - 1e-9)].any()
    assert 0.9 < one.valid.mean() < 1.0
    assert np.isnan(one.signal[~one.valid]).all()
    np.testing.assert_allclose(one.signal[one.valid], expected[one.valid].astype(np.float32),
                               rtol=1e-6, atol=1e-6)


def test_median_is_numpy_median():
    # reference: numpy.median, bit for bit, on odd and even counts, ties, zeros of both signs,
    # infinities, float32, sorted and small arrays
    from labeler.timecolumn import median

    rng = np.random.default_rng(4)
    cases = [rng.normal(size=100_001), rng.normal(size=100_000), np.full(5000, 0.02),
             np.r_[np.zeros(500), np.ones(500)], np.sort(rng.normal(size=2001)),
             np.r_[np.full(100, np.inf), np.zeros(70)], rng.integers(0, 5, 3000).astype(float),
             rng.normal(size=4000).astype(np.float32), np.r_[-np.zeros(50), np.zeros(50)],
             np.array([3.0]), np.array([2.0, -1.0]), np.array([2.0, -1.0, 5.0])]
    cases += [rng.integers(-3, 4, n).astype(float) * 0.1 for n in range(2, 60)]
    for x in cases:
        for overwrite in (False, True):
            expected = np.float64(np.median(x)).tobytes()
            assert np.float64(median(x.copy(), overwrite=overwrite)).tobytes() == expected


def test_quietest_blocks_are_those_of_a_stable_sort():
    # reference: the first k of numpy.argsort(kind="stable"), as a set, with ties and NaN
    from labeler.gravity import _row_std, _smallest

    rng = np.random.default_rng(8)
    for trial in range(200):
        n = int(rng.integers(1, 400))
        values = np.round(rng.normal(size=n), 1 if trial % 2 else 6)
        if trial % 5 == 0:
            values[rng.random(n) < 0.3] = np.nan
        k = int(rng.integers(1, n + 1))
        expected = np.sort(np.argsort(values, kind="stable")[:k])
        np.testing.assert_array_equal(np.sort(_smallest(values, k)), expected)
    blocks = rng.normal(size=(5000, 50))
    assert _row_std(blocks).tobytes() == blocks.std(axis=1).tobytes()


def test_content_hash_is_the_files_sha256_and_no_thread_outlives_a_refusal(write_csv, tmp_path):
    # reference: hashlib.sha256 of the file's bytes (FIPS 180-4); the hash is computed on a
    # thread of its own while the file is read, and is waited for even when the file is refused
    import hashlib
    import threading

    path = write_csv(sensor_frame(700))
    rec = read_recording(path)
    assert rec.content_hash == hashlib.sha256(path.read_bytes()).hexdigest()
    pq_path = tmp_path / "r.parquet"
    sensor_frame(700).to_parquet(pq_path)
    assert read_recording(pq_path).content_hash == hashlib.sha256(pq_path.read_bytes()).hexdigest()
    bad = sensor_frame(700)
    bad.loc[300, "time"] = bad.loc[299, "time"]
    with pytest.raises(InputError, match="duplicate timestamp"):
        read_recording(write_csv(bad, "bad.csv"))
    assert not [t for t in threading.enumerate() if t.name == "labeler-file-hash"]
