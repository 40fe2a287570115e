import shutil

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings, strategies as st

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from conftest import sensor_frame
from storage import Store

WHO = ("ana", "bo", "cy")
N_WINDOWS = 8  # 600 samples at 50 Hz, windows of 128 every 64: floor((600 - 128) / 64) + 1


def run(*args, who="cli-user"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": who})


def first_line(result):
    text = result.stderr if result.exit_code else result.stdout
    return text.strip().splitlines()[0] if text.strip() else ""


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    folder = tmp_path_factory.mktemp("history")
    path = folder / "template.labeler"
    csv = folder / "gamma.csv"
    sensor_frame(600, seed=3).to_csv(csv, index=False)
    with Project.create(path, annotator="ana") as p:
        p.add_recordings([csv])
        for name in ("sit", "walk", "lift", "carry"):
            p.add_class(name)
        assert p.n_windows == N_WINDOWS
    return path


def tables(store):
    ann = {(w, who): c for w, who, c in store.annotations()}
    cur = {w: c for w, c, *_ in store.current_labels()}
    return ann, cur


ops = st.lists(st.tuples(
    st.sampled_from(["confirm", "confirm", "confirm", "withdraw", "undo", "undo-batch", "merge",
                     "add"]),
    st.integers(0, len(WHO) - 1),
    st.sets(st.integers(1, N_WINDOWS), min_size=1, max_size=4),
    st.integers(0, 1000)), min_size=1, max_size=20)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(steps=ops)
def test_current_labels_always_equal_the_replay_of_events(template, tmp_path_factory, steps):
    path = tmp_path_factory.mktemp("h") / "p.labeler"
    shutil.copy(template, path)
    store = Store.open(path)
    people = {who: Project(store, annotator=who) for who in WHO}
    added = 0
    try:
        for kind, who_i, windows, pick in steps:
            p = people[WHO[who_i]]
            active = p.active_classes()
            try:
                if kind == "confirm":
                    p.confirm(sorted(windows), active[pick % len(active)], source="map")
                elif kind == "withdraw":
                    p.withdraw(sorted(windows), source="timeline")
                elif kind == "undo":
                    p.undo()
                elif kind == "undo-batch":
                    open_batches = [b["id"] for b in store.batches() if b["undone_by"] is None]
                    if open_batches:
                        p.undo(open_batches[pick % len(open_batches)])
                elif kind == "merge" and len(active) >= 2:
                    src = active[pick % len(active)]
                    dst = active[(pick // 7 + 1 + pick % len(active)) % len(active)]
                    if src != dst:
                        p.merge_classes(src, dst)
                elif kind == "add":
                    added += 1
                    p.add_class(f"new{added}")
            except InputError as exc:  # nothing to undo, or undoing an undo's target twice
                assert "nothing to undo" in str(exc) or "undone already" in str(exc) \
                    or "no batch" in str(exc)
            ann, cur = tables(store)
            assert (ann, cur) == store.replay()
            # and the service layer shows the same current labels
            lab = people["ana"].labels()
            assert dict(zip(lab["window_id"], lab["class_id"])) == cur
    finally:
        store.close()


# ----------------------------------------------------------------------------- the CLI

@pytest.fixture
def cli_project(tmp_path, write_csv):
    proj = tmp_path / "p.labeler"
    run("new", proj)
    run("add", proj, write_csv(sensor_frame(600, seed=3), "gamma.csv"))
    run("confirm", proj, "walk", "--windows", "1-2", "--new-class", who="ana")
    run("confirm", proj, "sit", "--windows", "3", "--new-class", who="bo")
    run("confirm", proj, "sit", "--windows", "1", who="bo")
    return proj


def test_history_table_and_filters(cli_project):
    r = run("history", cli_project)
    assert r.exit_code == 0, r.output
    lines = r.output.splitlines()
    assert lines[0].split() == ["event", "at", "(UTC)", "annotator", "by", "action", "window",
                                "class", "source", "batch"]
    assert len(lines) == 1 + 4
    assert lines[1].split()[3:8] == ["ana", "ana", "confirm", "gamma#0", "walk"]
    assert lines[4].split()[3:10] == ["bo", "bo", "confirm", "gamma#0", "sit", "cli",
                                      lines[4].split()[9]]
    r = run("history", cli_project, "--annotator", "bo")
    assert len(r.output.splitlines()) == 1 + 2
    r = run("history", cli_project, "--class", "walk")
    assert [ln.split()[7] for ln in r.output.splitlines()[1:]] == ["walk", "walk"]
    r = run("history", cli_project, "--source", "cli", "--last", "1")
    assert len(r.output.splitlines()) == 2 and r.output.splitlines()[1].split()[6] == "gamma#0"
    r = run("history", cli_project, "--since", "2999-01-01")
    assert r.output == "no events match\n"
    r = run("history", cli_project, "--until", "2000-01-01T00:00:00+02:00")
    assert r.output == "no events match\n"
    r = run("history", cli_project, "--since", "2000-01-01T00:00Z")
    assert len(r.output.splitlines()) == 5


def test_history_bad_filters_one_line(cli_project):
    r = run("history", cli_project, "--since", "yesterday-ish")
    assert r.exit_code == 2 and first_line(r) == (
        "Error: --since 'yesterday-ish': not a time; give ISO-8601 like 2026-05-01T08:00Z")
    r = run("history", cli_project, "--source", "telepathy")
    assert r.exit_code == 2 and first_line(r) == (
        "Error: --source 'telepathy': unknown; use one of map, timeline, queue, audit, import, cli, "
        "api, class-merge, undo")
    r = run("history", cli_project, "--class", "fly")
    assert r.exit_code == 2 and first_line(r).startswith("Error: no class 'fly'; classes: ")


def test_undo_by_batch_shows_in_history(cli_project):
    with Project.open(cli_project) as p:
        first = p.store.batches()[0]["id"]
    r = run("undo", cli_project, "--batch", first[:8], who="cy")
    # window 1 moved on since (bo's later label is a different annotator's; ana's own label of
    # window 1 still is walk), so both of ana's windows go back to no label
    assert r.exit_code == 0 and r.output.startswith(f"undid batch {first[:8]}: 2 window(s) restored")
    r = run("history", cli_project, "--source", "undo")
    rows = [ln.split() for ln in r.output.splitlines()[1:]]
    # whose label changed (ana) and who undid it (cy)
    assert [x[3:8] for x in rows] == [["ana", "cy", "undo", "gamma#0", "-"],
                                      ["ana", "cy", "undo", "gamma#1", "-"]]
    with Project.open(cli_project) as p:
        assert p.store.batch(first)["undone_by"] is not None
        lab = p.labels().set_index("window_id")["class"].to_dict()
    assert lab == {1: "sit", 3: "sit"}
    r = run("undo", cli_project, "--batch", first[:8], who="cy")
    assert r.exit_code == 2 and first_line(r).startswith(f"Error: batch {first} was undone already")


def test_class_log_through_the_cli(cli_project):
    assert run("class", "rename", cli_project, "walk", "walking", who="ana").exit_code == 0
    assert run("class", "add", cli_project, "amble", who="bo").exit_code == 0
    assert run("class", "merge", cli_project, "amble", "walking", who="bo").exit_code == 0
    assert run("class", "retire", cli_project, "sit", who="cy").exit_code == 0
    r = run("history", cli_project, "--class-log")
    rows = [ln.split(None, 2)[2] for ln in r.output.splitlines()[1:]]  # drop date and time
    assert [" ".join(x.split()) for x in rows] == [
        "ana add walking name walk, colour #E69F00",
        "bo add sit name sit, colour #0072B2",
        "ana rename walking from walk, to walking",
        "bo add amble name amble, colour #009E73",
        "bo merge amble into walking",
        "cy retire sit",
    ]
    r = run("history", cli_project, "--class-log", "--annotator", "cy")
    assert len(r.output.splitlines()) == 2
