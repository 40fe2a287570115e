"""Reading interval-label files: one row per labeled interval of a recording.

Columns (header required, comma-separated, UTF-8): ``recording`` (the recording's name in the
project), ``start`` and ``end``, ``label`` (a class name), and optionally ``annotator`` (who labeled
it; default: the importing annotator) and ``note``.

``start`` and ``end`` are seconds from the recording's first sample, or clock times in ISO-8601
(``2026-09-14T07:05:00+02:00``): those need a recording whose file gave clock times (its start is
known) and a zone, written in the cell or given as ``tz`` (never taken as UTC silently). A clock
interval that begins before its recording is cut at the recording's first sample.

Which windows an interval labels (:func:`windows_inside`): a window takes an interval's label when the
window's centre lies strictly inside the interval. For every interval longer than half a window this is
the majority rule: a window straddling the interval's boundary takes the label when more than half of
the window lies inside, so between two adjacent intervals it goes to the one holding most of it, and a
window split exactly in half goes to neither. An interval no longer than half a window can hold the
larger part of no window; it labels the window centred in it (exported segments of a single window are
one window step long, and import back to that window).

Overlapping intervals of one annotator with different labels contradict each other and are refused;
intervals of different annotators may overlap (several people labeling the same stretch).

The columns that ``labeler export`` writes to a segments file besides recording, start, end and label
(start_utc, end_utc, windows, confirmed, confidence_min, confidence_mean, retired, bout) are accepted and
not used, so an exported segments file imports as it is.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from labeler.errors import InputError

_ANNOTATOR = re.compile(r"[^\x00-\x1f\x7f]{1,60}")

REQUIRED = ("recording", "start", "end", "label")
OPTIONAL = ("annotator", "note")
#: written by `labeler export` into segments files; read past on import
EXPORT_EXTRAS = ("start_utc", "end_utc", "windows", "confirmed", "confidence_min", "confidence_mean",
                 "retired", "bout")


@dataclass
class Interval:
    row: int  # line number in the file (header is line 1)
    recording: str
    start: float
    end: float
    label: str
    annotator: str | None
    note: str | None
    clock: bool = False  # start and end were clock times


_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}[T ]\d{1,2}:\d{2}")


def read_intervals(path: str | os.PathLike, *, start_times: dict[str, str | None] | None = None,
                   tz: str | None = None) -> list[Interval]:
    """Parse and check an interval-label file. Raises InputError naming the row or column.

    ``start_times`` (recording name -> ISO-8601 UTC of its first sample, or None) turns clock
    times into seconds; ``tz`` is the zone of clock times written without one.
    """
    path = Path(path)
    where = str(path)
    if not path.exists():
        raise InputError(f"{where}: no such file; check the path")
    if path.stat().st_size == 0:
        raise InputError(f"{where}: the file is empty; it needs a header recording,start,end,label")
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig",
                            skipinitialspace=True)
    except UnicodeDecodeError:
        raise InputError(f"{where}: not UTF-8 text; save it as UTF-8 CSV") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as exc:
        raise InputError(f"{where}: cannot be parsed as CSV ({' '.join(str(exc).split())[:80]}); "
                         "check the commas") from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    unknown = [c for c in frame.columns if c not in REQUIRED + OPTIONAL + EXPORT_EXTRAS]
    if unknown:
        raise InputError(f"{where}: unknown column {unknown[0]!r}; columns are "
                         f"{', '.join(REQUIRED)}[, {', '.join(OPTIONAL)}]")
    missing = [c for c in REQUIRED if c not in frame.columns]
    if missing:
        raise InputError(f"{where}: missing column {missing[0]!r}; the header must name "
                         + ",".join(REQUIRED))
    out: list[Interval] = []
    for i, rec in enumerate(frame.itertuples(index=False)):
        line = i + 2
        d = rec._asdict()
        name = str(d["recording"]).strip()
        if not name:
            raise InputError(f"{where}: row {line}, column 'recording': empty; name the recording")
        raw_start, raw_end = str(d["start"]).strip(), str(d["end"]).strip()
        clock = bool(_ISO.match(raw_start) or _ISO.match(raw_end))
        if clock:
            start, end = _clock_interval(where, line, name, raw_start, raw_end, start_times, tz)
        else:
            try:
                start, end = float(raw_start), float(raw_end)
            except (ValueError, TypeError):
                raise InputError(f"{where}: row {line}: start {d['start']!r} and end {d['end']!r} "
                                 "must be seconds or ISO-8601 clock times") from None
            if not (np.isfinite(start) and np.isfinite(end)):
                raise InputError(f"{where}: row {line}: start and end must be finite seconds")
        if end <= start:
            raise InputError(f"{where}: row {line}: end {_shown(raw_end, end, clock)} is not after "
                             f"start {_shown(raw_start, start, clock)}; swap them or fix the row")
        if start < 0 and not clock:
            raise InputError(f"{where}: row {line}, column 'start': {start:g} is negative; times "
                             "count from the recording's first sample")
        if clock and end <= 0:
            raise InputError(f"{where}: row {line}: ends at {raw_end}, before recording {name!r} "
                             "begins; fix the row or the recording name")
        start = max(0.0, start)
        label = str(d["label"]).strip()
        if not label:
            raise InputError(f"{where}: row {line}, column 'label': empty; give a class name")
        if not _ANNOTATOR.fullmatch(label):  # the rule of class names (labeler.project)
            raise InputError(f"{where}: row {line}, column 'label': {label[:70]!r} must be 1-60 "
                             "printable characters; shorten it or fix the class name")
        who = str(d.get("annotator") or "").strip() or None
        if who is not None and not _ANNOTATOR.fullmatch(who):
            raise InputError(f"{where}: row {line}, column 'annotator': {who[:70]!r} must be 1-60 "
                             "printable characters; shorten it")
        note = str(d.get("note") or "").strip() or None
        out.append(Interval(line, name, start, end, label, who, note, clock))
    if not out:
        raise InputError(f"{where}: header only, no intervals; add rows recording,start,end,label")
    # overlapping intervals of one recording with different labels contradict each other
    by_rec: dict[str, list[Interval]] = {}
    for iv in out:
        by_rec.setdefault(iv.recording, []).append(iv)
    for ivs in by_rec.values():
        ivs = sorted(ivs, key=lambda v: (v.start, v.end))
        for a, b in zip(ivs, ivs[1:]):
            if b.start < a.end and a.label != b.label and (a.annotator or "") == (b.annotator or ""):
                raise InputError(
                    f"{where}: rows {a.row} and {b.row} overlap ({a.recording} {b.start:g}-"
                    f"{min(a.end, b.end):g} s) with different labels {a.label!r} and {b.label!r}; "
                    "make them meet end to start")
    return out


def _shown(raw: str, value: float, clock: bool) -> str:
    return raw if clock else f"{value:g}"


def _clock_interval(where: str, line: int, name: str, raw_start: str, raw_end: str,
                    start_times: dict[str, str | None] | None, tz: str | None
                    ) -> tuple[float, float]:
    """Seconds from the recording's first sample of an interval written in clock times."""
    for column, raw in (("start", raw_start), ("end", raw_end)):
        if not _ISO.match(raw):
            raise InputError(f"{where}: row {line}, column {column!r}: {raw[:40]!r} is not an "
                             "ISO-8601 time like the other end; write both ends as clock times or "
                             "both as seconds")
    if start_times is None or name not in start_times:
        raise InputError(f"{where}: row {line}, column 'recording': no recording {name!r} in the "
                         "project to place clock times in; add it first or fix the name")
    origin = start_times[name]
    if origin is None:
        raise InputError(f"{where}: row {line}: recording {name!r} has no clock (its file gave "
                         "seconds); give start and end as seconds from its first sample")
    out = []
    for column, raw in (("start", raw_start), ("end", raw_end)):
        try:
            ts = pd.Timestamp(raw)
        except (ValueError, TypeError):
            raise InputError(f"{where}: row {line}, column {column!r}: {raw[:40]!r} is not an "
                             "ISO-8601 time; use e.g. 2026-09-14T07:05:00+02:00") from None
        if ts.tzinfo is None:
            if tz is None:
                raise InputError(f"{where}: row {line}, column {column!r}: {raw[:40]!r} has no "
                                 "zone; write it with one (Z or +02:00) or give the zone with "
                                 "--tz, e.g. --tz Europe/Vienna")
            from labeler.profiles import check_zone

            check_zone(tz, "--tz")
            try:
                ts = ts.tz_localize(tz, nonexistent="raise", ambiguous="raise")
            except Exception:  # pandas raises several types at a daylight-saving change
                raise InputError(f"{where}: row {line}, column {column!r}: {raw[:40]!r} does not "
                                 f"exist or is ambiguous in {tz} (a daylight-saving change); "
                                 "write it with its offset, e.g. +02:00") from None
        out.append((ts.tz_convert("UTC") - pd.Timestamp(origin)).total_seconds())
    return out[0], out[1]


def windows_inside(start_s, stop_s, a: float, b: float) -> np.ndarray:
    """Mask of the windows (start and stop times in s) an interval [a, b] labels: those whose centre
    lies strictly inside it (see the module docstring)."""
    centre = (np.asarray(start_s, dtype=np.float64) + np.asarray(stop_s, dtype=np.float64)) / 2
    return (centre > a) & (centre < b)


def check_recordings(intervals: list[Interval], durations: dict[str, float], path) -> None:
    """Refuse intervals naming a recording the project lacks or starting past its end."""
    for iv in intervals:
        if iv.recording not in durations:
            known = ", ".join(list(durations)[:6]) or "none yet"
            raise InputError(f"{path}: row {iv.row}, column 'recording': no recording "
                             f"{iv.recording!r} in the project (recordings: {known}); add it "
                             "first or fix the name")
        if iv.start >= durations[iv.recording]:
            raise InputError(f"{path}: row {iv.row}: start {iv.start:g} s is past the end of "
                             f"{iv.recording} ({durations[iv.recording]:.2f} s); fix the row")


def new_class_names(intervals: list[Interval], class_names) -> list[str]:
    """Labels of the intervals that name no class yet (classes match without regard to case)."""
    known = {str(c).lower() for c in class_names}
    return sorted({iv.label for iv in intervals if iv.label.lower() not in known})


@dataclass
class IntervalMatch:
    """Which label each annotator's windows take from a file of intervals."""
    per_annotator: dict[str, dict[int, str]]  # annotator -> window id -> class name
    rows: list[dict]                          # per interval: row, recording, label, windows
    changes: int                              # (window, annotator) pairs whose label changes
    relabels: int                             # ... of them that had another label before


def match_intervals(intervals: list[Interval], windows: pd.DataFrame, class_names,
                    current: dict[tuple[int, str], str], default_annotator: str) -> IntervalMatch:
    """Match intervals to windows (:func:`windows_inside`); ``windows`` has id, recording, start_s,
    stop_s; ``current`` maps (window id, annotator) to that annotator's current class name."""
    classes = {str(c).lower(): str(c) for c in class_names}
    per_who: dict[str, dict[int, str]] = {}
    rows = []
    for iv in intervals:
        w = windows[windows["recording"] == iv.recording]
        ids = w["id"].to_numpy()[windows_inside(w["start_s"], w["stop_s"], iv.start, iv.end)]
        target = per_who.setdefault(iv.annotator or default_annotator, {})
        for wid in ids:
            target[int(wid)] = classes.get(iv.label.lower(), iv.label)
        rows.append({"row": iv.row, "recording": iv.recording, "label": iv.label,
                     "windows": int(len(ids))})
    pairs = [((w, who), c) for who, m in per_who.items() for w, c in m.items()]
    changes = sum(1 for key, c in pairs if current.get(key) != c)
    relabels = sum(1 for key, c in pairs if key in current and current[key] != c)
    return IntervalMatch(per_who, rows, changes, relabels)
