"""Reading recordings: CSV or Parquet files of body-worn motion sensors.

A recording file has one row per sample and one column per sensor channel, named by the convention of
:mod:`labeler.channels` (``wrist_acc_x``, ``hip_gyr_z[rad/s]`` ...). Time is either

- a column named ``time`` (or ``t``, ``timestamp``, or the one given with ``time_column``), holding
  seconds (any origin) or ISO-8601 timestamps (``2026-09-14T06:30:00.020Z``), or
- absent, in which case the sampling rate must be given (``rate``) and samples are taken as uniform.

What is normal in real recordings is repaired, and each repair is noted in ``Recording.repairs``:
jittered timestamps are resampled onto a uniform grid (linear interpolation), short runs of missing
values (up to ``max_fill_s``, default 0.25 s) are interpolated, longer runs and pauses in time longer
than ``max_gap_s`` (default 1 s) are kept as gaps that no window crosses; a byte-order mark is dropped;
semicolon- or tab-separated files are read as such; columns that are neither time nor sensor are
ignored. What cannot be repaired raises :class:`labeler.errors.InputError` with one line that names
the file, the row or column and the fix, before anything is written.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from labeler.channels import CANONICAL_UNITS, KINDS, UNIT_FACTORS, parse_channel
from labeler.errors import InputError

TIME_COLUMNS = ("time", "t", "timestamp", "time_s", "seconds")
DEFAULT_MAX_GAP_S = 1.0
DEFAULT_MAX_FILL_S = 0.25
# beyond these, a value is not a body-worn motion sensor reading in the stated unit; most likely the
# unit is wrong (common practice, no source: consumer IMUs saturate at 16 g and 2000 deg/s, research
# devices at up to 200 g / 4000 deg/s)
ABSURD = {"acc": 400.0, "gyr": 40000.0}
MIN_RATE, MAX_RATE = 1.0, 10000.0
MAX_GRID_SAMPLES = 5_000_000  # a grid may exceed 10x the file's samples up to this (28 h at 50 Hz)


@dataclass
class Recording:
    """A recording on a uniform time grid, in canonical units (acceleration g, angular rate deg/s)."""

    name: str
    source_path: str
    content_hash: str
    rate: float
    channels: list[str]
    units: dict[str, str]          # the unit each channel had in the file
    signal: np.ndarray             # (n_samples, n_channels) float32, NaN inside gaps
    valid: np.ndarray              # (n_samples,) bool, False inside gaps
    start_time: str | None = None  # ISO-8601 UTC of the first sample, when the file gave timestamps
    repairs: list[str] = field(default_factory=list)

    @property
    def n_samples(self) -> int:
        return int(self.signal.shape[0])

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate


def file_hash(path: str | os.PathLike) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def recording_name(path: str | os.PathLike) -> str:
    """A tidy name from a file name: the stem, odd characters replaced by '_'."""
    stem = Path(path).name
    for suffix in (".csv.gz", ".csv", ".parquet", ".pq", ".tsv", ".txt"):
        if stem.lower().endswith(suffix):
            stem = stem[: -len(suffix)]
            break
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", stem).strip("_.")
    return name or "recording"


def read_recording(path: str | os.PathLike, *, rate: float | None = None,
                   time_column: str | None = None, acc_unit: str = "g", gyr_unit: str = "deg/s",
                   max_gap_s: float = DEFAULT_MAX_GAP_S, max_fill_s: float = DEFAULT_MAX_FILL_S,
                   name: str | None = None) -> Recording:
    """Read, validate and repair one recording file. Raises InputError on what cannot be repaired."""
    path = Path(path)
    where = str(path)
    if rate is not None and not (isinstance(rate, (int, float)) and math.isfinite(rate)
                                 and MIN_RATE <= rate <= MAX_RATE):
        raise InputError(f"{where}: sampling rate {rate} Hz is not usable; give --rate between "
                         f"{MIN_RATE:g} and {MAX_RATE:g} Hz")
    if acc_unit not in UNIT_FACTORS["acc"]:
        raise InputError(f"{where}: unknown acceleration unit {acc_unit!r}; use "
                         + " or ".join(sorted(UNIT_FACTORS['acc'])))
    if gyr_unit not in UNIT_FACTORS["gyr"]:
        raise InputError(f"{where}: unknown angular-rate unit {gyr_unit!r}; use "
                         + " or ".join(sorted(UNIT_FACTORS['gyr'])))
    if not path.exists():
        raise InputError(f"{where}: no such file; check the path")
    if path.is_dir():
        raise InputError(f"{where}: is a folder; give recording files (CSV or Parquet)")
    repairs: list[str] = []
    frame = _read_table(path, repairs)
    return recording_from_frame(frame, where=where, content_hash=file_hash(path),
                                name=name or recording_name(path), rate=rate,
                                time_column=time_column, acc_unit=acc_unit, gyr_unit=gyr_unit,
                                max_gap_s=max_gap_s, max_fill_s=max_fill_s, repairs=repairs)


def _read_table(path: Path, repairs: list[str]) -> pd.DataFrame:
    where = str(path)
    if path.stat().st_size == 0:
        raise InputError(f"{where}: the file is empty; export the recording again")
    with open(path, "rb") as fh:
        head = fh.read(4096)
    is_parquet = head.startswith(b"PAR1") or path.suffix.lower() in (".parquet", ".pq")
    if is_parquet:
        try:
            import pyarrow.parquet as pq

            return pq.read_table(path).to_pandas()
        except Exception as exc:  # pyarrow raises several types for damaged files
            raise InputError(f"{where}: not a readable Parquet file ({_short(exc)}); export it "
                             "again or give a CSV") from None
    if b"\x00" in head:
        raise InputError(f"{where}: binary content, not a CSV text file; give a CSV or Parquet file")
    try:
        text_head = head.decode("utf-8")
    except UnicodeDecodeError:
        try:
            text_head = head[:-4].decode("utf-8")  # a multi-byte character cut at the block end
        except UnicodeDecodeError:
            raise InputError(f"{where}: not UTF-8 text; save the CSV as UTF-8") from None
    if text_head.startswith("\ufeff"):
        repairs.append("dropped a byte-order mark")
        text_head = text_head[1:]
    first = text_head.splitlines()[0] if text_head.strip() else ""
    if not first.strip():
        raise InputError(f"{where}: the first line is empty; the first line must name the columns")
    sep = _sniff_separator(first)
    names = [c.strip() for c in next(csv.reader([first], delimiter=sep))]
    if "\n" not in text_head and "\r" not in text_head:
        names = names[:-1]  # the header goes on past the first block; its last name may be cut
    seen: set[str] = set()
    for c in names:
        if c and c in seen:  # the CSV reader would rename the second one and drop it silently
            raise InputError(f"{where}: column {c!r} appears twice in the header; rename or drop "
                             "one")
        seen.add(c)
    if sep != ",":
        repairs.append(f"read as {'semicolon' if sep == ';' else 'tab'}-separated")
    try:
        # numeric columns parse in C; a column with any non-number stays text and is checked
        # cell by cell in _numeric_column, which names the first bad row
        frame = pd.read_csv(path, sep=sep, encoding="utf-8-sig", skipinitialspace=True,
                            low_memory=False)
    except pd.errors.ParserError as exc:
        raise InputError(f"{where}: cannot be parsed as CSV ({_short(exc)}); check that every row "
                         "has as many fields as the header") from None
    except UnicodeDecodeError:
        raise InputError(f"{where}: not UTF-8 text; save the CSV as UTF-8") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{where}: the file holds no columns; export the recording again") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _sniff_separator(header: str) -> str:
    counts = {s: header.count(s) for s in (",", ";", "\t")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


def _short(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text[:120] + ("..." if len(text) > 120 else "")


def recording_from_frame(frame: pd.DataFrame, *, where: str, content_hash: str, name: str,
                         rate: float | None = None, time_column: str | None = None,
                         acc_unit: str = "g", gyr_unit: str = "deg/s",
                         max_gap_s: float = DEFAULT_MAX_GAP_S,
                         max_fill_s: float = DEFAULT_MAX_FILL_S,
                         repairs: list[str] | None = None) -> Recording:
    """Validate and repair a table of samples (see the module docstring)."""
    repairs = [] if repairs is None else repairs
    columns = [str(c) for c in frame.columns]
    if len(set(columns)) != len(columns):
        dup = next(c for c in columns if columns.count(c) > 1)
        raise InputError(f"{where}: column {dup!r} appears twice; rename or drop one")
    # ---- which column is time, which are sensors
    tcol = None
    if time_column is not None:
        if time_column not in columns:
            raise InputError(f"{where}: no column {time_column!r}; columns are "
                             + ", ".join(columns[:12]))
        tcol = time_column
    else:
        for c in columns:
            if c.strip().lower() in TIME_COLUMNS:
                tcol = c
                break
    sensor_cols: list[str] = []
    channels: list[str] = []
    units: dict[str, str] = {}
    factors: list[float] = []
    kinds: list[str] = []
    ignored = []
    for c in columns:
        if c == tcol:
            continue
        try:
            ch = parse_channel(c)
        except ValueError as exc:
            raise InputError(f"{where}: column {c!r}: {exc}") from None
        if ch is None:
            ignored.append(c)
            continue
        if ch.name in channels:
            raise InputError(f"{where}: column {c!r} repeats channel {ch.name}; keep one")
        unit = ch.unit or (acc_unit if ch.kind == "acc" else gyr_unit)
        sensor_cols.append(c)
        channels.append(ch.name)
        units[ch.name] = unit
        factors.append(UNIT_FACTORS[ch.kind][unit])
        kinds.append(ch.kind)
    if not channels:
        shown = ", ".join(repr(c) for c in columns[:8]) or "none"
        raise InputError(f"{where}: no sensor channel among the columns ({shown}); name them "
                         "<site>_<kind>_<axis>, e.g. wrist_acc_x or hip_gyr_z")
    if ignored:
        repairs.append("ignored columns that are neither time nor sensor: " + ", ".join(ignored[:10]))
    if len(frame) == 0:
        raise InputError(f"{where}: header only, no samples; export the recording again")

    # ---- values, column-major: every check and repair runs channel by channel
    values = np.empty((len(channels), len(frame)), dtype=np.float64).T
    for j, c in enumerate(sensor_cols):
        values[:, j] = _numeric_column(frame[c], where, c)
    for j, c in enumerate(channels):
        col = values[:, j]
        if np.isnan(col).all():
            raise InputError(f"{where}: column {sensor_cols[j]!r} holds no values; drop the column")
        finite = col[~np.isnan(col)]
        bad = np.flatnonzero(np.abs(finite) > ABSURD[kinds[j]] / factors[j])
        if bad.size or np.isinf(finite).any():
            row = int(np.flatnonzero(~np.isnan(col))[bad[0] if bad.size else
                                                     np.flatnonzero(np.isinf(finite))[0]])
            raise InputError(
                f"{where}: row {row + 2}, column {sensor_cols[j]!r}: value {col[row]:g} is beyond "
                f"any body-worn sensor in {units[c]}; check the column's unit (e.g. "
                f"{sensor_cols[j].split('[')[0]}[{'m/s2' if kinds[j] == 'acc' else 'rad/s'}]) or the data")
    values *= np.asarray(factors)[None, :]
    converted = sorted({units[c] for c in channels} - set(CANONICAL_UNITS.values()))
    if converted:
        repairs.append("converted " + ", ".join(converted) + " to g and deg/s")

    # ---- time
    start_time = None
    if tcol is None:
        if rate is None:
            raise InputError(f"{where}: no time column; add a 'time' column (seconds or ISO-8601) "
                             "or give the sampling rate with --rate HZ")
        t = np.arange(len(frame), dtype=np.float64) / rate
    else:
        t, start_time = _time_column(frame[tcol], where, tcol)
        infinite = np.flatnonzero(~np.isfinite(t))
        if infinite.size:
            r = int(infinite[0])
            raise InputError(f"{where}: row {r + 2}, column {tcol!r}: time {t[r]:g} is not a finite "
                             "number of seconds; fix the cell")
    if len(t) >= 2:
        dt = np.diff(t)
        back = np.flatnonzero(dt < 0)
        if back.size:
            r = int(back[0]) + 1
            raise InputError(f"{where}: row {r + 2}, column {tcol!r}: time goes backwards "
                             f"({t[r - 1]:.6g} then {t[r]:.6g}); sort the rows by time or fix the clock")
        dup = np.flatnonzero(dt == 0)
        if dup.size:
            r = int(dup[0]) + 1
            raise InputError(f"{where}: row {r + 2}, column {tcol!r}: duplicate timestamp "
                             f"{t[r]:.6g}; remove repeated rows")
        nominal_dt = 1.0 / rate if rate is not None else float(np.median(dt))
        if not (nominal_dt > 0 and MIN_RATE <= 1.0 / nominal_dt <= MAX_RATE):
            raise InputError(f"{where}: column {tcol!r}: median time step {nominal_dt:.6g} s is "
                             "not a sampling rate; give the time in seconds, or --rate HZ")
        small = np.flatnonzero(dt < 0.25 * nominal_dt)
        if small.size:
            r = int(small[0]) + 1
            raise InputError(f"{where}: row {r + 2}, column {tcol!r}: timestamps {dt[small[0]]:.3g} s "
                             f"apart where samples come every {nominal_dt:.3g} s; remove duplicated "
                             "rows or give the right --rate")
        fs = 1.0 / nominal_dt
        if rate is None:
            fs = _tidy_rate(fs)
        # the uniform grid spans first to last time; pauses fill it with gaps. A grid far larger
        # than the file means a clock jump, not a pause, and would not fit in memory
        n_grid = (t[-1] - t[0]) * fs + 1
        if n_grid > max(10 * len(t), MAX_GRID_SAMPLES):
            r = int(np.argmax(dt)) + 1
            raise InputError(f"{where}: row {r + 2}, column {tcol!r}: time jumps from "
                             f"{t[r - 1]:.6g} to {t[r]:.6g} s, a pause of {dt[r - 1]:.3g} s in "
                             f"{len(t)} samples; fix the clock or split the recording there")
    else:
        fs = float(rate) if rate is not None else None
        if fs is None:
            raise InputError(f"{where}: a single sample; a recording needs many samples")
    signal, valid = _to_grid(t, values, fs, max_gap_s, max_fill_s, repairs)
    if start_time is not None:
        start_time = _shift_iso(start_time, 0.0)
    return Recording(name=name, source_path=where, content_hash=content_hash, rate=float(fs),
                     channels=channels, units=units, signal=signal.astype(np.float32, copy=False),
                     valid=valid, start_time=start_time, repairs=repairs)


def _numeric_column(col: pd.Series, where: str, name: str) -> np.ndarray:
    if col.dtype.kind in "fiu":
        return col.to_numpy(dtype=np.float64)
    if col.dtype.kind == "b":
        raise InputError(f"{where}: column {name!r} holds true/false values, not numbers; drop it")
    text = col.astype(str).str.strip()
    empty = text.isin(["", "nan", "NaN", "NA", "null", "NULL", "None"])
    num = pd.to_numeric(text.where(~empty, None), errors="coerce")
    bad = num.isna() & ~empty
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(f"{where}: row {i + 2}, column {name!r}: {text.iloc[i][:30]!r} is not a "
                         "number; fix the cell or leave it empty (gaps are filled or skipped)")
    return num.to_numpy(dtype=np.float64)


def _time_column(col: pd.Series, where: str, name: str) -> tuple[np.ndarray, str | None]:
    text = col.astype(str).str.strip() if col.dtype.kind not in "fiuM" else None
    if col.dtype.kind == "M":
        ts = pd.to_datetime(col, utc=True)
    elif text is not None and text.str.contains(r"^\d{4}-\d{2}-\d{2}", regex=True).any():
        try:
            ts = pd.to_datetime(text, utc=True, format="ISO8601")
        except (ValueError, TypeError):
            bad = pd.to_datetime(text, utc=True, format="ISO8601", errors="coerce").isna()
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(f"{where}: row {i + 2}, column {name!r}: {text.iloc[i][:40]!r} is not an "
                             "ISO-8601 time; use e.g. 2026-09-14T06:30:00.020Z") from None
    else:
        t = _numeric_column(col, where, name)
        miss = np.flatnonzero(np.isnan(t))
        if miss.size:
            raise InputError(f"{where}: row {int(miss[0]) + 2}, column {name!r}: time is missing; "
                             "every row needs a time")
        return t, None
    if ts.isna().any():
        i = int(np.flatnonzero(ts.isna().to_numpy())[0])
        raise InputError(f"{where}: row {i + 2}, column {name!r}: time is missing; every row needs a time")
    t = (ts - ts.iloc[0]).dt.total_seconds().to_numpy(dtype=np.float64)
    return t, ts.iloc[0].strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _tidy_rate(fs: float) -> float:
    """Round an estimated rate to a whole number of Hz when within 0.5 % of it."""
    r = round(fs)
    return float(r) if r > 0 and abs(fs - r) / r < 0.005 else float(fs)


def _to_grid(t: np.ndarray, values: np.ndarray, fs: float, max_gap_s: float, max_fill_s: float,
             repairs: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Resample onto the uniform grid t0 + k/fs; short missing runs filled, long ones and gaps kept.

    Returns the signal as float32 (NaN where not valid) and the valid mask. ``values`` (float64) is
    changed in place (short runs filled); each channel is handled on its own, so a column-major
    ``values`` (one contiguous run of memory per channel) is fastest, and the signal returned is
    column-major too. Linear in the number of samples: every step touches each sample a fixed
    number of times, whatever the number of missing runs or gaps.
    """
    n, c = values.shape
    nan = np.empty((c, n), dtype=bool)
    for j in range(c):
        np.isnan(values[:, j], out=nan[j])
    # 1. short runs of missing values: interpolate in time between the run's two neighbours
    if nan.any():
        max_fill = max(1, int(round(max_fill_s * fs)))
        filled = 0
        for j in range(c):  # loop over channels
            if nan[j].any():
                filled += _fill_short_runs(t, values[:, j], max_fill)
                np.isnan(values[:, j], out=nan[j])
        if filled:
            repairs.append(f"filled {filled} missing values (runs up to {max_fill_s:g} s)")
    row_ok = ~nan.any(axis=0)
    del nan
    # 2. uniform grid
    dt = np.diff(t)
    nominal = 1.0 / fs
    jitter = bool(dt.size) and float(np.max(np.abs(dt - nominal))) > 1e-6 * nominal
    n_grid = int(math.floor((t[-1] - t[0]) * fs + 1e-6)) + 1
    grid = t[0] + np.arange(n_grid) / fs
    out = np.empty((c, n_grid), dtype=np.float32)  # one row per channel; returned transposed
    if not jitter and n_grid == n:
        for j in range(c):
            out[j] = values[:, j]
        valid = row_ok.copy()
    else:
        # Linear interpolation in time, one channel at a time, with the positions on the grid
        # found once for all channels. A grid point is valid when it falls on a complete row or
        # between two consecutive complete rows; interpolating over all rows therefore gives, at
        # every valid point, what interpolating over the complete rows alone gives (the arithmetic
        # of numpy.interp), except NaN where a point within rounding of a row is followed by a
        # missing value: such a point takes its row.
        left = np.clip(np.searchsorted(t, grid, side="right") - 1, 0, n - 1)
        right = np.minimum(left + 1, n - 1)
        exact = np.abs(t[left] - grid) <= 1e-9 * max(1.0, abs(t[-1]))
        valid = row_ok[left] & (exact | row_ok[right])
        lo = np.minimum(left, n - 2)
        hi = lo + 1
        span = t[hi] - t[lo]
        offset = grid - t[lo]
        for j in range(c):  # loop over channels
            y = values[:, j]
            y_lo = y[lo]
            v = y[hi] - y_lo
            v /= span
            v *= offset
            v += y_lo
            # a point within rounding of a complete row that a missing value follows
            on_row = np.flatnonzero(np.isnan(v) & valid)
            v[on_row] = y[left[on_row]]
            out[j] = v
        if jitter:
            repairs.append(f"resampled jittered timestamps onto a uniform {fs:g} Hz grid")
    # 3. pauses in time longer than max_gap_s are gaps; so are runs of missing values left over
    if dt.size:
        long = np.flatnonzero(dt > max(max_gap_s, 1.5 * nominal))
        if long.size:
            # grid points strictly inside (t[k], t[k + 1]) for each long pause k
            lo = np.searchsorted(grid, t[long] + 1e-9, side="right")
            hi = np.searchsorted(grid, t[long + 1] - 1e-9, side="left")
            marks = np.zeros(n_grid + 1, dtype=np.int64)
            keep = hi > lo
            np.add.at(marks, lo[keep], 1)
            np.add.at(marks, hi[keep], -1)
            valid &= np.cumsum(marks[:-1]) == 0
            repairs.append(f"kept {long.size} pause(s) longer than {max_gap_s:g} s as gaps")
    invalid = ~valid
    if invalid.any():
        out[:, invalid] = np.nan
        kept = len(_runs(invalid))
        if not any("gaps" in r for r in repairs):
            repairs.append(f"kept {kept} run(s) of missing values as gaps")
    return out.T, valid


def _fill_short_runs(t: np.ndarray, column: np.ndarray, max_fill: int) -> int:
    """Fill runs of NaN of at most ``max_fill`` samples that have a value on both sides, in place.

    Each filled value is the linear interpolation in time between the run's two neighbours (what
    ``numpy.interp`` over the column's values gives, in the same arithmetic). Returns how many
    values were filled.
    """
    missing = np.isnan(column)
    if not missing.any():
        return 0
    padded = np.concatenate([[False], missing, [False]])
    edges = np.flatnonzero(padded[1:] != padded[:-1])
    a, b = edges[0::2], edges[1::2]
    keep = (b - a <= max_fill) & (a > 0) & (b < column.size)
    a, b = a[keep], b[keep]
    if not a.size:
        return 0
    lengths = b - a
    # every sample of every kept run, with the index of its run
    run = np.repeat(np.arange(a.size), lengths)
    idx = np.arange(int(lengths.sum())) - np.repeat(np.cumsum(lengths) - lengths, lengths) + a[run]
    x0, x1 = t[a - 1], t[b]
    y0, y1 = column[a - 1], column[b]
    slope = (y1 - y0) / (x1 - x0)
    column[idx] = slope[run] * (t[idx] - x0[run]) + y0[run]
    return int(idx.size)


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    padded = np.concatenate([[False], mask, [False]])
    edges = np.flatnonzero(padded[1:] != padded[:-1])
    return list(zip(edges[0::2].tolist(), edges[1::2].tolist()))


def _shift_iso(iso: str, seconds: float) -> str:
    ts = pd.Timestamp(iso) + pd.Timedelta(seconds=seconds)
    return ts.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
