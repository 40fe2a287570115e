"""Channel naming convention.

Every sensor column is named ``<site>_<kind>_<axis>``, optionally followed by a unit in square
brackets, for example ``wrist_acc_x``, ``hip_gyr_z[rad/s]`` or ``ankle_acc_y[m/s2]``:

- ``site``: where the sensor sits on the body, a lowercase word of letters and digits
  (``wrist``, ``hip``, ``ankle``, ``chest``, ``left2`` ...).
- ``kind``: ``acc`` (acceleration) or ``gyr`` (angular rate).
- ``axis``: ``x``, ``y`` or ``z`` in the sensor's own frame.

Units are converted on reading to one unit per kind: acceleration in g (standard gravity,
9.80665 m/s²), angular rate in deg/s. Accepted units: acceleration ``g``, ``mg``, ``m/s2`` (also
``m/s^2``, ``m/s²``); angular rate ``deg/s`` (also ``dps``), ``rad/s``. A column without a unit takes
the unit given on the command line (``--acc-unit`` / ``--gyr-unit``); without one, acceleration is
read as g unless its level at rest says m/s² or mg (see :mod:`labeler.recordings`), angular rate as
deg/s.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from labeler.errors import ValueInputError

STANDARD_GRAVITY = 9.80665  # m/s², by definition (CGPM 1901)

KINDS = {"acc": "acceleration", "gyr": "angular rate"}
CANONICAL_UNITS = {"acc": "g", "gyr": "deg/s"}

# factor that turns a value in the given unit into the canonical unit of its kind
UNIT_FACTORS = {
    "acc": {"g": 1.0, "mg": 1e-3, "m/s2": 1.0 / STANDARD_GRAVITY, "m/s^2": 1.0 / STANDARD_GRAVITY,
            "m/s²": 1.0 / STANDARD_GRAVITY},
    "gyr": {"deg/s": 1.0, "dps": 1.0, "rad/s": 180.0 / math.pi},
}

_NAME = re.compile(r"^(?P<site>[a-z][a-z0-9]*)_(?P<kind>[a-z]+)_(?P<axis>[a-z]+)"
                   r"(?:\s*\[(?P<unit>[^\]]*)\])?$")


@dataclass(frozen=True)
class Channel:
    site: str
    kind: str
    axis: str
    unit: str | None = None  # as written in the file, None when not given

    @property
    def name(self) -> str:
        return f"{self.site}_{self.kind}_{self.axis}"


def parse_channel(column: str) -> Channel | None:
    """Parse a column name; None when the column does not follow the convention at all.

    Raises ValueInputError (a ValueError) with the reason when it looks like a sensor column but
    is malformed: an unknown kind, axis or unit.
    """
    m = _NAME.match(column.strip().lower())
    if m is None:
        return None
    kind, axis, unit = m["kind"], m["axis"], m["unit"]
    if kind not in KINDS:
        if axis in ("x", "y", "z"):
            raise ValueInputError(f"unknown sensor kind {kind!r}; use 'acc' or 'gyr'")
        return None
    if axis not in ("x", "y", "z"):
        raise ValueInputError(f"unknown axis {axis!r}; use x, y or z")
    if unit is not None:
        unit = unit.strip()
        if unit not in UNIT_FACTORS[kind]:
            raise ValueInputError(f"unknown unit {unit!r} for {KINDS[kind]}; use one of "
                             + ", ".join(sorted(UNIT_FACTORS[kind])))
    return Channel(m["site"], kind, axis, unit)


def triads(channels: list[str]) -> list[tuple[str, str, tuple[int, int, int]]]:
    """Groups of three channels (x, y, z) of one site and kind: (site, kind, column indices)."""
    found: dict[tuple[str, str], dict[str, int]] = {}
    for i, name in enumerate(channels):
        ch = parse_channel(name)
        if ch is None:
            continue
        found.setdefault((ch.site, ch.kind), {})[ch.axis] = i
    out = []
    for (site, kind), axes in found.items():
        if set(axes) == {"x", "y", "z"}:
            out.append((site, kind, (axes["x"], axes["y"], axes["z"])))
    return out


def sites(channels: list[str]) -> list[str]:
    """Sensor sites in the order they first appear."""
    seen: list[str] = []
    for name in channels:
        ch = parse_channel(name)
        if ch is not None and ch.site not in seen:
            seen.append(ch.site)
    return seen
