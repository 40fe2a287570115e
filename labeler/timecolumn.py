"""A recording's time column, turned into seconds from its first sample and an absolute start.

Numbers are seconds unless a unit is given (``s``, ``ms``, ``us``, ``ns``); numbers whose size and
step are those of Unix time in ms, us or ns are read so without being told, with a note (Unix time
counts from 1970-01-01 UTC, so its zone is never a guess). Text is clock time: ISO-8601
(``2026-09-14T06:30:00.020+02:00``) or the layout given as ``time_format`` (strftime fields,
``%d/%m/%Y %H:%M:%S.%f``). A clock time without a zone is refused unless a zone is given (``tz``):
it is never taken as UTC silently. Each refusal is one line naming the file, row and column and the
fix.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from labeler.errors import InputError
from labeler.profiles import TIME_UNITS, check_zone

MIN_RATE, MAX_RATE = 1.0, 10000.0
# Unix time of 1973-03-03 and 2103-02-04, in seconds: a first value in this span, in some unit,
# with a step that is a sampling rate in that unit, is Unix time (common practice, no source)
EPOCH_SPAN_S = (1e8, 4.2e9)
_ISO_START = re.compile(r"^\d{4}-\d{2}-\d{2}")
_ZONE_END = r"[T ]\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)$"
_DAY_FIRST = re.compile(r"^(\d{1,2})([./-])(\d{1,2})\2(\d{2,4})(?:[ T](\d{1,2}:\d{2}(?::\d{2}(\.\d+)?)?))?")


@dataclass
class TimeColumn:
    t: np.ndarray            # seconds from the first sample, float64
    start_time: str | None   # ISO-8601 UTC of the first sample, when the column says
    described: str           # how the column was read, for `labeler add --dry-run`
    note: str | None = None  # said to the user when something was found rather than told
    unit_found: str | None = None  # the numeric unit found from the values (not given)


def read_time_column(col: pd.Series, *, where: str, name: str, first_row: int = 2,
                     unit: str | None = None, time_format: str | None = None,
                     tz: str | None = None, rate: float | None = None) -> TimeColumn:
    """Seconds from the first sample; ``first_row`` is the file line of the first value."""
    if unit is not None and unit not in TIME_UNITS:
        raise InputError(f"--time-unit {unit!r}: unknown; use one of " + ", ".join(TIME_UNITS))
    is_text = col.dtype.kind not in "fiuM" and col.dtype.kind != "b"
    text = col.astype(str).str.strip() if is_text else None
    if col.dtype.kind == "M" or time_format is not None:
        if unit is not None and col.dtype.kind != "M":
            raise InputError(f"{where}: --time-unit {unit} and --time-format both given for column "
                             f"{name!r}; give one")
        return _clock(col, text, where, name, first_row, time_format, tz)
    if text is not None:
        first = text[~text.isin(["", "nan", "NaN", "None"])]
        sample = first.iloc[0] if len(first) else ""
        if _ISO_START.match(sample):
            if unit is not None:
                raise InputError(f"{where}: column {name!r} holds clock times ({sample[:30]!r}), "
                                 f"not numbers; drop --time-unit {unit}")
            return _clock(col, text, where, name, first_row, None, tz)
        if _DAY_FIRST.match(sample):
            raise InputError(f"{where}: row {first_row + int(first.index[0])}, column {name!r}: "
                             f"{sample[:30]!r} is not ISO-8601; give its layout with --time-format, "
                             f"e.g. --time-format '{_suggest_format(first)}'")
    return _numbers(col, where, name, first_row, unit, rate)


# ------------------------------------------------------------------ medians
def median(x: np.ndarray, overwrite: bool = False) -> float:
    """``numpy.median`` of a 1-D array holding no NaN, as a float: the same value, in a quarter of
    the time on a million values. numpy partitions at one rank with a vectorised selection but at
    several with a general one, four times slower here, and ``numpy.median`` always asks for
    several (the middle one or two, and the last to look for NaN). Here: one partition at the
    upper middle rank; for an even count the lower middle value is the largest of those before
    it. The middle values are averaged by ``numpy.mean``, as ``numpy.median`` does.
    ``overwrite``: ``x`` may be reordered (no copy is made)."""
    x = np.asarray(x)
    n = x.size
    if n < 2:
        return float(np.median(x))
    k = n // 2
    if overwrite:
        x.partition(k)
        part = x
    else:
        part = np.partition(x, k)
    middle = part[k:k + 1] if n % 2 else np.array([part[:k].max(), part[k]], dtype=part.dtype)
    return float(np.mean(middle))


# ------------------------------------------------------------------ numbers
def _numbers(col, where, name, first_row, unit, rate) -> TimeColumn:
    from labeler.recordings import _numeric_column

    if col.dtype.kind in "iu":
        raw_int = col.to_numpy(dtype=np.int64)
        raw = raw_int.astype(np.float64)
    else:
        raw_int = None
        raw = _numeric_column(col, where, name, first_row)
    # one pass when all is well (a sum is finite only when every term is); the row otherwise
    if not np.isfinite(np.add.reduce(raw)):
        miss = np.flatnonzero(np.isnan(raw))
        if miss.size:
            raise InputError(f"{where}: row {int(miss[0]) + first_row}, column {name!r}: time is "
                             "missing; every row needs a time")
        finite = np.isfinite(raw)
        if not finite.all():
            r = int(np.flatnonzero(~finite)[0])
            raise InputError(f"{where}: row {r + first_row}, column {name!r}: time {raw[r]:g} is "
                             "not a finite number; fix the cell")
    step = median(np.diff(raw), overwrite=True) if raw.size >= 2 else 0.0
    note = None
    if unit is None:
        unit = _unix_unit(raw[0], step) or "s"
        if unit != "s":
            note = (f"read column {name!r} as Unix time in {unit} (from its size and step); "
                    f"say so with --time-unit {unit} to silence this")
    factor = TIME_UNITS[unit]
    if raw_int is not None:
        t = (raw_int - raw_int[0]).astype(np.float64)
    else:
        t = raw - raw[0]
    if factor != 1.0:  # x * 1.0 is x: seconds are not multiplied
        t *= factor
    if step > 0 and rate is None and not MIN_RATE <= 1.0 / (step * factor) <= MAX_RATE:
        raise InputError(f"{where}: column {name!r}: median time step {step:.6g} {unit} is not a "
                         f"sampling rate ({1.0 / (step * factor):.3g} Hz); "
                         + _unit_advice(step, unit))
    if step > 0 and rate is not None and not 0.5 <= step * factor * rate <= 2.0:
        raise InputError(f"{where}: column {name!r}: samples come every {step:.6g} {unit} "
                         f"({1.0 / (step * factor):.3g} Hz) but --rate says {rate:g} Hz; "
                         + _unit_advice(step, unit, rate))
    t0 = raw[0] * factor
    start = None
    if EPOCH_SPAN_S[0] <= t0 <= EPOCH_SPAN_S[1]:
        start = pd.Timestamp(int(round(t0 * 1e6)), unit="us", tz="UTC").strftime(
            "%Y-%m-%dT%H:%M:%S.%fZ")
        described = f"column {name!r}: Unix time in {unit}"
    else:
        described = f"column {name!r}: {_UNIT_WORDS[unit]} from any origin"
    return TimeColumn(t, start, described + (" (found from the values)" if note else ""), note,
                      unit if note else None)


_UNIT_WORDS = {"s": "seconds", "ms": "milliseconds", "us": "microseconds", "ns": "nanoseconds"}


def _unix_unit(first: float, step: float) -> str | None:
    for unit in ("ms", "us", "ns"):
        f = TIME_UNITS[unit]
        if (EPOCH_SPAN_S[0] <= first * f <= EPOCH_SPAN_S[1] and step > 0
                and MIN_RATE <= 1.0 / (step * f) <= MAX_RATE):
            return unit
    return None


def _unit_advice(step: float, unit: str, rate: float | None = None) -> str:
    """What to do when the step is no rate: the unit in which it is one (matching --rate if given)."""
    for u, f in TIME_UNITS.items():
        if u == unit or step <= 0:
            continue
        fs = 1.0 / (step * f)  # the same numbers read in unit u
        fits = (0.5 <= rate / fs <= 2.0) if rate is not None else MIN_RATE <= fs <= MAX_RATE
        if fits:
            return f"if the time is in {_UNIT_WORDS[u]}, give --time-unit {u}"
    if rate is not None:
        return "fix --rate or leave it out (the time column gives the rate)"
    return ("check the time column (seconds, or give --time-unit s, ms, us or ns), or name the "
            "right one with --time-column")


def _suggest_format(text: pd.Series) -> str:
    """A strftime layout for day/month times: day first unless a value over 12 says otherwise."""
    firsts, seconds, sep, frac, clock, year4 = [], [], "/", False, None, True
    for s in text.iloc[:2000]:
        m = _DAY_FIRST.match(s)
        if not m:
            continue
        firsts.append(int(m[1]))
        seconds.append(int(m[3]))
        sep, year4 = m[2], len(m[4]) == 4
        clock = m[5] if m[5] else clock
        frac = frac or bool(m[6])
    month_first = bool(seconds) and max(seconds) > 12 and max(firsts) <= 12
    date = (f"%m{sep}%d{sep}" if month_first else f"%d{sep}%m{sep}") + ("%Y" if year4 else "%y")
    if clock:
        date += " %H:%M" + (":%S" if clock.count(":") == 2 else "") + (".%f" if frac else "")
    return date


# ------------------------------------------------------------------ clock times
def _clock(col, text, where, name, first_row, time_format, tz) -> TimeColumn:
    if col.dtype.kind == "M":
        ts = pd.Series(pd.to_datetime(col))
        zoned = ts.dt.tz is not None
        how = "timestamps of the file"
    else:
        empty = text.isin(["", "nan", "NaN", "NaT", "None", "null"])
        if empty.any():
            i = int(np.flatnonzero(empty.to_numpy())[0])
            raise InputError(f"{where}: row {i + first_row}, column {name!r}: time is missing; every "
                             "row needs a time")
        if time_format is not None:
            zoned = "%z" in time_format or "%Z" in time_format
            ts = pd.to_datetime(text, format=time_format, errors="coerce", utc=zoned)
            if ts.isna().any():
                i = int(np.flatnonzero(ts.isna().to_numpy())[0])
                raise InputError(f"{where}: row {i + first_row}, column {name!r}: "
                                 f"{text.iloc[i][:40]!r} does not match --time-format "
                                 f"{time_format!r}; fix the cell or the layout")
            how = f"clock times in the layout {time_format}"
        else:
            has_zone = text.str.contains(_ZONE_END, regex=True).to_numpy()
            zoned = bool(has_zone[0])
            if has_zone.any() and not has_zone.all():
                i = int(np.flatnonzero(has_zone != has_zone[0])[0])
                raise InputError(f"{where}: row {i + first_row}, column {name!r}: "
                                 f"{text.iloc[i][:40]!r} {'has no' if zoned else 'has a'} zone "
                                 f"while row {first_row} {'has one' if zoned else 'has none'}; "
                                 "write every time with its zone (Z or +02:00)")
            ts = pd.to_datetime(text, utc=zoned, format="ISO8601", errors="coerce")
            if ts.isna().any():
                i = int(np.flatnonzero(ts.isna().to_numpy())[0])
                raise InputError(f"{where}: row {i + first_row}, column {name!r}: "
                                 f"{text.iloc[i][:40]!r} is not an ISO-8601 time; use e.g. "
                                 "2026-09-14T06:30:00.020Z")
            how = "ISO-8601 clock times"
    if zoned:
        ts = ts.dt.tz_convert("UTC")
        how += " with their zone"
    else:
        if tz is None:
            raise InputError(f"{where}: column {name!r}: clock times without a zone (row {first_row}: "
                             f"{str(col.iloc[0])[:30]!r}); give the zone they were written in with "
                             "--tz, e.g. --tz Europe/Vienna or --tz UTC")
        check_zone(tz, "--tz")
        try:
            local = ts.dt.tz_localize(tz, ambiguous="infer", nonexistent="NaT")
        except Exception:  # pandas raises several types when it cannot infer a repeated hour
            local = ts.dt.tz_localize(tz, ambiguous="NaT", nonexistent="NaT")
        if local.isna().any():
            i = int(np.flatnonzero(local.isna().to_numpy())[0])
            raise InputError(f"{where}: row {i + first_row}, column {name!r}: {str(col.iloc[i])[:30]!r} "
                             f"does not exist or is ambiguous in {tz} (a daylight-saving change); "
                             "write the times with their offset, e.g. +02:00")
        ts = local.dt.tz_convert("UTC")
        how += f" in {tz} (--tz)"
    t = (ts - ts.iloc[0]).dt.total_seconds().to_numpy(dtype=np.float64)
    return TimeColumn(t, ts.iloc[0].strftime("%Y-%m-%dT%H:%M:%S.%fZ"), f"column {name!r}: {how}")
