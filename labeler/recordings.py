"""Reading recordings: CSV (plain or gzip-compressed) or Parquet files of body-worn motion sensors.

A recording file has one row per sample and one column per sensor channel, named by the convention of
:mod:`labeler.channels` (``wrist_acc_x``, ``hip_gyr_z[rad/s]`` ...) or mapped to it by a column
mapping (``columns``: file column -> channel; see :mod:`labeler.profiles`). Time is either

- a column named ``time`` (or ``t``, ``timestamp``, or the one given with ``time_column``), holding
  numbers (seconds, or the unit given as ``time_unit``; Unix time in ms, us or ns is recognised) or
  clock times (ISO-8601, or the layout given as ``time_format``; a zone-less clock needs ``tz``), see
  :mod:`labeler.timecolumn`, or
- absent, in which case the sampling rate must be given (``rate``) and samples are taken as uniform.

What is normal in real recordings is repaired, and each repair is noted in ``Recording.repairs``:
jittered timestamps are resampled onto a uniform grid (linear interpolation), short runs of missing
values (up to ``max_fill_s``, default 0.25 s) are interpolated, longer runs and pauses in time longer
than ``max_gap_s`` (default 1 s) are kept as gaps that no window crosses; a byte-order mark is dropped;
semicolon- or tab-separated files are read as such; lines before the column names (a device's
preamble) are skipped; columns that are neither time nor sensor are ignored. What reading found
rather than was told is noted in ``Recording.notes``: Unix time, a preamble, an acceleration unit
read from the level at rest (:mod:`labeler.gravity`). What cannot be repaired raises
:class:`labeler.errors.InputError` with one line that names the file, the row or column and the fix,
before anything is written.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import math
import os
import re
import threading
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from labeler.channels import CANONICAL_UNITS, UNIT_FACTORS, parse_channel, triads
from labeler.cores import usable_cores
from labeler.errors import InputError
from labeler.gravity import finite_rest_level, judge_level
from labeler.timecolumn import median, read_time_column

TIME_COLUMNS = ("time", "t", "timestamp", "time_s", "seconds", "datetime", "date_time")
DEFAULT_MAX_GAP_S = 1.0
DEFAULT_MAX_FILL_S = 0.25
# beyond these, a value is not a body-worn motion sensor reading in the stated unit; most likely the
# unit is wrong (common practice, no source: consumer IMUs saturate at 16 g and 2000 deg/s, research
# devices at up to 200 g / 4000 deg/s)
ABSURD = {"acc": 400.0, "gyr": 40000.0}
ABSURD_AT_REST_G = 16.0  # no unit makes a still sensor read this; saying "keep it" would not help
MIN_RATE, MAX_RATE = 1.0, 10000.0
MAX_GRID_SAMPLES = 5_000_000  # a grid may exceed 10x the file's samples up to this (28 h at 50 Hz)
HEAD_BYTES = 1 << 16          # what is read to find the separator and the column names
MAX_PREAMBLE_LINES = 50


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
    notes: list[str] = field(default_factory=list)     # what was found rather than told
    sources: dict[str, str] = field(default_factory=dict)  # channel -> the file's column
    time_read: str = ""            # how the time was read (for a dry run)
    found: dict = field(default_factory=dict)  # reading options found, not given (time_unit ...)

    @property
    def n_samples(self) -> int:
        return int(self.signal.shape[0])

    @property
    def duration_s(self) -> float:
        return self.n_samples / self.rate

    def gaps(self) -> list[tuple[float, float]]:
        """(start s, length s) of every run of samples no window may use."""
        return [(a / self.rate, (b - a) / self.rate) for a, b in _runs(~self.valid)]


def file_hash(path: str | os.PathLike, stop: threading.Event | None = None) -> str:
    """The SHA-256 of the file's bytes (hex); "" when ``stop`` is set before the end."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            if stop is not None and stop.is_set():
                return ""
            h.update(block)
    return h.hexdigest()


class _HashInBackground:
    """The file's hash, computed in a thread of its own while the file is parsed or checked (the
    file read and the hash update run without the interpreter lock)."""

    def __init__(self, path: Path):
        self._stop = threading.Event()
        self._result: list = []
        self._thread = threading.Thread(target=self._run, args=(path,), daemon=True,
                                        name="labeler-file-hash")
        self._thread.start()

    def _run(self, path: Path) -> None:
        try:
            self._result.append(file_hash(path, self._stop))
        except BaseException as exc:  # handed to the reading thread by result()
            self._result.append(exc)

    def result(self) -> str:
        self._thread.join()
        out = self._result[0]
        if isinstance(out, BaseException):
            raise out
        return out

    def cancel(self) -> None:
        self._stop.set()
        self._thread.join()


def _workers() -> int:
    """Threads the numeric passes of one read may use: the cores this process may run on."""
    return min(_MAX_WORKERS, usable_cores())


#: at most this many threads per read; below _PARALLEL_FROM samples one thread does everything
_MAX_WORKERS = 4
_PARALLEL_FROM = 1 << 16


def _each(fn, items: list, parallel: bool) -> list:
    """``[fn(x) for x in items]``, shared out among up to ``_workers()`` threads (the calling one
    among them) when ``parallel``. For numpy passes over large arrays, which run without the
    interpreter lock; every item must write only to memory of its own. All threads have finished
    when this returns or raises."""
    workers = min(_workers(), len(items)) if parallel else 1
    if workers < 2:
        return [fn(x) for x in items]
    results: list = [None] * len(items)
    taken = iter(range(len(items)))
    lock = threading.Lock()
    failed: list[BaseException] = []

    def work() -> None:
        while not failed:
            with lock:
                i = next(taken, None)
            if i is None:
                return
            try:
                results[i] = fn(items[i])
            except BaseException as exc:
                failed.append(exc)

    threads = [threading.Thread(target=work, daemon=True) for _ in range(workers - 1)]
    for th in threads:
        th.start()
    work()
    for th in threads:
        th.join()
    if failed:
        raise failed[0]
    return results


def recording_name(path: str | os.PathLike) -> str:
    """A tidy name from a file name: the stem, odd characters replaced by '_'."""
    stem = Path(path).name
    for suffix in (".csv.gz", ".tsv.gz", ".txt.gz", ".csv", ".parquet", ".pq", ".tsv", ".txt",
                   ".gz"):
        if stem.lower().endswith(suffix):
            stem = stem[: -len(suffix)]
            break
    name = re.sub(r"[^A-Za-z0-9._-]+", "_", stem).strip("_.")
    return name or "recording"


def read_recording(path: str | os.PathLike, *, rate: float | None = None,
                   time_column: str | None = None, time_unit: str | None = None,
                   time_format: str | None = None, tz: str | None = None,
                   columns: dict[str, str] | None = None, skip_rows: int | None = None,
                   acc_unit: str | None = None, gyr_unit: str | None = None,
                   max_gap_s: float = DEFAULT_MAX_GAP_S, max_fill_s: float = DEFAULT_MAX_FILL_S,
                   name: str | None = None, options_origin: str = "--column") -> Recording:
    """Read, validate and repair one recording file. Raises InputError on what cannot be repaired.

    ``columns`` maps file columns to channel names; ``skip_rows`` lines before the column names are
    skipped (None: found; see the module docstring for the rest).
    """
    path = Path(path)
    where = str(path)
    if rate is not None and not (isinstance(rate, (int, float)) and math.isfinite(rate)
                                 and MIN_RATE <= rate <= MAX_RATE):
        raise InputError(f"{where}: sampling rate {rate} Hz is not usable; give --rate between "
                         f"{MIN_RATE:g} and {MAX_RATE:g} Hz")
    _check_units(where, acc_unit, gyr_unit)
    if not path.exists():
        raise InputError(f"{where}: no such file; check the path")
    if path.is_dir():
        raise InputError(f"{where}: is a folder; give recording files (CSV or Parquet)")
    repairs: list[str] = []
    notes: list[str] = []
    known = set(columns or {}) | ({time_column} if time_column else set())
    found: dict = {}
    # The hash (needed only at the end, for the duplicate check) is computed in a thread while
    # this one works alone: during the CSV parser, after the Parquet reader (which uses every
    # core itself).
    hashing = None if _is_parquet(path) else _HashInBackground(path)
    try:
        frame, first_row = _read_table(path, repairs, notes, skip_rows, known, found)
        if hashing is None:
            hashing = _HashInBackground(path)
        rec = recording_from_frame(frame, where=where, content_hash="",
                                   name=name or recording_name(path), rate=rate,
                                   time_column=time_column, time_unit=time_unit,
                                   time_format=time_format, tz=tz, columns=columns,
                                   acc_unit=acc_unit, gyr_unit=gyr_unit, max_gap_s=max_gap_s,
                                   max_fill_s=max_fill_s, repairs=repairs, notes=notes,
                                   first_row=first_row, options_origin=options_origin,
                                   found=found)
    except BaseException:
        if hashing is not None:
            hashing.cancel()
        raise
    rec.content_hash = hashing.result()
    return rec


def _check_units(where: str, acc_unit: str | None, gyr_unit: str | None) -> None:
    if acc_unit is not None and acc_unit not in UNIT_FACTORS["acc"]:
        raise InputError(f"{where}: unknown acceleration unit {acc_unit!r}; use "
                         + " or ".join(sorted(UNIT_FACTORS['acc'])))
    if gyr_unit is not None and gyr_unit not in UNIT_FACTORS["gyr"]:
        raise InputError(f"{where}: unknown angular-rate unit {gyr_unit!r}; use "
                         + " or ".join(sorted(UNIT_FACTORS['gyr'])))


def _read_table(path: Path, repairs: list[str], notes: list[str], skip_rows: int | None,
                known: set[str], found: dict) -> tuple[pd.DataFrame, int]:
    """The file as a table, and the file line of its first row of values."""
    where = str(path)
    if path.stat().st_size == 0:
        raise InputError(f"{where}: the file is empty; export the recording again")
    with open(path, "rb") as fh:
        head = fh.read(HEAD_BYTES)
    is_parquet = _is_parquet(path, head)
    if is_parquet:
        try:
            import pyarrow.parquet as pq

            return pq.read_table(path).to_pandas(), 2
        except Exception as exc:  # pyarrow raises several types for damaged files
            raise InputError(f"{where}: not a readable Parquet file ({_short(exc)}); export it "
                             "again or give a CSV") from None
    compression = None
    if head.startswith(b"\x1f\x8b"):
        compression = "gzip"
        try:
            with gzip.open(path, "rb") as fh:
                head = fh.read(HEAD_BYTES)
        except (OSError, EOFError, zlib.error) as exc:
            raise InputError(f"{where}: a damaged gzip file ({_short(exc)}); compress or copy "
                             "the recording again") from None
        if not head:
            raise InputError(f"{where}: the gzip file holds nothing; export the recording again")
        repairs.append("read gzip-compressed text")
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
    lines = text_head.splitlines()
    complete = "\n" in text_head or "\r" in text_head
    if skip_rows is None:
        skip = _preamble_length(lines[:MAX_PREAMBLE_LINES], known)
        if skip:
            found["skip_rows"] = skip
            notes.append(f"skipped {skip} line(s) before the column names on line {skip + 1} "
                         f"(a preamble); say so with --skip-rows {skip}")
    else:
        skip = skip_rows
        if skip >= len(lines) and complete:
            raise InputError(f"{where}: --skip-rows {skip} skips every line of the file; give the "
                             "number of lines before the column names")
    first = lines[skip] if skip < len(lines) else ""
    if not first.strip():
        raise InputError(f"{where}: line {skip + 1} is empty; the first line must name the "
                         "columns" + (" (after the skipped lines)" if skip else ""))
    sep = _sniff_separator(first)
    names = [c.strip() for c in next(csv.reader([first], delimiter=sep))]
    if skip + 1 >= len(lines) and not complete:
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
                            low_memory=False, skiprows=skip, compression=compression)
    except pd.errors.ParserError as exc:
        raise InputError(f"{where}: cannot be parsed as CSV ({_short(exc)}); check that every row "
                         "has as many fields as the header") from None
    except UnicodeDecodeError:
        raise InputError(f"{where}: not UTF-8 text; save the CSV as UTF-8") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{where}: the file holds no columns; export the recording again") from None
    except (OSError, EOFError, zlib.error) as exc:  # a gzip stream cut short or damaged
        raise InputError(f"{where}: a damaged gzip file ({_short(exc)}); compress or copy the "
                         "recording again") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame, skip + 2


def _is_parquet(path: Path, head: bytes | None = None) -> bool:
    """Whether the file is read as Parquet: by its first bytes or its name."""
    if path.suffix.lower() in (".parquet", ".pq"):
        return True
    if head is None:
        try:
            with open(path, "rb") as fh:
                head = fh.read(4)
        except OSError:
            return False  # reading it says what is wrong
    return head.startswith(b"PAR1")


def _names_a_column(field_: str, known: set[str]) -> bool:
    name = field_.strip().strip('"').strip()
    if not name:
        return False
    if name in known or name.lower() in TIME_COLUMNS:
        return True
    try:
        return parse_channel(name) is not None
    except ValueError:
        return True  # a malformed channel name is still a column name


def _preamble_length(lines: list[str], known: set[str]) -> int:
    """Lines before the first one that names a time or sensor column; 0 when the first does or
    when no line does (then the first line is the header and the usual checks speak)."""
    for k, line in enumerate(lines):
        sep = _sniff_separator(line)
        fields_ = next(csv.reader([line], delimiter=sep), []) if line.strip() else []
        hits = sum(_names_a_column(f, known) for f in fields_)
        if hits >= 1 and (len(fields_) >= 2 or hits == len(fields_)):
            return k
    return 0


def _sniff_separator(header: str) -> str:
    counts = {s: header.count(s) for s in (",", ";", "\t")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


def _short(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    return text[:120] + ("..." if len(text) > 120 else "")


def recording_from_frame(frame: pd.DataFrame, *, where: str, content_hash: str, name: str,
                         rate: float | None = None, time_column: str | None = None,
                         time_unit: str | None = None, time_format: str | None = None,
                         tz: str | None = None, columns: dict[str, str] | None = None,
                         acc_unit: str | None = None, gyr_unit: str | None = None,
                         max_gap_s: float = DEFAULT_MAX_GAP_S,
                         max_fill_s: float = DEFAULT_MAX_FILL_S,
                         repairs: list[str] | None = None, notes: list[str] | None = None,
                         first_row: int = 2, options_origin: str = "--column",
                         found: dict | None = None) -> Recording:
    """Validate and repair a table of samples (see the module docstring). ``first_row`` is the
    file line of the table's first row, for messages."""
    repairs = [] if repairs is None else repairs
    notes = [] if notes is None else notes
    found = {} if found is None else found
    _check_units(where, acc_unit, gyr_unit)
    columns_in = [str(c) for c in frame.columns]
    if len(set(columns_in)) != len(columns_in):
        dup = next(c for c in columns_in if columns_in.count(c) > 1)
        raise InputError(f"{where}: column {dup!r} appears twice; rename or drop one")
    mapping = dict(columns or {})
    for src in mapping:
        if src not in columns_in:
            raise InputError(f"{where}: no column {src!r} for the column mapping ({options_origin} "
                             f"{src}={mapping[src]}); columns are " + ", ".join(columns_in[:12])
                             + "; fix the mapping")
    # ---- which column is time, which are sensors
    tcol = None
    if time_column is not None:
        if time_column not in columns_in:
            raise InputError(f"{where}: no column {time_column!r} (--time-column); columns are "
                             + ", ".join(columns_in[:12]))
        tcol = time_column
    else:
        for c in columns_in:
            if c.strip().lower() in TIME_COLUMNS and c not in mapping:
                tcol = c
                break
    sensor_cols: list[str] = []
    channels: list[str] = []
    units: dict[str, str] = {}
    stated: dict[str, str | None] = {}   # channel -> who stated its unit (None: assumed)
    factors: list[float] = []
    kinds: list[str] = []
    sources: dict[str, str] = {}
    ignored = []
    for c in columns_in:
        if c == tcol:
            continue
        spec = mapping.get(c, c)
        try:
            ch = parse_channel(spec)
        except ValueError as exc:
            label = f"column {c!r}" if spec == c else f"column {c!r} ({options_origin} {c}={spec})"
            raise InputError(f"{where}: {label}: {exc}") from None
        if ch is None:
            ignored.append(c)
            continue
        if ch.name in channels:
            raise InputError(f"{where}: column {c!r} repeats channel {ch.name}; keep one")
        given = acc_unit if ch.kind == "acc" else gyr_unit
        unit = ch.unit or given or CANONICAL_UNITS[ch.kind]
        stated[ch.name] = ("column" if ch.unit else
                           ("option" if given is not None else None))
        sensor_cols.append(c)
        channels.append(ch.name)
        sources[ch.name] = c
        units[ch.name] = unit
        factors.append(UNIT_FACTORS[ch.kind][unit])
        kinds.append(ch.kind)
    if not channels:
        shown = ", ".join(repr(c) for c in columns_in[:8]) or "none"
        raise InputError(f"{where}: no sensor channel among the columns ({shown}); name them "
                         "<site>_<kind>_<axis>, e.g. wrist_acc_x or hip_gyr_z, or map them with "
                         "--column FILE_COLUMN=CHANNEL")
    if ignored:
        repairs.append("ignored columns that are neither time nor sensor: " + ", ".join(ignored[:10]))
    if len(frame) == 0:
        raise InputError(f"{where}: header only, no samples; export the recording again")

    # ---- values: each channel's column as the table holds it (a float column is not copied and
    # never written to); every check and repair reads it channel by channel, in float64 (a float32
    # value is exact in float64), and the unit factors and filled values are applied on the way
    # onto the grid
    cols: list[np.ndarray] = []
    for j, c in enumerate(sensor_cols):
        col = frame[c]
        if isinstance(col.dtype, np.dtype) and col.dtype.kind == "f":
            cols.append(np.ascontiguousarray(col.to_numpy()))
        else:
            cols.append(_numeric_column(col, where, c, first_row))
    parallel = len(frame) >= _PARALLEL_FROM
    # the largest and smallest value of each column, NaN left out (NaN when the column holds none):
    # the check of empty columns here and of absurd values below
    extremes = _each(lambda col: (float(np.fmax.reduce(col)), float(np.fmin.reduce(col))), cols,
                     parallel)
    for j, c in enumerate(channels):
        if math.isnan(extremes[j][0]):
            raise InputError(f"{where}: column {sensor_cols[j]!r} holds no values; drop the column")

    # ---- time
    start_time = None
    if tcol is None:
        if rate is None:
            raise InputError(f"{where}: no time column; add a 'time' column (seconds or ISO-8601), "
                             "name it with --time-column, or give the sampling rate with --rate HZ")
        t = np.arange(len(frame), dtype=np.float64) / rate
        time_read = f"no time column: samples every 1/{rate:g} s (--rate)"
    else:
        tc = read_time_column(frame[tcol], where=where, name=tcol, first_row=first_row,
                              unit=time_unit, time_format=time_format, tz=tz, rate=rate)
        t, start_time, time_read = tc.t, tc.start_time, tc.described
        if tc.note:
            notes.append(tc.note)
        if tc.unit_found:
            found["time_unit"] = tc.unit_found
        # one pass when all is well (a sum is finite only when every term is); the row otherwise
        if not np.isfinite(np.add.reduce(t)):
            infinite = np.flatnonzero(~np.isfinite(t))
            if infinite.size:
                r = int(infinite[0])
                raise InputError(f"{where}: row {r + first_row}, column {tcol!r}: time {t[r]:g} is "
                                 "not a finite number of seconds; fix the cell")
    dt = None
    if len(t) >= 2:
        dt = np.diff(t)
        # the smallest step says whether any of the three checks below has a row to name
        least = float(np.min(dt))
        if least < 0:
            r = int(np.flatnonzero(dt < 0)[0]) + 1
            raise InputError(f"{where}: row {r + first_row}, column {tcol!r}: time goes backwards "
                             f"({t[r - 1]:.6g} then {t[r]:.6g} s from the first sample); sort the "
                             "rows by time or fix the clock")
        if least == 0:
            r = int(np.flatnonzero(dt == 0)[0]) + 1
            raise InputError(f"{where}: row {r + first_row}, column {tcol!r}: duplicate timestamp "
                             f"{_time_cell(frame, tcol, r)}; remove repeated rows")
        nominal_dt = 1.0 / rate if rate is not None else median(dt)
        if not (nominal_dt > 0 and MIN_RATE <= 1.0 / nominal_dt <= MAX_RATE):
            raise InputError(f"{where}: column {tcol!r}: median time step {nominal_dt:.6g} s is "
                             "not a sampling rate; check the time column or --time-unit")
        if least < 0.25 * nominal_dt:
            small = np.flatnonzero(dt < 0.25 * nominal_dt)
            r = int(small[0]) + 1
            raise InputError(f"{where}: row {r + first_row}, column {tcol!r}: timestamps "
                             f"{dt[small[0]]:.3g} s apart where samples come every {nominal_dt:.3g} "
                             "s; remove duplicated rows or give the right --rate")
        fs = 1.0 / nominal_dt
        if rate is None:
            fs = _tidy_rate(fs)
        # the uniform grid spans first to last time; pauses fill it with gaps. A grid far larger
        # than the file means a clock jump, not a pause, and would not fit in memory
        n_grid = (t[-1] - t[0]) * fs + 1
        if n_grid > max(10 * len(t), MAX_GRID_SAMPLES):
            r = int(np.argmax(dt)) + 1
            raise InputError(f"{where}: row {r + first_row}, column {tcol!r}: time jumps from "
                             f"{t[r - 1]:.6g} to {t[r]:.6g} s, a pause of {dt[r - 1]:.3g} s in "
                             f"{len(t)} samples; fix the clock or split the recording there")
    else:
        fs = float(rate) if rate is not None else None
        if fs is None:
            raise InputError(f"{where}: a single sample; a recording needs many samples")
    _check_gravity(cols, channels, sensor_cols, units, factors, stated, where, notes, found,
                   block=max(8, int(round(fs))))
    for j, c in enumerate(channels):
        limit = ABSURD[kinds[j]] / factors[j]
        # the largest and smallest value, NaN left out: an infinite value is beyond the limit too
        if not (extremes[j][0] <= limit and extremes[j][1] >= -limit):
            col = cols[j].astype(np.float64)
            row = int(np.flatnonzero(np.abs(col) > limit)[0])  # NaN compares false
            raise InputError(
                f"{where}: row {row + first_row}, column {sensor_cols[j]!r}: value {col[row]:g} is "
                f"beyond any body-worn sensor in {units[c]}; check the column's unit (e.g. "
                f"{channels[j]}[{'m/s2' if kinds[j] == 'acc' else 'rad/s'}]) or the data")
    converted = sorted({units[c] for c in channels} - set(CANONICAL_UNITS.values()))
    if converted:
        repairs.append("converted " + ", ".join(converted) + " to g and deg/s")
    signal, valid = _to_grid(t, cols, factors, fs, max_gap_s, max_fill_s, repairs, dt)
    if start_time is not None:
        start_time = _shift_iso(start_time, 0.0)
    return Recording(name=name, source_path=where, content_hash=content_hash, rate=float(fs),
                     channels=channels, units=units, signal=signal.astype(np.float32, copy=False),
                     valid=valid, start_time=start_time, repairs=repairs, notes=notes,
                     sources=sources, time_read=time_read,
                     found={k: v for k, v in found.items() if v is not None})


def _time_cell(frame: pd.DataFrame, tcol: str, r: int) -> str:
    value = frame[tcol].iloc[r]
    return f"{value:g}" if isinstance(value, (int, float, np.integer, np.floating)) else str(value)


def _check_gravity(cols: list[np.ndarray], channels: list[str], sensor_cols: list[str],
                   units: dict[str, str], factors: list[float], stated: dict[str, str | None],
                   where: str, notes: list[str], found: dict, block: int = 32) -> None:
    """At rest |acc| is 1 g: convert a triad whose assumed unit is wrong (with a note), refuse one
    whose stated unit is (see :mod:`labeler.gravity`). Changes ``units`` and ``factors``."""
    assumed_units = set()
    acc = [(site, list(idx)) for site, kind, idx in triads(channels) if kind == "acc"]
    # each triad's level on a thread of its own (a verdict changes only its own triad's factors)
    levels = _each(lambda idx: finite_rest_level(_magnitude([cols[j] for j in idx],
                                                     [factors[j] for j in idx]), block),
                   [idx for _, idx in acc], cols[0].size >= _PARALLEL_FROM)
    for (site, idx), level in zip(acc, levels):
        if level is None:
            continue
        unit = units[channels[idx[0]]]
        who = [stated[channels[j]] for j in idx]
        verdict = judge_level(level, unit, stated=any(w is not None for w in who))
        names = "/".join(sensor_cols[j] for j in idx)
        if all(w is None for w in who):
            assumed_units.add(verdict.unit)
        if verdict.action == "ok":
            continue
        if verdict.action == "convert":
            for j in idx:
                units[channels[j]] = verdict.unit
                factors[j] = UNIT_FACTORS["acc"][verdict.unit]
            notes.append(f"read {names} as {verdict.unit}: at rest |acc| is {level:.3g} g if read "
                         f"as {unit}, {verdict.fitted_level_g:.3g} g as {verdict.unit}; say so with "
                         f"--acc-unit {verdict.unit} to silence this")
        elif verdict.action == "note":
            if level < 1.0:
                notes.append(f"{names}: at rest |acc| is {level:.2g} g, not 1 g: gravity seems "
                             f"removed by the device, so the unit {unit} cannot be checked")
            else:
                notes.append(f"{names}: at rest |acc| is {level:.3g} g, not 1 g; kept in the "
                             f"stated unit {unit}")
        elif verdict.unit != unit:
            fix = (f"name the columns {site}_acc_x[{verdict.unit}] ..." if "column" in who
                   else f"give --acc-unit {verdict.unit}")
            raise InputError(f"{where}: columns {names}: at rest |acc| is {level:.3g} g in the "
                             f"stated unit {unit} but {verdict.fitted_level_g:.3g} g in "
                             f"{verdict.unit}; the values are in {verdict.unit}: {fix}")
        else:
            keep = ("" if level > ABSURD_AT_REST_G else
                    ", or state the unit with --acc-unit to keep the values")
            raise InputError(f"{where}: columns {names}: at rest |acc| is {level:.3g} g, far from "
                             "1 g in g, m/s2 or mg; check the sensor's scale (raw counts?) and the "
                             f"column mapping{keep}")
    if len(assumed_units) == 1 and assumed_units != {CANONICAL_UNITS["acc"]}:
        found["acc_unit"] = assumed_units.pop()


def _magnitude(cols: list[np.ndarray], factors: list[float]) -> np.ndarray:
    """The finite values of ``sqrt(sum((col * f) ** 2))`` over the columns and their factors, in
    row order: in float64 in the same arithmetic and order, in blocks of rows so that the
    temporaries stay in the cache."""
    n = cols[0].size
    out = np.empty(n, dtype=np.float64)
    part = np.empty(min(n, _GRID_BLOCK), dtype=np.float64)
    kept = 0  # the finite values found so far fill out[:kept]
    for a in range(0, n, _GRID_BLOCK):
        b = min(a + _GRID_BLOCK, n)
        total, term = out[kept:kept + b - a], part[: b - a]
        for i, (col, f) in enumerate(zip(cols, factors)):
            into = total if i == 0 else term
            if f == 1.0:  # (x * 1.0) ** 2 is x * x
                np.multiply(col[a:b], col[a:b], out=into, dtype=np.float64)
            else:
                np.multiply(col[a:b], f, out=into, dtype=np.float64)
                np.multiply(into, into, out=into)
            if i:
                total += term
        np.sqrt(total, out=total)
        finite = np.isfinite(total)
        if finite.all():
            kept += b - a
        else:
            values = total[finite]
            out[kept:kept + values.size] = values
            kept += values.size
    return out[:kept]


def _numeric_column(col: pd.Series, where: str, name: str, first_row: int = 2) -> np.ndarray:
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
        raise InputError(f"{where}: row {i + first_row}, column {name!r}: {text.iloc[i][:30]!r} is "
                         "not a number; fix the cell or leave it empty (gaps are filled or skipped)")
    return num.to_numpy(dtype=np.float64)


def _tidy_rate(fs: float) -> float:
    """Round an estimated rate to a whole number of Hz when within 0.5 % of it."""
    r = round(fs)
    return float(r) if r > 0 and abs(fs - r) / r < 0.005 else float(fs)


#: grid points interpolated at a time in ``_to_grid`` (temporaries of 256 KiB per channel)
_GRID_BLOCK = 1 << 15


def _to_grid(t: np.ndarray, cols: list[np.ndarray], factors: list[float], fs: float,
             max_gap_s: float, max_fill_s: float, repairs: list[str],
             dt: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Resample onto the uniform grid t0 + k/fs; short missing runs filled, long ones and gaps kept.

    ``cols`` are the channels' values as read (any float type, not written to), ``factors`` their
    unit factors: a channel's value is ``float64(value) * factor``, or the value filled in. Returns
    the signal as float32 (NaN where not valid), column-major, and the valid mask. ``dt`` is
    ``numpy.diff(t)`` when the caller has it. Linear in the number of samples: every step touches
    each sample a fixed number of times, whatever the number of missing runs or gaps. Channels,
    and blocks of grid points, are shared out among threads (:func:`_each`); each writes only its
    own part of the output, so the result does not depend on the number of threads.

    Every value that is not NaN must be finite (the absurd-value check sees to it).
    """
    n, c = t.size, len(cols)
    parallel = n >= _PARALLEL_FROM
    nan = np.empty((c, n), dtype=bool)
    max_fill = max(1, int(round(max_fill_s * fs)))
    fills: list[tuple[np.ndarray, np.ndarray] | None] = [None] * c

    # 1. short runs of missing values: interpolated in time between the run's two neighbours
    def fill(j: int) -> tuple[int, bool]:
        """(values filled, whether the channel still misses some) for channel j; nan[j] set."""
        np.isnan(cols[j], out=nan[j])
        if not nan[j].any():
            return 0, False
        fills[j] = _short_run_fills(t, cols[j], factors[j], max_fill, nan[j])
        if fills[j] is None:
            return 0, True
        filled = fills[j][0]
        nan[j][filled] = False  # a filled value, from two finite ones, is finite
        return filled.size, bool(nan[j].any())

    done = _each(fill, list(range(c)), parallel)
    filled = sum(f for f, _ in done)
    has_nan = [h for _, h in done]
    if filled:
        repairs.append(f"filled {filled} missing values (runs up to {max_fill_s:g} s)")
    # rows with no missing value: one pass per channel that misses some (a reduction across the
    # rows of the (channels, samples) mask strides through memory and is ten times slower)
    row_bad = np.zeros(n, dtype=bool)
    for j in range(c):
        if has_nan[j]:
            row_bad |= nan[j]
    row_ok = ~row_bad
    del nan, row_bad

    def rows(j: int, r0: int, r1: int) -> np.ndarray:
        """Channel j's values of rows r0 .. r1 in float64: scaled, short runs filled."""
        y = cols[j][r0:r1]
        if factors[j] == 1.0 and fills[j] is None:
            return y.astype(np.float64, copy=False)  # read only
        y = y.astype(np.float64)
        if factors[j] != 1.0:
            y *= factors[j]
        if fills[j] is not None:
            at, value = fills[j]
            k0, k1 = np.searchsorted(at, (r0, r1))
            y[at[k0:k1] - r0] = value[k0:k1]
        return y

    # 2. uniform grid
    if dt is None:
        dt = np.diff(t)
    nominal = 1.0 / fs
    jitter = _jittered(dt, nominal)
    longer = np.flatnonzero(dt > 1.5 * nominal)  # steps that are dropouts or gaps, not jitter
    n_grid = int(math.floor((t[-1] - t[0]) * fs + 1e-6)) + 1
    grid = t[0] + np.arange(n_grid) / fs
    out = np.empty((c, n_grid), dtype=np.float32)  # one row per channel; returned transposed
    blocks = list(range(0, n_grid, _GRID_BLOCK))
    if not jitter and n_grid == n:
        def copy(a: int) -> None:
            b = min(a + _GRID_BLOCK, n)
            for j in range(c):
                out[j, a:b] = rows(j, a, b)

        _each(copy, blocks, parallel)
        valid = row_ok.copy()
    else:
        # Linear interpolation in time, one channel at a time, with the positions on the grid
        # found once for all channels. A grid point is valid when it falls on a complete row or
        # between two consecutive complete rows; interpolating over all rows therefore gives, at
        # every valid point, what interpolating over the complete rows alone gives (the arithmetic
        # of numpy.interp), except NaN where a point within rounding of a row is followed by a
        # missing value: such a point takes its row.
        counts = _rows_at_or_before(t, grid, fs, parallel)  # ascending, like the grid
        near = 1e-9 * max(1.0, abs(t[-1]))
        valid = np.empty(n_grid, dtype=bool)
        gappy = any(has_nan)

        def interpolate(a: int) -> None:
            """Grid points a .. a + _GRID_BLOCK (a block, so that the temporaries stay in the
            cache)."""
            b = min(a + _GRID_BLOCK, n_grid)
            g = grid[a:b]
            left = counts[a:b] - 1  # the row at or before each point
            np.clip(left, 0, n - 1, out=left)
            tail = bool(left[-1] == n - 1)  # points at or after the last row: the last block
            # each point is interpolated between rows lo and hi = lo + 1: its row and the next,
            # the last two rows for points at or after the last
            lo = np.minimum(left, n - 2) if tail else left
            hi = lo + 1
            ok_lo, ok_hi = row_ok[lo], row_ok[hi]
            t_lo = t[lo]
            if tail:
                exact = np.abs(t[left] - g) <= near
                ok_left, ok_right = row_ok[left], row_ok[np.minimum(left + 1, n - 1)]
            else:  # left is lo, the next row is hi
                exact = np.abs(t_lo - g) <= near
                ok_left, ok_right = ok_lo, ok_hi
            ok = valid[a:b]
            np.logical_and(ok_left, exact | ok_right, out=ok)
            span = t[hi] - t_lo
            offset = g - t_lo
            if gappy:
                # the valid points an interpolation may give NaN: those whose two rows are not
                # both complete (from two finite values, times strictly apart, it is finite)
                doubtful = np.flatnonzero(ok & ~(ok_lo & ok_hi))
            r0, r1 = int(lo[0]), int(hi[-1]) + 1  # the rows this block reads
            lo_r = lo - r0
            hi_r = lo_r + 1
            for j in range(c):  # loop over channels
                y = rows(j, r0, r1)
                y_lo = y[lo_r]
                v = y[hi_r] - y_lo
                v /= span
                v *= offset
                o = out[j, a:b]
                np.add(v, y_lo, out=o)  # in float64, rounded once to float32 on the way out
                if has_nan[j] and doubtful.size:
                    # a point within rounding of a complete row that a missing value follows
                    on_row = doubtful[np.isnan(o[doubtful])]
                    o[on_row] = y[left[on_row] - r0]

        _each(interpolate, blocks, parallel)
        del counts
        if jitter:
            repairs.append(f"resampled jittered timestamps onto a uniform {fs:g} Hz grid")
        short = int(np.count_nonzero(dt[longer] <= max(max_gap_s, 1.5 * nominal)))
        if short:
            repairs.append(f"interpolated across {short} dropout(s) of samples up to {max_gap_s:g} s")
    # 3. pauses in time longer than max_gap_s are gaps; so are runs of missing values left over
    if dt.size:
        long = longer[dt[longer] > max(max_gap_s, 1.5 * nominal)]
        if long.size:
            # grid points strictly inside (t[k], t[k + 1]) for each long pause k
            lo = np.searchsorted(grid, t[long] + 1e-9, side="right")
            hi = np.searchsorted(grid, t[long + 1] - 1e-9, side="left")
            keep = hi > lo
            if np.count_nonzero(keep) <= _FEW_PAUSES:
                for a, b in zip(lo[keep].tolist(), hi[keep].tolist()):
                    valid[a:b] = False
            else:  # many: one pass over the grid, whatever their number
                marks = np.zeros(n_grid + 1, dtype=np.int64)
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


#: up to this many pauses are marked one slice each, more by a running sum over the grid
_FEW_PAUSES = 256


def _jittered(dt: np.ndarray, nominal: float) -> bool:
    """Whether a step no longer than 1.5 nominal steps (longer ones are dropouts or gaps, not
    jitter) differs from the nominal step by more than a millionth of it. Block by block, so a
    jittered recording is known from its first block."""
    for a in range(0, dt.size, _GRID_BLOCK):
        d = dt[a:a + _GRID_BLOCK]
        if np.any((d <= 1.5 * nominal) & (np.abs(d - nominal) > 1e-6 * nominal)):
            return True
    return False


def _rows_at_or_before(t: np.ndarray, grid: np.ndarray, fs: float,
                       parallel: bool = False) -> np.ndarray:
    """For each point of ``grid`` (``grid[0] + k / fs``, ascending), how many of the ascending
    times ``t`` are at or before it: ``numpy.searchsorted(t, grid, side="right")``, in linear
    time. Each time's first grid point at or after it comes from its position on the grid,
    rounded up and then corrected against the grid's own values (so rounding in the position
    cannot move a time to the wrong side of a grid point); the counts are the running sum.
    The positions are found block by block of times (each time's on its own, so blocks may run
    on several threads)."""
    m = grid.size
    first = np.empty(t.size, dtype=np.int64)

    def place(a: int) -> None:
        b = min(a + _GRID_BLOCK, t.size)
        tb = t[a:b]
        pos = np.ceil((tb - grid[0]) * fs)
        np.clip(pos, 0, m, out=pos)
        f = first[a:b]
        f[:] = pos
        while True:  # rounding leaves a position one off at most; repeated until none is
            down = (f > 0) & (grid[np.maximum(f - 1, 0)] >= tb)
            up = (f < m) & (grid[np.minimum(f, m - 1)] < tb)
            if not (down.any() or up.any()):
                break
            f -= down
            f += up

    _each(place, list(range(0, t.size, _GRID_BLOCK)), parallel)
    return np.cumsum(np.bincount(first, minlength=m + 1)[:m])


def _short_run_fills(t: np.ndarray, column: np.ndarray, factor: float, max_fill: int,
                     missing: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """The values that fill the runs of NaN of at most ``max_fill`` samples that have a value on
    both sides: (rows ascending, float64 values), None when there are none. ``missing`` is
    ``numpy.isnan(column)``; the column's values count as ``float64(value) * factor``.

    Each filled value is the linear interpolation in time between the run's two neighbours (what
    ``numpy.interp`` over the column's values gives, in the same arithmetic).
    """
    if not missing.any():
        return None
    # the runs: a (first missing) where a value is followed by a missing one, b (first value
    # after) where a missing one is followed by a value; the column's ends are not runs' ends
    change = np.flatnonzero(missing[1:] != missing[:-1]) + 1
    a = change[missing[change]]
    b = change[~missing[change]]
    if missing[0]:
        a = np.concatenate([[0], a])
    if missing[-1]:
        b = np.concatenate([b, [column.size]])
    keep = (b - a <= max_fill) & (a > 0) & (b < column.size)
    a, b = a[keep], b[keep]
    if not a.size:
        return None
    lengths = b - a
    # every sample of every kept run, with the index of its run
    run = np.repeat(np.arange(a.size), lengths)
    idx = np.arange(int(lengths.sum())) - np.repeat(np.cumsum(lengths) - lengths, lengths) + a[run]
    x0, x1 = t[a - 1], t[b]
    y0, y1 = column[a - 1].astype(np.float64), column[b].astype(np.float64)
    if factor != 1.0:
        y0 *= factor
        y1 *= factor
    slope = (y1 - y0) / (x1 - x0)
    return idx, slope[run] * (t[idx] - x0[run]) + y0[run]


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    padded = np.concatenate([[False], mask, [False]])
    edges = np.flatnonzero(padded[1:] != padded[:-1])
    return list(zip(edges[0::2].tolist(), edges[1::2].tolist()))


def _shift_iso(iso: str, seconds: float) -> str:
    ts = pd.Timestamp(iso) + pd.Timedelta(seconds=seconds)
    return ts.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def conform_channels(rec: Recording, channels: list[str]) -> Recording:
    """The recording with the channels ``channels`` (a project's) in that order: channels the
    project lacks are left out and columns reordered, each noted. InputError naming what is missing
    when the recording lacks some of them (features of different channels cannot be compared, so a
    project holds one channel set)."""
    if list(rec.channels) == list(channels):
        return rec
    missing = [c for c in channels if c not in rec.channels]
    if missing:
        shown = ", ".join(missing[:6]) + (" ..." if len(missing) > 6 else "")
        raise InputError(f"{rec.source_path}: lacks the project's channels {shown}; map its columns "
                         "to them with --column, or add it to a project of its own")
    extra = [c for c in rec.channels if c not in channels]
    notes = list(rec.notes)
    if extra:
        notes.append("left out channels the project does not have: " + ", ".join(extra))
    elif rec.channels != channels:
        notes.append("put the columns in the project's channel order")
    order = [rec.channels.index(c) for c in channels]
    return Recording(**{**rec.__dict__, "channels": list(channels),
                        "units": {c: rec.units[c] for c in channels},
                        "sources": {c: rec.sources.get(c, c) for c in channels},
                        "signal": np.ascontiguousarray(rec.signal[:, order]), "notes": notes})
