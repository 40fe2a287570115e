"""One error tree: every error labeler reports derives from `labeler.errors.LabelerError`, storage
takes nothing of labeler but that module, and SQLite's own errors never leave a `Store` or a
`Project` raw."""

from __future__ import annotations

import ast
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from labeler import agreement, channels, exporting, features, graph, spreading, synthetic, windows
from labeler.errors import InputError, LabelerError, ValueInputError
from labeler.project import Project
from storage import (BusyError, DiskFullError, NewerSchemaError, NotAProjectError, ReadOnlyError,
                     Store, StoreError)

ROOT = Path(__file__).resolve().parents[1]


def test_storage_errors_are_labeler_errors():
    for cls in (StoreError, NotAProjectError, NewerSchemaError, BusyError, DiskFullError,
                ReadOnlyError):
        assert issubclass(cls, LabelerError)


def test_storage_imports_only_the_error_module_of_labeler():
    taken = set()
    for f in (ROOT / "storage").glob("*.py"):
        for node in ast.walk(ast.parse(f.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            else:
                continue
            taken |= {n for n in names if n.split(".")[0] == "labeler"}
    assert taken == {"labeler.errors"}
    errors_module = ast.parse((ROOT / "labeler" / "errors.py").read_text())
    assert not [n for n in ast.walk(errors_module) if isinstance(n, (ast.Import, ast.ImportFrom))]


NUMERICS = {
    "window_samples: rate 0": lambda: windows.window_samples(0, 2.56, 1.28),
    "window_features: 1-D signal": lambda: features.window_features(
        np.zeros(100), np.array([0]), 64, 50.0, ["wrist_acc_x"]),
    "confusion: lengths differ": lambda: agreement.confusion([1, 2], [1]),
    "fleiss_kappa: negative": lambda: agreement.fleiss_kappa([[-1, 3], [2, 0]]),
    "parse_channel: unknown unit": lambda: channels.parse_channel("wrist_acc_x[furlong]"),
    "write_table: unknown format": lambda: exporting.write_table(None, "x", "xls"),
    "simulate_recording: no duration": lambda: synthetic.simulate_recording(0, seed=1),
    "build_graph: NaN features": lambda: graph.build_graph(np.full((5, 2), np.nan)),
    "LabelSpreader: y too short": lambda: spreading.LabelSpreader().fit(
        np.zeros((4, 2)), np.array([0, -1])),
}


@pytest.mark.parametrize("case", sorted(NUMERICS))
def test_numerics_input_errors_are_labeler_errors(case):
    with pytest.raises(LabelerError) as info:
        NUMERICS[case]()
    assert isinstance(info.value, InputError) and isinstance(info.value, ValueError)
    assert "\n" not in str(info.value)


def test_no_bare_value_error_left_in_the_numerics():
    for f in sorted((ROOT / "labeler").rglob("*.py")):
        if "app" in f.relative_to(ROOT / "labeler").parts[:-1]:
            continue  # the app's own arguments, not input of the numerics
        for node in ast.walk(ast.parse(f.read_text())):
            if isinstance(node, ast.Raise) and isinstance(node.exc, ast.Call) and \
                    getattr(node.exc.func, "id", None) == "ValueError":
                pytest.fail(f"{f.name}:{node.lineno} raises a bare ValueError; raise "
                            f"{ValueInputError.__name__} (or an InputError) instead")


def test_sqlite_errors_leave_the_store_as_store_errors(tmp_path):
    store = Store.create(tmp_path / "p.labeler")
    store.conn.execute("DROP TABLE batches")  # damage the file under the store's feet
    with pytest.raises(StoreError, match="p.labeler"):
        store.batches()
    with pytest.raises(StoreError, match="p.labeler"):
        store.apply_batch("a", "confirm", "map", [(1, None)])
    store.close()
    with pytest.raises(StoreError, match="the project is closed"):
        store.meta()


def test_project_lets_no_sqlite_error_escape(tmp_path):
    path = tmp_path / "p.labeler"
    Project.create(path, annotator="t").close()
    p = Project.open(path, annotator="t")
    p.store.conn.execute("DROP TABLE current_labels")
    try:
        p.confirm([1], "walking", source="api")
    except Exception as exc:
        assert isinstance(exc, LabelerError) and not isinstance(exc, sqlite3.Error), repr(exc)
    p.close()
