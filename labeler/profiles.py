"""How to read one kind of device file: a column mapping, the time column and its unit, units, rows
to skip. Given on the command line (``labeler add --column ax=wrist_acc_x --time-unit ms ...``) or
kept in a small *device profile* file, a JSON object of our own layout::

    {
      "labeler_device_profile": 1,
      "columns": {"accel_x": "wrist_acc_x", "accel_y": "wrist_acc_y", "accel_z": "wrist_acc_z"},
      "time_column": "ts",
      "time_unit": "ms",
      "tz": "Europe/Vienna",
      "skip_rows": 2,
      "acc_unit": "m/s2"
    }

Every key but the marker is optional; options given on the command line win over the profile's.
``labeler add --dry-run --save-profile FILE`` writes the options in effect to FILE.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from dataclasses import dataclass, field, fields, replace
from pathlib import Path

from labeler.channels import UNIT_FACTORS, parse_channel
from labeler.errors import InputError

MARKER = "labeler_device_profile"
PROFILE_VERSION = 1
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
MAX_SKIP_ROWS = 1000


@dataclass(frozen=True)
class ReadOptions:
    """Options of :func:`labeler.recordings.read_recording` that describe a device's files.

    ``columns`` maps a file's column to a channel name of :mod:`labeler.channels` (a unit in
    brackets allowed: ``wrist_acc_x[m/s2]``); ``origin`` says where the options came from, for
    error messages (``--column`` or a profile's path).
    """

    columns: dict[str, str] = field(default_factory=dict)
    time_column: str | None = None
    time_unit: str | None = None       # s, ms, us, ns; None: seconds, or Unix time when it shows
    time_format: str | None = None     # strftime layout of clock times that are not ISO-8601
    tz: str | None = None              # IANA zone of clock times written without a zone
    skip_rows: int | None = None       # lines before the column names; None: found automatically
    rate: float | None = None
    acc_unit: str | None = None        # None: g unless the level at rest says otherwise
    gyr_unit: str | None = None        # None: deg/s
    origin: str = "--column"

    def merged(self, over: "ReadOptions") -> "ReadOptions":
        """These options with every option set in ``over`` taking precedence (columns merged)."""
        kw = {}
        for f in fields(self):
            if f.name in ("columns", "origin"):
                continue
            mine, theirs = getattr(self, f.name), getattr(over, f.name)
            kw[f.name] = theirs if theirs is not None else mine
        cols = {**self.columns, **over.columns}
        origin = over.origin if over.columns else self.origin
        return replace(self, columns=cols, origin=origin, **kw)

    def as_kwargs(self) -> dict:
        """Keyword arguments of :func:`labeler.recordings.read_recording`."""
        return {f.name: getattr(self, f.name) for f in fields(self)
                if f.name != "origin"} | {"options_origin": self.origin}

    def to_json(self) -> dict:
        out: dict = {MARKER: PROFILE_VERSION}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "origin" or value is None or value == {}:
                continue
            out[f.name] = value
        return out


def parse_column_options(values: tuple[str, ...] | list[str]) -> dict[str, str]:
    """``["ax=wrist_acc_x,ay=wrist_acc_y", "az=wrist_acc_z"]`` -> {file column: channel}."""
    out: dict[str, str] = {}
    for value in values:
        for part in value.split(","):
            if not part.strip():
                continue
            src, eq, dst = part.partition("=")
            src, dst = src.strip(), dst.strip()
            if not eq or not src or not dst:
                raise InputError(f"--column {part!r}: not a pair; write FILE_COLUMN=CHANNEL, e.g. "
                                 "accel_x=wrist_acc_x")
            if src in out and out[src] != dst:
                raise InputError(f"--column: column {src!r} is mapped twice ({out[src]} and {dst}); "
                                 "keep one")
            out[src] = dst
    check_columns(out, "--column")
    return out


def check_columns(columns: dict[str, str], origin: str) -> None:
    """Every target must be a channel name; no channel may be the target of two columns."""
    seen: dict[str, str] = {}
    for src, dst in columns.items():
        if not isinstance(src, str) or not isinstance(dst, str):
            raise InputError(f"{origin}: the column mapping must map names to names; fix "
                             f"{src!r}: {dst!r}")
        try:
            ch = parse_channel(dst)
        except ValueError as exc:
            raise InputError(f"{origin}: {src}={dst}: {exc}") from None
        if ch is None:
            raise InputError(f"{origin}: {src}={dst}: {dst!r} is not a channel name; use "
                             "<site>_<kind>_<axis>, e.g. wrist_acc_x or hip_gyr_z[rad/s]")
        if ch.name in seen:
            raise InputError(f"{origin}: columns {seen[ch.name]!r} and {src!r} both map to "
                             f"{ch.name}; map each channel once")
        seen[ch.name] = src


def check_options(opts: ReadOptions, origin: str | None = None) -> ReadOptions:
    """Validate option values; the message names the option (or the profile file and its key).
    A rate given on the command line is checked by the reader, whose message names the file."""
    where = (lambda key: f"{origin}: {key!r}") if origin else (lambda key: "--" + key.replace("_", "-"))
    if opts.time_unit is not None and opts.time_unit not in TIME_UNITS:
        raise InputError(f"{where('time_unit')}: unknown time unit {opts.time_unit!r}; use one of "
                         + ", ".join(TIME_UNITS))
    if opts.acc_unit is not None and opts.acc_unit not in UNIT_FACTORS["acc"]:
        raise InputError(f"{where('acc_unit')}: unknown acceleration unit {opts.acc_unit!r}; use "
                         "g, m/s2 or mg")
    if opts.gyr_unit is not None and opts.gyr_unit not in UNIT_FACTORS["gyr"]:
        raise InputError(f"{where('gyr_unit')}: unknown angular-rate unit {opts.gyr_unit!r}; use "
                         "deg/s or rad/s")
    if opts.skip_rows is not None and not (isinstance(opts.skip_rows, int)
                                           and 0 <= opts.skip_rows <= MAX_SKIP_ROWS):
        raise InputError(f"{where('skip_rows')}: {opts.skip_rows!r} lines; give a whole number "
                         f"from 0 to {MAX_SKIP_ROWS}")
    if origin and opts.rate is not None and not (isinstance(opts.rate, (int, float))
                                      and not isinstance(opts.rate, bool)
                                      and math.isfinite(opts.rate) and opts.rate > 0):
        raise InputError(f"{where('rate')}: {opts.rate!r} Hz; give a positive sampling rate")
    if opts.tz is not None:
        check_zone(opts.tz, where("tz"))
    for key in ("time_column", "time_format"):
        value = getattr(opts, key)
        if value is not None and (not isinstance(value, str) or not value.strip()):
            raise InputError(f"{where(key)}: {value!r}; give a non-empty text")
    if opts.time_format is not None and "%" not in opts.time_format:
        raise InputError(f"{where('time_format')}: {opts.time_format!r} has no % field; write "
                         "the layout like %d/%m/%Y %H:%M:%S.%f")
    check_columns(opts.columns, origin or opts.origin)
    return opts


def check_zone(name: str, where: str):
    """The zone for an IANA name (``Europe/Vienna``, ``UTC``); InputError naming ``where``."""
    from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

    unknown = InputError(f"{where}: unknown time zone {name!r}; use an IANA zone name like "
                         "Europe/Vienna, America/Chicago or UTC")
    if not isinstance(name, str) or not name or name.startswith(("/", ".")) or ".." in name:
        raise unknown
    try:
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        raise unknown from None


def load_profile(path: str | os.PathLike) -> ReadOptions:
    """Read and check a device profile file."""
    path = Path(path)
    where = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{where}: no such device profile; check the path or write one with "
                         "`labeler add --dry-run --save-profile`") from None
    except IsADirectoryError:
        raise InputError(f"{where}: is a folder; give a device profile file (JSON)") from None
    except UnicodeDecodeError:
        raise InputError(f"{where}: not UTF-8 text; give a device profile file (JSON)") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{where}: line {exc.lineno}: not valid JSON ({exc.msg}); fix the "
                         "device profile") from None
    if not isinstance(data, dict) or data.get(MARKER) is None:
        raise InputError(f"{where}: not a device profile (no {MARKER!r} key); write one with "
                         "`labeler add --dry-run --save-profile`")
    if data[MARKER] != PROFILE_VERSION:
        raise InputError(f"{where}: device profile version {data[MARKER]!r} is not known; this "
                         f"labeler reads version {PROFILE_VERSION}")
    known = {f.name for f in fields(ReadOptions)} - {"origin"}
    unknown = sorted(set(data) - known - {MARKER})
    if unknown:
        raise InputError(f"{where}: unknown key {unknown[0]!r}; keys are "
                         + ", ".join(sorted(known)))
    cols = data.get("columns", {})
    if not isinstance(cols, dict):
        raise InputError(f"{where}: 'columns' must be an object of file column: channel")
    kw = {k: v for k, v in data.items() if k in known}
    kw["columns"] = dict(cols)
    if isinstance(kw.get("rate"), int) and not isinstance(kw.get("rate"), bool):
        kw["rate"] = float(kw["rate"])
    return check_options(ReadOptions(origin=where, **kw), origin=where)


def check_profile_path(path: str | os.PathLike, project: str | os.PathLike | None = None) -> Path:
    """Where a profile may be written: not a folder, in a folder that exists, not the project's
    own file (or its -wal or -shm)."""
    path = Path(path)
    own = ({Path(f"{Path(project).resolve()}{s}") for s in ("", "-wal", "-shm", "-journal")}
           if project is not None else set())
    if path.resolve() in own:
        raise InputError(f"--save-profile {path}: is the project's own file; give another name, "
                         "e.g. device.json")
    if path.is_dir():
        raise InputError(f"--save-profile {path}: is a folder; give a file name")
    if not path.parent.exists():
        raise InputError(f"--save-profile {path}: no folder {path.parent}; create it first")
    return path


def save_profile(opts: ReadOptions, path: str | os.PathLike) -> None:
    """Write the options as a device profile (to a temporary name, then renamed into place)."""
    path = check_profile_path(path)
    text = json.dumps(opts.to_json(), indent=2, ensure_ascii=False) + "\n"
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
