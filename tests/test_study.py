"""Whole studies: parallel ingest and labels applied to every recording of a folder.

The Dask tests share one two-worker LocalCluster (started once for the module) through its
scheduler address, which is also how a user points labeler at an existing cluster.
"""

from __future__ import annotations

import json
import math
import multiprocessing
import os

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from labeler.study import runner as runner_mod
from labeler.study.ingest import ingest
from tests.conftest import sensor_frame

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def scheduler():
    import logging

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                       scheduler_kwargs={"dashboard": False},
                                       silence_logs=logging.ERROR)
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


def _files(folder, n=3, seconds=40):
    folder.mkdir(exist_ok=True)
    paths = []
    for k in range(n):
        frame = sensor_frame(n=int(seconds * 50), seed=k)
        path = folder / f"rec{k}.csv"
        frame.to_csv(path, index=False)
        paths.append(path)
    return paths


def _bad_file(folder):
    frame = sensor_frame(n=600, seed=99)
    frame["wrist_acc_x"] = frame["wrist_acc_x"].astype(object)
    frame.loc[7, "wrist_acc_x"] = "oops"
    path = folder / "broken.csv"
    frame.to_csv(path, index=False)
    return path


def test_ingest_on_dask_adds_the_good_files_and_reports_the_refused_one(tmp_path, scheduler):
    good = _files(tmp_path / "rec")
    bad = _bad_file(tmp_path / "rec")
    with Project.create(tmp_path / "many.labeler", annotator="t") as p:
        rep = p.add_many([tmp_path / "rec"], scheduler=scheduler)
        assert [a.name for a in rep.added] == ["rec0", "rec1", "rec2"]  # in file order
        assert len(rep.refused) == 1 and rep.refused[0].path == str(bad)
        assert "row 9, column 'wrist_acc_x'" in rep.refused[0].reason
        assert "scheduler at" in rep.runner
        # where the time went: the three tasks ran on workers, the two good files were written
        assert 0 < rep.start_seconds < rep.seconds  # connecting to the given cluster
        assert rep.task_cpu_seconds > 0 and rep.task_seconds > 0
        assert 0 < rep.write_cpu_seconds and 0 < rep.write_seconds < rep.seconds
        assert rep.worker_cpu_seconds is None  # its workers may have worked for others too
        X, names = p.features()
        w = p.windows()
    # the same files added one by one in this process give the same windows and features
    with Project.create(tmp_path / "one.labeler", annotator="t") as q:
        q.add_recordings(good)
        X1, names1 = q.features()
        pd.testing.assert_frame_equal(w, q.windows())
    assert names == names1
    np.testing.assert_array_equal(X, X1)


def test_local_workers_go_without_the_malloc_threshold_and_the_profiler(monkeypatch):
    # a small MALLOC_TRIM_THRESHOLD_ doubles the CPU time of preparing a recording; the
    # one-thread limits of numerical libraries stay (two processes share the cores)
    import dask

    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")  # as an earlier nanny leaves it
    monkeypatch.delenv("OMP_NUM_THREADS", raising=False)
    with runner_mod.local_worker_settings():
        environ = dask.config.get("distributed.nanny.pre-spawn-environ")
        assert "MALLOC_TRIM_THRESHOLD_" not in environ
        assert str(environ["OMP_NUM_THREADS"]) == "1"
        assert dask.config.get("distributed.worker.profile.enabled") is False
        assert "MALLOC_TRIM_THRESHOLD_" not in os.environ
        os.environ["OMP_NUM_THREADS"] = "1"  # what a nanny does before it starts a worker
    assert os.environ["MALLOC_TRIM_THRESHOLD_"] == "65536"  # put back as it was
    assert "OMP_NUM_THREADS" not in os.environ
    assert "MALLOC_TRIM_THRESHOLD_" in dask.config.get("distributed.nanny.pre-spawn-environ")


@pytest.mark.skipif("forkserver" not in multiprocessing.get_all_start_methods(),
                    reason="the platform has no fork server; local workers are spawned")
def test_local_workers_fork_from_one_server_that_has_loaded_the_task_modules(tmp_path):
    # each spawned worker loaded numpy, pandas and labeler anew (0.5-1.7 s of CPU apiece)
    assert runner_mod.start_method() == "forkserver"
    preload = runner_mod.worker_preload()
    assert preload[:2] == ["distributed", "labeler.study.ingest"]
    assert "labeler.project" in preload and "numpy" in preload  # loaded here, so there too
    assert not any(m.startswith("labeler.app") for m in preload)  # Bokeh stays out
    paths = _files(tmp_path / "rec", n=2)
    with runner_mod.open_runner(2, backend="dask") as r:
        parents = {got for _, got in r.as_completed([r.submit(os.getppid) for _ in range(4)])}
        with Project.create(tmp_path / "p.labeler", annotator="t") as p:
            rep = ingest(p, paths, r)
    assert os.getpid() not in parents  # not started by this process...
    for pid in parents:  # ...but by the fork server, which outlives the cluster
        with open(f"/proc/{pid}/cmdline", "rb") as f:
            assert b"multiprocessing.forkserver" in f.read()
    assert [a.name for a in rep.added] == ["rec0", "rec1"]
    assert rep.worker_cpu_seconds >= rep.task_cpu_seconds > 0
    with runner_mod.open_runner(2, backend="processes") as r:  # the pool without Dask too
        assert {got for _, got in r.as_completed([r.submit(os.getppid)])} <= parents


def test_all_or_none_writes_nothing_when_a_file_is_refused(tmp_path, scheduler):
    _files(tmp_path / "rec", n=2)
    _bad_file(tmp_path / "rec")
    with Project.create(tmp_path / "p.labeler", annotator="t") as p:
        with pytest.raises(InputError, match=r"broken\.csv: row 9.*nothing added \(1 file"):
            p.add_many([tmp_path / "rec"], scheduler=scheduler, all_or_none=True)
        assert len(p.recordings()) == 0 and p.n_windows == 0


def test_a_file_already_in_the_project_is_refused_and_the_rest_go_on(tmp_path, scheduler):
    paths = _files(tmp_path / "rec", n=2)
    with Project.create(tmp_path / "p.labeler", annotator="t") as p:
        p.add_recordings([paths[0]])
        copy = tmp_path / "rec" / "copy_of_rec0.csv"
        copy.write_bytes(paths[0].read_bytes())
        rep = p.add_many([tmp_path / "rec", p.path], scheduler=scheduler)
        assert [a.name for a in rep.added] == ["rec1"]
        reasons = " | ".join(r.reason for r in rep.refused)
        assert len(rep.refused) == 3
        assert "copy_of_rec0.csv: already in the project as recording 'rec0'" in reasons
        assert "p.labeler: is this project's own file, not an input" in reasons
        assert "rec0.csv: a recording named 'rec0' is already in the project" in reasons
        assert len(p.recordings()) == 2


def test_without_dask_the_same_ingest_runs_on_local_processes(tmp_path, monkeypatch):
    paths = _files(tmp_path / "rec", n=2)
    monkeypatch.setattr(runner_mod, "dask_available", lambda: False)
    with pytest.raises(InputError, match=r"Dask is not installed.*labeler\[scale\]"):
        runner_mod.open_runner(2, scheduler="tcp://127.0.0.1:1")
    with Project.create(tmp_path / "p.labeler", annotator="t") as p:
        rep = p.add_many(paths, workers=2)
        assert rep.runner == "a local process pool of 2 worker(s)"
        assert [a.name for a in rep.added] == ["rec0", "rec1"] and not rep.refused


# ------------------------------------------------------------------------- apply to a study
# Source: Bagnall et al., "The UEA multivariate time series classification archive, 2018" (2018),
# BasicMotions (shipped in aeon): a watch's accelerometer and gyroscope at 10 Hz, 10-s series of
# four activities, 40 train + 40 test series. Units as established in test_basicmotions.py (m/s²
# without gravity, rad/s); we convert to g and deg/s and add 1 g on z, as a worn device would
# record it at rest. Series of the train split become project recordings, those of the test split
# the study; the published nearest-neighbour accuracies on this set are about 1.0 (from memory),
# so a model trained on every train window must label at least 90 % of the test windows right,
# and its calibrated mean confidence must lie within 0.1 of its accuracy.

CHANNELS = ["dev_acc_x", "dev_acc_y", "dev_acc_z", "dev_gyr_x", "dev_gyr_y", "dev_gyr_z"]


def _basic_motions_recordings(folder, split, per_recording=10, seed=0):
    datasets = pytest.importorskip("aeon.datasets")
    X, y = datasets.load_basic_motions(split=split)
    X = X.astype(np.float64)
    X[:, :3] /= 9.80665
    X[:, 2] += 1.0
    X[:, 3:] *= 180.0 / math.pi
    order = np.random.default_rng(seed).permutation(len(y))
    folder.mkdir(exist_ok=True)
    truth = {}
    for r in range(len(y) // per_recording):
        idx = order[r * per_recording:(r + 1) * per_recording]
        sig = np.concatenate([X[i].T for i in idx])
        frame = pd.DataFrame(sig, columns=CHANNELS)
        frame.insert(0, "time", np.arange(len(frame)) / 10.0)
        name = f"{split}{r}"
        frame.to_csv(folder / f"{name}.csv", index=False)
        truth[name] = np.asarray(y)[idx]
    return truth


def test_apply_labels_basic_motions_test_split_from_the_train_split(tmp_path, scheduler):
    train = _basic_motions_recordings(tmp_path / "train", "train")
    test = _basic_motions_recordings(tmp_path / "study", "test")
    with Project.create(tmp_path / "bm.labeler", window_length_s=5.0, window_step_s=5.0,
                        annotator="t") as p:
        p.add_recordings(sorted((tmp_path / "train").glob("*.csv")))
        w = p.windows()
        series = (w["start_sample"] // 100).to_numpy()  # two 5-s windows per 10-s series
        labels = np.array([train[r][s] for r, s in zip(w["recording"], series)])
        for c in np.unique(labels):
            p.confirm(w["id"][labels == c], c, create_class=True)
        rep = p.apply_to_study([tmp_path / "study"], tmp_path / "out", scheduler=scheduler)
    assert [r["name"] for r in rep.written] == sorted(test) and not rep.refused
    right = total = 0
    conf = []
    for name, truth in test.items():
        got = pd.read_csv(tmp_path / "out" / name / "windows.csv")
        assert len(got) == 20
        want = truth[(got["start_s"].to_numpy() // 10).astype(int)]
        right += int((got["label"].to_numpy() == want).sum())
        total += len(got)
        conf.extend(got["confidence"])
        probs = got[[f"p_{c}" for c in sorted(set(labels))]].to_numpy()
        np.testing.assert_allclose(probs.sum(axis=1), 1.0, atol=1e-6)
    accuracy = right / total
    assert accuracy >= 0.9, accuracy
    assert abs(float(np.mean(conf)) - accuracy) <= 0.1, (np.mean(conf), accuracy)
    m = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert m["model"]["calibration"]["grouped_by"] == "recording"
    assert m["settings"]["window_length_s"] == 5.0 and m["settings"]["channels"] == CHANNELS
    assert m["model"]["training_windows"] == len(w)


def test_apply_skips_project_recordings_refuses_other_channels_and_keeps_earlier_runs(tmp_path,
                                                                                      scheduler):
    paths = _files(tmp_path / "rec", n=3, seconds=60)
    with Project.create(tmp_path / "p.labeler", annotator="t") as p:
        p.add_recordings(paths[:2])
        w = p.windows()
        half = w["start_s"] < 30
        p.confirm(w["id"][half], "first", create_class=True)
        p.confirm(w["id"][~half], "second", create_class=True)
        study = tmp_path / "study"
        study.mkdir()
        (study / "known.csv").write_bytes(paths[0].read_bytes())
        (study / "new.csv").write_bytes(paths[2].read_bytes())
        sensor_frame(n=3000, seed=5, sites=("ankle",)).to_csv(study / "ankle.csv", index=False)
        rep = p.apply_to_study([study], tmp_path / "out", scheduler=scheduler, fmt="parquet")
        assert [r["name"] for r in rep.written] == ["new"]
        assert [s.path for s in rep.skipped] == [str(study / "known.csv")]
        assert len(rep.refused) == 1
        assert rep.refused[0].reason.startswith(f"{study / 'ankle.csv'}: no channel 'wrist_acc_x'")
        segs = pd.read_parquet(tmp_path / "out" / "new" / "segments.parquet")
        wins = pd.read_parquet(tmp_path / "out" / "new" / "windows.parquet")
        assert segs["windows"].sum() == len(wins)
        assert set(segs["label"]) <= {"first", "second"}
        before = (tmp_path / "out" / "manifest.json").read_bytes()
        with pytest.raises(InputError, match="holds labels of an earlier run; give another folder"):
            p.apply_to_study([study], tmp_path / "out", scheduler=scheduler)
        assert (tmp_path / "out" / "manifest.json").read_bytes() == before


def test_cli_ingest_on_a_local_cluster_and_apply_on_a_given_scheduler(tmp_path, scheduler):
    _files(tmp_path / "rec", n=2, seconds=60)
    _bad_file(tmp_path / "rec")
    project = tmp_path / "p.labeler"
    run = CliRunner()
    env = {"LABELER_ANNOTATOR": "cli-user"}
    assert run.invoke(cli, ["new", str(project)], env=env).exit_code == 0
    res = run.invoke(cli, ["ingest", str(project), str(tmp_path / "rec"), "--workers", "2"],
                     env=env)
    assert res.exit_code == 1, res.output
    assert "added rec0: 1.0 min, 45 windows" in res.output
    assert "refused: " in res.output and "broken.csv: row 9" in res.output
    assert "2 recording(s) added (90 windows), 1 refused" in res.output
    assert "a Dask LocalCluster of 2 worker(s)" in res.output
    with Project.open(project, annotator="t") as p:
        w = p.windows()
        p.confirm(w["id"][w["start_s"] < 30], "first", create_class=True)
        p.confirm(w["id"][w["start_s"] >= 30], "second", create_class=True)
    res = run.invoke(cli, ["apply", str(project), str(tmp_path / "rec" / "rec*.csv"), "--out",
                           str(tmp_path / "out"), "--scheduler", scheduler],
                     env=env)
    assert res.exit_code == 0, res.output
    assert "skipped: " in res.output and "0 recording(s) labeled (0 windows), 2 skipped" in res.output
    res = run.invoke(cli, ["apply", str(project), str(tmp_path / "nowhere"), "--out",
                           str(tmp_path / "out2")], env=env)
    assert res.exit_code == 2
    assert res.output.strip().endswith("nowhere: no such file or folder; check the path")


def _few_confirmed_basic_motions(tmp_path, per_class=2):
    """A project of the BasicMotions train split with ``per_class`` windows of each activity
    confirmed (in as many recordings) and proposals made; returns (path, study folder, truth of the study)."""
    train = _basic_motions_recordings(tmp_path / "train", "train")
    test = _basic_motions_recordings(tmp_path / "study", "test")
    path = tmp_path / "bm.labeler"
    with Project.create(path, window_length_s=5.0, window_step_s=5.0, annotator="t") as p:
        p.add_recordings(sorted((tmp_path / "train").glob("*.csv")))
        w = p.windows()
        series = (w["start_sample"] // 100).to_numpy()
        labels = np.array([train[r][s] for r, s in zip(w["recording"], series)])
        for c in np.unique(labels):  # the first window of the class in each of two recordings
            first = w[labels == c].groupby("recording_id")["id"].min()
            p.confirm(first.to_numpy()[:per_class], c, create_class=True)
        p.refresh_proposals()
    return path, tmp_path / "study", test


def _accuracy(out, truth) -> float:
    right = total = 0
    for name, labels in truth.items():
        got = pd.read_csv(out / name / "windows.csv")
        right += int((got["label"].to_numpy()
                      == labels[(got["start_s"].to_numpy() // 10).astype(int)]).sum())
        total += len(got)
    return right / total


def test_apply_with_proposed_trains_on_the_confident_proposals_too(tmp_path):
    # BasicMotions as above; 2 confirmed windows per activity (8 of 80) and the proposals spread
    # from them. With proposals the model trains on the confirmed windows plus every proposal
    # of confidence >= the threshold that is not confirmed, and says so in the manifest.
    path, study, truth = _few_confirmed_basic_motions(tmp_path)
    with Project.open(path, annotator="t") as p:
        props = p.proposals()
        # a threshold that leaves out about half of the proposals
        threshold = round(float(props.loc[~props["confirmed"], "confidence"].median()), 2)
        confident = int(((~props["confirmed"]) & (props["confidence"] >= threshold)
                         & props["label"].notna()).sum())
        assert 0 < confident < len(props) - 8
        rep = p.apply_to_study([study], tmp_path / "with", include_proposed=True,
                               min_confidence=threshold, backend="processes", workers=1)
        only = p.apply_to_study([study], tmp_path / "only", backend="processes", workers=1)
    assert len(rep.written) == len(truth) and not rep.refused
    model = json.loads((tmp_path / "with" / "manifest.json").read_text())["model"]
    assert model["training"] == {"confirmed_windows": 8, "proposed_windows": confident,
                                 "proposed_min_confidence": threshold, "recordings": 4}
    assert model["training_windows"] == 8 + confident
    base = json.loads((tmp_path / "only" / "manifest.json").read_text())["model"]
    assert base["training"]["proposed_windows"] == 0
    assert base["training"]["proposed_min_confidence"] is None
    assert base["training_windows"] == 8
    # the study's labels stay good: published accuracies on BasicMotions are about 1.0 (from
    # memory); 8 confirmations and their confident proposals must label 9 of 10 windows right
    assert _accuracy(tmp_path / "with", truth) >= 0.9


def test_cli_apply_with_proposed_passes_the_threshold_and_refuses_one_outside_0_1(tmp_path):
    path, study, truth = _few_confirmed_basic_motions(tmp_path)
    with Project.open(path, readonly=True) as p:
        props = p.proposals()
    threshold = round(float(props.loc[~props["confirmed"], "confidence"].quantile(0.25)), 2)
    confident = int(((~props["confirmed"]) & (props["confidence"] >= threshold)).sum())
    run = CliRunner()
    env = {"LABELER_ANNOTATOR": "t"}
    res = run.invoke(cli, ["apply", str(path), str(study), "--out", str(tmp_path / "out"),
                           "--with-proposed", "--min-confidence", str(threshold), "--backend",
                           "processes", "--workers", "1"], env=env)
    assert res.exit_code == 0, res.output
    model = json.loads((tmp_path / "out" / "manifest.json").read_text())["model"]
    assert model["training"]["proposed_min_confidence"] == threshold
    assert model["training"]["proposed_windows"] == confident > 0
    res = run.invoke(cli, ["apply", str(path), str(study), "--out", str(tmp_path / "out2"),
                           "--with-proposed", "--min-confidence", "1.5"], env=env)
    assert res.exit_code == 2
    assert res.output.strip() == ("Error: minimum confidence 1.5 is outside 0-1; give e.g. 0.9")
    assert not (tmp_path / "out2").exists()
