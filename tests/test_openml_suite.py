"""OpenML entries inside suite files: the real openml client reads a cache seeded on disk.

The server configured for these tests is a closed loopback port, so nothing reaches a network.
"""

from __future__ import annotations

from harness import load_results, run_suite
from harness.cli import main
from harness.suite import load_suite


def suite_file(seeded, body: str):
    seeded.suite_file.parent.mkdir(parents=True, exist_ok=True)
    seeded.suite_file.write_text(body)
    return seeded.suite_file


TASK_SUITE = """
[protocol]
splits = "published"

[[dataset]]
name = "orchard"
from = "openml"
task = 77
expect = { rows = 60 }

[[strategy]]
name = "tree"
method = "single-tree"

[[strategy]]
name = "hgb"
method = "hist-gradient-boosting"
params = { max_iter = 10, min_samples_leaf = 2 }
"""


def test_task_splits_are_used_exactly_as_published(seeded, tmp_path):
    path = suite_file(seeded, TASK_SUITE)
    run_suite(path, out=tmp_path / "out", jobs=1, progress=False)
    frame = load_results(tmp_path / "out")
    assert (frame.status == "ok").all(), frame.message.tolist()
    assert len(frame) == 2 * len(seeded.splits77)
    for (repeat, fold), (train, test) in seeded.splits77.items():
        rows = frame[(frame.repeat == repeat) & (frame.fold == fold)]
        assert len(rows) == 2
        assert (rows.n_train == len(train)).all() and (rows.n_test == len(test)).all()


def test_published_splits_need_task_entries(seeded, tmp_path, capsys):
    path = suite_file(seeded, TASK_SUITE.replace("task = 77", "dataset = 4242"))
    assert main(["run", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "dataset 'orchard'" in err and "published splits" in err
    assert not (tmp_path / "out").exists()


def test_uncached_dataset_offline_stops_before_anything_is_written(seeded, tmp_path, capsys):
    body = TASK_SUITE.replace('splits = "published"', "folds = 3\nrepeats = 1") \
        .replace("task = 77\nexpect = { rows = 60 }", "dataset = 31")
    path = suite_file(seeded, body)
    assert main(["run", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "dataset 'orchard'" in err and "woodlot download" in err
    assert not (tmp_path / "out").exists()
    assert main(["download", str(path)]) == 2  # and downloading needs the network it lacks
    assert "orchard" in capsys.readouterr().err


def test_download_with_everything_cached_downloads_nothing(seeded, capsys):
    path = suite_file(seeded, TASK_SUITE)
    assert main(["download", str(path)]) == 0
    out = capsys.readouterr().out
    assert "already in the cache" in out


def test_benchmark_suite_entry_expands_into_its_tasks(seeded):
    body = TASK_SUITE.replace('splits = "published"', "folds = 2\nrepeats = 1").replace(
        'name = "orchard"\nfrom = "openml"\ntask = 77\nexpect = { rows = 60 }',
        'name = "bench"\nfrom = "openml"\nsuite = 9001\nmax_rows = 100')
    path = suite_file(seeded, body)
    suite = load_suite(path)
    assert [d.name for d in suite.datasets] == ["bench/orchard-survey", "bench/river-gauge"]
    assert [d.options for d in suite.datasets] == [{"task": 77}, {"task": 78}]
    unexpanded = load_suite(path, expand=False)
    assert [d.name for d in unexpanded.datasets] == ["bench"]
