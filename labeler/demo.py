"""The demo: an invented orchard harvest shift, simulated, written as recording files and built into
a project the way a user would (files → `labeler add` → interval import of a few known bouts)."""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import pandas as pd

DEMO_SEED = 2026
PROJECT_NAME = "harvest.labeler"
MINUTES = (1.0, 24 * 60.0)   # one window needs 2.56 s; a day is the most the demo simulates
PEOPLE = (1, 50)


def check_demo_size(minutes: float, people: int) -> None:
    """Refuse a demo that cannot be built, naming the command-line option."""
    import math

    from labeler.errors import InputError

    if not (isinstance(minutes, (int, float)) and math.isfinite(minutes)
            and MINUTES[0] <= minutes <= MINUTES[1]):
        raise InputError(f"--minutes {minutes:g}: give the length of each simulated recording, "
                         f"{MINUTES[0]:g} to {MINUTES[1]:g} minutes")
    if not (isinstance(people, int) and PEOPLE[0] <= people <= PEOPLE[1]):
        raise InputError(f"--people {people}: give how many pickers to simulate, {PEOPLE[0]} to "
                         f"{PEOPLE[1]}")


def write_demo_files(folder: Path, *, minutes: float = 40.0, people: int = 3,
                     seed: int = DEMO_SEED) -> tuple[list[Path], Path, Path]:
    """Simulate the shift; write recordings/*.csv, partial_labels.csv and truth/*.csv.

    The partial label file holds one bout of each activity from the first picker only: the few
    examples an annotator typically has at the start.
    """
    from labeler.synthetic import simulate_shift

    folder = Path(folder)
    (folder / "recordings").mkdir(parents=True, exist_ok=True)
    (folder / "truth").mkdir(exist_ok=True)
    recs = simulate_shift(people, minutes * 60.0, seed=seed)
    paths = []
    partial = []
    for i, rec in enumerate(recs):
        path = folder / "recordings" / f"{rec.name}.csv"
        tmp = path.with_suffix(".csv.tmp")
        # 5 significant digits for the signal, 0.1 ms for time
        rec.frame.assign(time=rec.frame["time"].map("{:.4f}".format)).to_csv(
            tmp, index=False, float_format="%.5g")
        tmp.replace(path)
        paths.append(path)
        truth = rec.truth.copy()
        truth.insert(0, "recording", rec.name)
        truth.to_csv(folder / "truth" / f"{rec.name}.csv", index=False, float_format="%.3f")
        if i == 0:
            seen = set()
            for row in rec.truth.itertuples(index=False):
                if row.activity == "transition" or row.activity in seen:
                    continue
                if row.end_s - row.start_s < 20:
                    continue
                seen.add(row.activity)
                partial.append({"recording": rec.name, "start": round(row.start_s, 2),
                                "end": round(row.end_s, 2), "label": row.activity})
    labels = folder / "partial_labels.csv"
    pd.DataFrame(partial, columns=["recording", "start", "end", "label"]).to_csv(labels, index=False)
    return paths, labels, folder / "truth"


def build_demo(folder: Path, *, minutes: float = 40.0, people: int = 3,
               echo: Callable[[str], None] = print) -> Path:
    """Build the demo project in ``folder`` if it is not there yet; return its path."""
    from labeler.project import Project

    folder = Path(folder)
    project = folder / PROJECT_NAME
    if project.exists():
        echo(f"using the demo project {project} (delete the folder to build it anew)")
        return project
    check_demo_size(minutes, people)
    echo(f"simulating {people} picker(s) x {minutes:g} min of an invented orchard shift in {folder}")
    paths, labels, _ = write_demo_files(folder, minutes=minutes, people=people)
    tmp = folder / (PROJECT_NAME + ".building")
    for leftover in folder.glob(PROJECT_NAME + ".building*"):
        leftover.unlink()
    try:
        with Project.create(tmp, annotator="demo") as p:
            p.add_recordings(paths)
            report = p.import_intervals(labels)
            echo(f"imported {report.intervals} known bouts ({report.windows} windows) from "
                 f"{labels.name}")
        tmp.replace(project)  # a finished project or none
    finally:
        for leftover in folder.glob(PROJECT_NAME + ".building*"):
            leftover.unlink(missing_ok=True)
    return project
