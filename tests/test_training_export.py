"""Export for training: named feature columns, window signals, group ids, and (X, y, groups) that
scikit-learn's GroupKFold takes (scikit-learn: Pedregosa et al., "Scikit-learn: Machine Learning in
Python", JMLR 12, 2011)."""

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GroupKFold, cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from labeler.recordings import recording_from_frame
from labeler.synthetic import simulate_recording, window_truth
from labeler.training import GROUPED_SPLITS, read_training_set


@pytest.fixture(scope="module")
def crew(tmp_path_factory):
    """Three simulated pickers, every window confirmed with its simulated activity."""
    folder = tmp_path_factory.mktemp("crew")
    p = Project.create(folder / "crew.labeler", annotator="ana")
    truths = {}
    recs = []
    for person in range(3):
        sim = simulate_recording(6 * 60, seed=40 + person, person=person)
        recs.append(recording_from_frame(sim.frame, where=sim.name, content_hash=sim.name,
                                         name=sim.name))
        truths[sim.name] = sim.truth
    p.add_recording_data(recs)
    for rec in recs:
        p.set_person(rec.name, f"person-{rec.name[-1]}")
    w = p.windows()
    for name, truth in truths.items():
        sel = w[w["recording"] == name]
        acts = window_truth(truth, sel["start_s"].to_numpy(), sel["stop_s"].to_numpy())
        for act in sorted(set(acts) - {"transition"}):
            p.confirm(sel["id"].to_numpy()[acts == act], act, create_class=True)
    yield p, folder
    p.close()


def test_export_with_features_round_trips_into_group_k_fold(crew):
    p, folder = crew
    out = folder / "set"
    rep = p.export(out, features=True, signal=True)
    m = json.loads((out / "manifest.json").read_text())
    assert m["grouped_splits"]["why"] == GROUPED_SPLITS
    assert m["grouped_splits"]["group_columns"] == ["person", "recording", "bout"]
    cols = m["features"]["columns"]
    X_all, names = p.features()
    assert cols == names
    table = pd.read_csv(out / "windows.csv")
    assert {"person", "recording", "bout", "recording_file"} <= set(table.columns)
    assert set(table["person"]) == {"person-0", "person-1", "person-2"}
    # the feature columns hold the project's features of each window, by window id
    ids = table["window_id"].to_numpy()
    pos = pd.Index(p.windows()["id"]).get_indexer(ids)
    np.testing.assert_allclose(table[cols].to_numpy(np.float32), X_all[pos], rtol=1e-6, atol=1e-6)

    X, y, groups = read_training_set(out)
    assert X.shape == (rep.windows, len(cols)) and X.dtype == np.float32
    assert len(y) == len(groups) == rep.windows
    cv = GroupKFold(n_splits=3)
    for train, test in cv.split(X, y, groups):
        assert not set(groups[train]) & set(groups[test])  # a person is never on both sides
    scores = cross_val_score(make_pipeline(StandardScaler(), LogisticRegression(max_iter=300)),
                             X, y, groups=groups, cv=cv)
    assert scores.shape == (3,) and np.isfinite(scores).all()

    # bouts: consecutive windows of one label; each segment row is one bout
    segs = pd.read_csv(out / "segments.csv")
    assert table["bout"].nunique() == len(segs)
    _, _, bouts = read_training_set(out, group_by="bout")
    assert set(bouts) == set(table["bout"])

    # the window signals, in the table's row order
    npz = np.load(out / "signals.npz")
    assert list(npz["window_id"]) == list(ids)
    n_len = int(round(p.window_length_s * float(npz["rate_hz"])))
    assert npz["signal"].shape == (len(ids), n_len, len(npz["channels"]))
    first = p.windows().set_index("id").loc[ids[0]]
    _, sig, _ = p.signal(first["recording"], first["start_s"], first["stop_s"])
    np.testing.assert_array_equal(npz["signal"][0], sig[:n_len])


def test_reading_an_export_without_features_says_how(crew):
    p, folder = crew
    out = folder / "plain"
    p.export(out)
    with pytest.raises(InputError) as err:
        read_training_set(out)
    assert str(err.value) == f"{out}: exported without features; export again with --features"


def test_cli_export_features_and_signal(crew):
    p, folder = crew
    r = CliRunner().invoke(cli, ["export", str(p.path), str(folder / "cli"), "--features",
                                 "--signal"], env={"LABELER_ANNOTATOR": "ana"})
    assert r.exit_code == 0, r.output
    assert (folder / "cli" / "signals.npz").exists()
    assert ("  split by person, recording or bout (columns of the window rows), never at random: "
            "overlapping windows leak across a random split") in r.output.splitlines()
