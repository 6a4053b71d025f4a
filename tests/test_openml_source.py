"""The OpenML source, run through the real openml client against a cache seeded on disk.

No test reaches the OpenML server: the configured server is a closed loopback port (or, for
the tests of server answers, a small HTTP server on loopback started by the test). The
``seeded`` fixture (conftest.py) holds the cache of `tests.openml_cache.Seeded`.
"""

from __future__ import annotations

import ast
import hashlib
import http.server
import json
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tests import openml_cache as oc  # noqa: E402

from harness.datasets import SOURCES  # noqa: E402
from harness.datasets import openml as src  # noqa: E402
from harness.datasets.spec import DatasetSpec  # noqa: E402
from harness.errors import UserError  # noqa: E402


# ------------------------------------------------------------------------ cache location

def test_cache_location_follows_openml_env_then_config_file(tmp_path):
    import openml
    with oc.openml_configured(tmp_path / "a") as cache:
        assert openml.config.server == oc.CLOSED_SERVER  # read from openml's config file
        # OPENML_CACHE_DIR wins over the config file; one folder per server below it
        assert cache == (tmp_path / "a" / "cache" / "1:9" / "0" / "0" / "127").resolve()
        assert src.cache_directory() == cache
    with oc.openml_configured(tmp_path / "b", cache_env=False) as cache:
        assert src.cache_directory() == (tmp_path / "b" / "cache-from-config" / "1:9" / "0"
                                         / "0" / "127").resolve()
    assert src.cache_directory() != cache  # the previous configuration is back


# ---------------------------------------------------------------------------- dataset = ID

def test_dataset_entry_drops_ignored_and_row_id_and_keeps_nominal_as_categorical(seeded):
    d = seeded.orchard
    ds = src.load_openml(seeded.spec(dataset=4242))
    assert list(ds.X.columns) == ["height", "girth", "soil"]  # row_key, collector, note gone
    assert ds.categorical == ("soil",)
    assert isinstance(ds.X["soil"].dtype, pd.CategoricalDtype)
    assert list(ds.X["soil"].cat.categories) == ["clay", "loam", "sand"]
    assert pd.api.types.is_float_dtype(ds.X["height"])
    assert ds.X["height"].isna().sum() == 6 and ds.X["soil"].isna().sum() == 4
    np.testing.assert_allclose(ds.X["height"], d.frame["height"])
    assert (ds.X["soil"].astype(object).fillna("?").tolist()
            == d.frame["soil"].astype(object).fillna("?").tolist())
    assert ds.task == "classification" and ds.y.name == "species"
    assert ds.y.astype(str).tolist() == d.frame["species"].tolist()
    assert ds.splits is None
    assert ds.source == "openml:dataset/4242"
    assert ds.meta["openml_dataset_id"] == 4242 and ds.meta["openml_version"] == 2
    assert ds.meta["openml_name"] == "orchard-survey" and ds.meta["openml_task_id"] is None
    assert set(ds.meta["openml_dropped"]) == {"row_key", "collector", "survey_note"}


def test_fingerprint_is_the_same_when_read_back_from_the_clients_pickle(seeded):
    pickle = seeded.cache / "datasets" / "4242" / "dataset.pkl.py3"
    assert not pickle.exists()
    first = src.load_openml(seeded.spec(dataset=4242))
    assert pickle.exists()  # the second load reads the client's parsed copy, not the ARFF
    second = src.load_openml(seeded.spec(dataset=4242))
    assert first.fingerprint == second.fingerprint
    other = src.load_openml(seeded.spec(dataset=4242, target="girth"))
    assert other.fingerprint != first.fingerprint


def test_target_option_and_learning_type(seeded):
    ds = src.load_openml(seeded.spec(dataset=4242, target="girth"))
    assert ds.task == "regression" and ds.y.name == "girth"
    assert set(ds.X.columns) == {"height", "soil", "species"}
    assert set(ds.categorical) == {"soil", "species"}
    as_classes = src.load_openml(seeded.spec(dataset=4242, target="girth",
                                             task="classification"))
    assert as_classes.task == "classification"


def test_unknown_target_suggests_the_closest_column(seeded):
    with pytest.raises(UserError) as err:
        src.load_openml(seeded.spec(dataset=4242, target="hieght"))
    msg = str(err.value)
    assert "dataset 'orchard' (entry 2)" in msg and "field 'target'" in msg
    assert "did you mean 'height'" in msg
    with pytest.raises(UserError, match="ignored or row-id"):
        src.load_openml(seeded.spec(dataset=4242, target="collector"))


def test_parquet_dataset_categories_come_from_the_file(seeded):
    ds = src.load_openml(seeded.spec(dataset=4243))
    assert list(ds.X.columns) == ["rain", "season", "station", "level"]
    assert ds.categorical == ("season", "station")
    assert ds.task == "regression"
    np.testing.assert_allclose(ds.y.to_numpy(), seeded.river.frame["flow"].to_numpy())


# ------------------------------------------------------------------------------- task = ID

def test_task_entry_uses_exactly_the_published_splits(seeded):
    ds = src.load_openml(seeded.spec(name="t77", task=77))
    assert ds.source == "openml:task/77" and ds.task == "classification"
    assert ds.meta["openml_task_id"] == 77 and ds.meta["openml_dataset_id"] == 4242
    assert [(s.repeat, s.fold) for s in ds.splits] == sorted(seeded.splits77)
    for s in ds.splits:
        train, test = seeded.splits77[(s.repeat, s.fold)]
        np.testing.assert_array_equal(s.train, train)
        np.testing.assert_array_equal(s.test, test)
        # rows stay aligned with the table: the labels at the test rows are the seeded ones
        assert (ds.y.iloc[s.test].astype(str).tolist()
                == seeded.orchard.frame["species"].iloc[test].tolist())
    # the splits are part of the content fingerprint
    assert ds.fingerprint != src.load_openml(seeded.spec(dataset=4242)).fingerprint


def test_regression_task_on_parquet_data(seeded):
    ds = src.load_openml(seeded.spec(name="flow", task=78))
    assert ds.task == "regression" and ds.y.name == "flow"
    assert len(ds.splits) == 4 and {s.repeat for s in ds.splits} == {0}
    for s in ds.splits:
        np.testing.assert_array_equal(s.test, seeded.splits78[(0, s.fold)][1])


@pytest.mark.parametrize("tid, kind", [(80, "Clustering"),
                                       (81, "Supervised Data Stream Classification")])
def test_other_task_types_are_refused(seeded, tid, kind):
    with pytest.raises(UserError) as err:
        src.load_openml(seeded.spec(name="odd", task=tid))
    msg = str(err.value)
    assert f"task {tid} is a '{kind}' task" in msg
    assert "dataset 'odd' (entry 2)" in msg and "field 'task'" in msg


# -------------------------------------------------------------------------------- expect

def test_expect_matching_passes(seeded):
    ds = src.load_openml(seeded.spec(dataset=4242, expect={"name": "orchard-survey",
                                                           "rows": 60, "columns": 3}))
    assert ds.n_rows == 60


@pytest.mark.parametrize("expect, field, text", [
    ({"rows": 61}, "expect.rows", "expected 61 rows, found 60 rows"),
    ({"columns": 5}, "expect.columns", "expected 5 columns, found 3 columns"),
    ({"name": "credit-g"}, "expect.name", "expected 'credit-g', found 'orchard-survey'"),
])
def test_expect_mismatch_names_entry_field_expected_and_found(seeded, expect, field, text):
    with pytest.raises(UserError) as err:
        src.load_openml(seeded.spec(task=77, expect=expect))
    msg = str(err.value)
    assert msg.startswith(f"{seeded.suite_file}: dataset 'orchard' (entry 2): field '{field}'")
    assert text in msg and "\n" not in msg


# ------------------------------------------------------------------------ offline / network

def test_uncached_dataset_offline_points_to_woodlot_download_quickly(seeded):
    start = time.monotonic()
    with pytest.raises(UserError) as err:
        src.load_openml(seeded.spec(name="far", position=3, dataset=5555))
    assert time.monotonic() - start < 3
    msg = str(err.value)
    assert "dataset 'far' (entry 3)" in msg and "field 'dataset'" in msg
    assert f"woodlot download {seeded.suite_file}" in msg
    assert "OpenML dataset 5555 is not in the local OpenML cache" in msg
    assert "after 2 attempts" in msg and "\n" not in msg


def test_task_with_uncached_data_offline(seeded):
    with pytest.raises(UserError) as err:
        src.load_openml(seeded.spec(name="meadow", task=79))
    msg = str(err.value)
    assert "field 'task'" in msg and "woodlot download" in msg


def test_is_cached_and_download_need_no_server_when_everything_is_there(seeded):
    assert src.is_cached(seeded.spec(dataset=4242))
    assert src.is_cached(seeded.spec(task=77))
    assert not src.is_cached(seeded.spec(dataset=5555))
    assert not src.is_cached(seeded.spec(task=79))  # metadata only
    assert src.is_cached(seeded.spec(suite=9001, max_rows=100))  # 79 filtered out
    assert not src.is_cached(seeded.spec(suite=9001))  # 79 kept, its data missing
    assert not src.is_cached(seeded.spec(suite=4711))
    said = []
    assert src.download(seeded.spec(task=77), progress=said.append) == []
    assert src.download(seeded.spec(suite=9001, max_rows=100), progress=said.append) == []
    assert any("already cached" in line for line in said)


def test_download_without_network_is_one_clear_error(seeded):
    with pytest.raises(UserError) as err:
        src.download(seeded.spec(name="meadow", task=79))
    msg = str(err.value)
    assert "could not download OpenML dataset 4244" in msg and "after 2 attempts" in msg
    assert "dataset 'meadow' (entry 2): field 'task'" in msg


def test_bad_retry_setting(seeded, monkeypatch):
    monkeypatch.setenv("WOODLOT_OPENML_ATTEMPTS", "zero")
    with pytest.raises(UserError, match="WOODLOT_OPENML_ATTEMPTS"):
        src.load_openml(seeded.spec(dataset=5555))


class _Server:
    """A loopback HTTP server answering fixed paths, counting requests."""

    def __init__(self):
        self.routes: dict[str, tuple[int, str]] = {}
        self.hits: list[str] = []
        owner = self

        class Handler(http.server.BaseHTTPRequestHandler):
            def do_GET(self):  # noqa: N802
                path = self.path.split("?")[0]
                owner.hits.append(path)
                status, body = owner.routes.get(path, (404, "not here"))
                data = body.encode("utf8")
                self.send_response(status)
                self.send_header("Content-Length", str(len(data)))
                self.end_headers()
                self.wfile.write(data)

            def log_message(self, *args):
                pass

        self.httpd = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.port = self.httpd.server_address[1]
        self.url = f"http://127.0.0.1:{self.port}"
        self.thread = threading.Thread(target=self.httpd.serve_forever, daemon=True)
        self.thread.start()

    def stop(self):
        self.httpd.shutdown()
        self.httpd.server_close()


@pytest.fixture
def server(tmp_path):
    s = _Server()
    try:
        with oc.openml_configured(tmp_path, server=f"{s.url}/api/v1/xml") as cache:
            s.cache = cache
            yield s
    finally:
        s.stop()


def _error_xml(code: int, message: str) -> str:
    return (f'<oml:error {oc.NS}><oml:code>{code}</oml:code><oml:message>{message}'
            '</oml:message></oml:error>')


def test_unknown_id_is_a_user_error_naming_the_field(server, tmp_path):
    server.routes["/api/v1/xml/data/999999"] = (412, _error_xml(111, "Unknown dataset"))
    server.routes["/api/v1/xml/task/888888"] = (412, _error_xml(151, "Unknown task"))
    spec = DatasetSpec("gone", "openml", {"dataset": 999999}, tmp_path / "s.toml", 4)
    with pytest.raises(UserError) as err:
        src.load_openml(spec)
    msg = str(err.value)
    assert "dataset 'gone' (entry 4): field 'dataset'" in msg
    assert "OpenML dataset 999999 does not exist" in msg and "Unknown dataset" in msg
    assert server.hits == ["/api/v1/xml/data/999999"]  # a definite answer is not retried
    spec = DatasetSpec("gone", "openml", {"task": 888888}, tmp_path / "s.toml", 4)
    with pytest.raises(UserError, match=r"field 'task': OpenML task 888888 does not exist"):
        src.download(spec)


def test_server_trouble_is_retried_then_reported_once(server, tmp_path, monkeypatch):
    monkeypatch.setenv("WOODLOT_OPENML_ATTEMPTS", "3")
    server.routes["/api/v1/xml/data/31"] = (503, "Service Unavailable")
    spec = DatasetSpec("busy", "openml", {"dataset": 31}, tmp_path / "s.toml", 1)
    with pytest.raises(UserError) as err:
        src.load_openml(spec)
    assert server.hits == ["/api/v1/xml/data/31"] * 3
    msg = str(err.value)
    assert "after 3 attempts" in msg and "woodlot download" in msg and "\n" not in msg


def test_clients_own_retries_are_off_during_a_call_and_restored_after(server, tmp_path,
                                                                     monkeypatch):
    import openml
    openml.config.set_retry_policy("human", 4)  # the client would try 4 times, waiting
    monkeypatch.setenv("WOODLOT_OPENML_ATTEMPTS", "2")
    server.routes["/api/v1/xml/data/32"] = (503, "Service Unavailable")
    spec = DatasetSpec("busy", "openml", {"dataset": 32}, tmp_path / "s.toml", 1)
    with pytest.raises(UserError, match="after 2 attempts"):
        src.load_openml(spec)
    assert server.hits == ["/api/v1/xml/data/32"] * 2
    after = openml.config.get_config_as_dict()
    assert after["retry_policy"] == "human" and after["connection_n_retries"] == 4


def test_download_fills_the_cache_then_loads_offline(server, tmp_path):
    t = oc.orchard(did=4250)
    staging = tmp_path / "staging"  # render the files, then serve them
    oc.write_dataset(staging, t)
    d = staging / "datasets" / "4250"
    desc = (d / "description.xml").read_text().replace("http://127.0.0.1:9", server.url)
    api = "/api/v1/xml"
    server.routes.update({
        f"{api}/data/4250": (200, desc),
        f"{api}/data/features/4250": (200, (d / "features.xml").read_text()),
        f"{api}/data/qualities/4250": (200, (d / "qualities.xml").read_text()),
        f"/data/v1/download/4250/{t.name}.arff": (200, (d / "dataset.arff").read_text()),
    })
    assert hashlib.md5((d / "dataset.arff").read_bytes()).hexdigest() in desc
    spec = DatasetSpec("orchard", "openml", {"dataset": 4250}, tmp_path / "s.toml", 1)
    assert not src.is_cached(spec)
    said: list[str] = []
    assert src.download(spec, progress=said.append) == ["dataset/4250"]
    assert said == ["orchard: downloading OpenML dataset 4250"]
    assert src.is_cached(spec)
    assert (server.cache / "datasets" / "4250" / "dataset.arff").is_file()
    server.stop()  # from now on the server is gone
    n = len(server.hits)
    ds = src.load_openml(spec)
    assert ds.n_rows == 60 and ds.categorical == ("soil",)
    assert src.download(spec) == [] and len(server.hits) == n


# --------------------------------------------------------------------------- entry checks

@pytest.mark.parametrize("options, field, text", [
    ({}, "dataset", "exactly one of 'dataset = ID', 'task = ID' or 'suite = ID'"),
    ({"task": "classification"}, "dataset", "exactly one of"),
    ({"dataset": 31, "task": 59}, "task", "not both 'dataset' and 'task'"),
    ({"task": 59, "suite": 99}, "suite", "not both 'task' and 'suite'"),
    ({"dataset": "31"}, "dataset", "positive whole number"),
    ({"dataset": True}, "dataset", "positive whole number"),
    ({"task": 0}, "task", "positive whole number"),
    ({"task": "clasification"}, "task", "OpenML task id"),
    ({"suite": "two words"}, "suite", "id or alias"),
    ({"task": 59, "target": "class"}, "target", "task fixes its own target"),
    ({"dataset": 31, "max_rows": 100}, "max_rows", "needs 'suite = ID'"),
    ({"suite": 99, "max_classes": 0}, "max_classes", "positive whole number"),
    ({"suite": 99, "expect": {"rows": 5}}, "expect", "whole suite"),
    ({"dataset": 31, "expect": {"row": 5}}, "expect.row", "did you mean 'rows'"),
    ({"dataset": 31, "expect": {"rows": "many"}}, "expect.rows", "positive whole number"),
    ({"dataset": 31, "expect": 5}, "expect", "expected a table"),
])
def test_check_openml_entry(options, field, text):
    spec = DatasetSpec("e", "openml", options, Path("s.toml"), 7)
    with pytest.raises(UserError) as err:
        src.check_openml_entry(spec)
    msg = str(err.value)
    assert msg.startswith(f"s.toml: dataset 'e' (entry 7): field '{field}'")
    assert text in msg


@pytest.mark.parametrize("options", [{"dataset": 31}, {"dataset": 31, "task": "regression"},
                                     {"task": 59, "expect": {"rows": 3}},
                                     {"suite": "OpenML-CC18", "max_rows": 5000}])
def test_check_openml_entry_accepts(options):
    src.check_openml_entry(DatasetSpec("e", "openml", options, Path("s.toml"), 1))


def test_registered_as_the_openml_source():
    source = SOURCES["openml"]
    assert source.load is src.load_openml
    assert source.check is src.check_openml_entry and source.required == ()
    for key in ("dataset", "task", "suite", "target", "expect", "max_rows", "max_columns",
                "max_classes"):
        assert key in source.keys


# ------------------------------------------------------------------------ benchmark suites

@pytest.mark.parametrize("filters, tasks", [
    ({}, [77, 78, 79]),
    ({"max_rows": 100}, [77, 78]),
    ({"max_classes": 3}, [77, 78]),  # a regression task has no classes to count
    ({"max_columns": 3}, [77, 79]),
    ({"max_rows": 100, "max_columns": 3}, [77]),
])
def test_suite_expansion_with_filters(seeded, filters, tasks):
    entry = seeded.spec(name="bench", position=5, suite=9001, **filters)
    specs = src.expand_benchmark_suite(entry)
    assert [s.options for s in specs] == [{"task": t} for t in tasks]
    names = {77: "bench/orchard-survey", 78: "bench/river-gauge", 79: "bench/meadow-count"}
    assert [s.name for s in specs] == [names[t] for t in tasks]
    assert all(s.source == "openml" and s.suite_file == seeded.suite_file and s.position == 5
               for s in specs)


def test_suite_by_alias_skips_other_task_types_and_remembers_them(seeded):
    specs = src.expand_benchmark_suite(seeded.spec(name="b", suite="orchard-bench",
                                                   max_rows=100))
    assert [s.options["task"] for s in specs] == [77, 78]
    record = json.loads((seeded.cache / "suites" / "orchard-bench.json").read_text())
    assert record["unsupported"] == {"80": "Clustering"}
    # expanded entries load like hand-written ones
    ds = src.load_openml(specs[1])
    assert ds.name == "b/river-gauge" and ds.task == "regression" and len(ds.splits) == 4


def test_suite_filters_that_keep_nothing(seeded):
    with pytest.raises(UserError) as err:
        src.expand_benchmark_suite(seeded.spec(name="b", suite=9001, max_rows=10))
    assert "field 'suite'" in str(err.value) and "max_rows = 10" in str(err.value)


def test_uncached_suite_offline(seeded):
    with pytest.raises(UserError) as err:
        src.expand_benchmark_suite(seeded.spec(name="cc", suite="OpenML-CC18"))
    msg = str(err.value)
    assert "OpenML suite OpenML-CC18 is not in the local OpenML cache" in msg
    assert "field 'suite'" in msg and "woodlot download" in msg


def test_suite_entry_is_not_loaded_directly(seeded):
    with pytest.raises(UserError, match="expanded"):
        src.load_openml(seeded.spec(suite=9001))


def test_downloaded_task_of_a_type_the_client_cannot_read(server, tmp_path):
    oc.write_task(tmp_path / "staging", 81, oc.orchard(), type_id=4)
    xml = (tmp_path / "staging" / "tasks" / "81" / "task.xml").read_text()
    server.routes["/api/v1/xml/task/81"] = (200, xml)
    spec = DatasetSpec("stream", "openml", {"task": 81}, tmp_path / "s.toml", 1)
    with pytest.raises(UserError) as err:
        src.load_openml(spec)
    assert "field 'task': OpenML task 81 is a 'Supervised Data Stream Classification' task" \
        in str(err.value)


def test_suite_task_list_is_downloaded_once_and_kept(server, tmp_path):
    orchard = oc.orchard()
    oc.write_dataset(server.cache, orchard)
    oc.write_task(server.cache, 77, orchard)
    oc.write_task(server.cache, 80, orchard, type_id=5)
    server.routes["/api/v1/xml/study/mini"] = (200, f"""<oml:study {oc.NS}>
  <oml:id>9100</oml:id><oml:alias>mini</oml:alias><oml:main_entity_type>task</oml:main_entity_type>
  <oml:name>Mini</oml:name><oml:description>two tasks</oml:description>
  <oml:status>active</oml:status><oml:creation_date>2024-01-01T00:00:00</oml:creation_date>
  <oml:creator>1</oml:creator>
  <oml:data><oml:data_id>4242</oml:data_id></oml:data>
  <oml:tasks><oml:task_id>77</oml:task_id><oml:task_id>80</oml:task_id></oml:tasks>
</oml:study>""")
    spec = DatasetSpec("mini", "openml", {"suite": "mini"}, tmp_path / "s.toml", 1)
    assert [s.options for s in src.expand_benchmark_suite(spec)] == [{"task": 77}]
    record = json.loads((server.cache / "suites" / "9100.json").read_text())
    assert record["tasks"] == [77, 80] and record["alias"] == "mini"
    assert record["unsupported"] == {"80": "Clustering"}
    server.stop()
    again = DatasetSpec("mini", "openml", {"suite": 9100}, tmp_path / "s.toml", 1)
    assert [s.name for s in src.expand_benchmark_suite(again)] == ["mini/orchard-survey"]
    assert src.is_cached(again) and src.is_cached(spec)
    assert server.hits == ["/api/v1/xml/study/mini"]


def test_cached_arff_copy_is_used_when_the_parquet_file_is_missing(seeded):
    # caches written by older clients hold only the ARFF file of datasets that now offer
    # Parquet; the client would first try to download the Parquet file
    d = seeded.cache / "datasets" / "4243"
    (d / "dataset_4243.pq").unlink()
    (d / "dataset.arff").write_text(oc.arff_text(seeded.river), encoding="utf8")
    spec = seeded.spec(dataset=4243)
    assert src.is_cached(spec)
    start = time.monotonic()
    ds = src.load_openml(spec)
    assert time.monotonic() - start < 1.0
    assert ds.categorical == ("season", "station") and ds.n_rows == 60
    assert not (d / "dataset_4243.pq").exists()
    assert "OPENML_SKIP_PARQUET" not in __import__("os").environ


# ---------------------------------------------------------------- the subpackage's shape

PACKAGE = Path(src.__file__).parent
ROOT = PACKAGE.parents[2]


def _imported(path: Path) -> list[tuple[str, list[str]]]:
    """(module, names) of each ``from module import names`` in a file."""
    return [(node.module or "", [a.name for a in node.names])
            for node in ast.walk(ast.parse(path.read_text(encoding="utf8")))
            if isinstance(node, ast.ImportFrom)]


def test_only_the_cache_module_knows_the_cache_layout():
    layout = ("get_cache_directory", '/ "', '/ f"', "description.xml", "features.xml",
              "qualities.xml", "dataset.arff", ".pq", "task.xml", "datasplits.arff", ".json")
    for path in PACKAGE.glob("*.py"):
        if path.name != "cache.py":
            text = path.read_text(encoding="utf8")
            assert [w for w in layout if w in text] == [], path.name


def test_subpackage_imports_form_no_cycle_and_keep_private_names_inside():
    graph = {p.stem: {m.rsplit(".", 1)[1] for m, _ in _imported(p)
                      if m.startswith(f"{src.__name__}.")}
             for p in PACKAGE.glob("*.py")}
    done: set[str] = set()
    while len(done) < len(graph):  # peel off modules whose imports are all peeled off
        ready = {m for m, deps in graph.items() if m not in done and deps <= done}
        assert ready, f"import cycle among {sorted(set(graph) - done)}"
        done |= ready
    outside = [p for d in ("harness", "tests") for p in (ROOT / d).rglob("*.py")
               if PACKAGE not in p.parents]
    assert len(outside) > 10
    for path in outside:
        for module, names in _imported(path):
            if module.startswith(src.__name__):
                assert [n for n in names if n.startswith("_")] == [], path
