"""Maps through the Project service layer and the `labeler map` command (click's CliRunner)."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.embedding import place
from labeler.project import Project
from labeler.synthetic import simulate_recording


def _recording(seed, person, name):
    import tempfile
    from pathlib import Path

    from labeler.recordings import read_recording

    rec = simulate_recording(240.0, seed=seed, person=person, name=name)
    folder = Path(tempfile.mkdtemp())
    path = folder / f"{name}.csv"
    rec.frame.to_csv(path, index=False)
    return read_recording(path)


@pytest.fixture()
def project(tmp_path):
    p = Project.create(tmp_path / "m.labeler")
    p.add_recording_data([_recording(1, 1, "first")])
    yield p
    p.close()


def test_compute_map_stores_a_run_and_map_returns_it(project):
    assert len(project.map()) == 0
    out = project.compute_map("pca")
    m = project.map()
    ids = project.windows()["id"].to_numpy()
    assert out.n_windows == len(ids) == len(m)
    np.testing.assert_array_equal(m["window_id"].to_numpy(), ids)
    assert np.isfinite(m[["x", "y"]].to_numpy()).all()
    run = project.store.latest_run("map")
    assert run["params"]["method"] == "pca" and run["id"] == out.run_id


def test_new_recording_is_placed_into_the_existing_map(project):
    project.compute_map("tsne", n_iter=100)
    before = project.map()
    project.add_recording_data([_recording(2, 2, "second")])
    after = project.map()
    ids = project.windows()["id"].to_numpy()
    np.testing.assert_array_equal(after["window_id"].to_numpy(), ids)
    old = after[after["window_id"].isin(before["window_id"])]
    np.testing.assert_array_equal(old[["x", "y"]].to_numpy(), before[["x", "y"]].to_numpy())
    run = project.store.latest_run("map")
    assert run["summary"]["n_placed"] == len(ids) - len(before)
    # the placement is what embedding.place gives from the stored state
    _, _, _, state = project._maps.latest()
    X, _ = project.features()
    new = ~np.isin(ids, before["window_id"].to_numpy())
    np.testing.assert_allclose(after[["x", "y"]].to_numpy()[new], place(state, X[new]), atol=1e-5)


def test_cli_map_command(tmp_path, project):
    path = str(project.path)
    project.close()
    res = CliRunner().invoke(cli, ["map", path, "--method", "pca"])
    assert res.exit_code == 0, res.output
    assert "map run" in res.output and "pca" in res.output
    res = CliRunner().invoke(cli, ["map", path, "--method", "umap"])
    assert res.exit_code == 2
    empty = tmp_path / "empty.labeler"
    Project.create(empty).close()
    res = CliRunner().invoke(cli, ["map", str(empty), "--method", "pca"])
    assert res.exit_code == 2 and "no windows yet" in res.output
