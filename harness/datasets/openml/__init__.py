"""OpenML datasets, tasks and benchmark suites as ``from = "openml"`` suite entries.

Read through openml-python and its own cache. The modules each own one job: `entries` (the
entry's text), `cache` (the cache layout), `client` (server calls, retries, messages),
`objects` (the client's dataset and task objects), `load` (entry → `Dataset`),
`benchmark_suites` (suite → task entries) and `download` (filling the cache).
"""

from harness.datasets.openml.benchmark_suites import expand_benchmark_suite
from harness.datasets.openml.cache import cache_directory
from harness.datasets.openml.download import download, is_cached
from harness.datasets.openml.entries import check_openml_entry
from harness.datasets.openml.load import load_openml

__all__ = ["cache_directory", "check_openml_entry", "download", "expand_benchmark_suite",
           "is_cached", "load_openml"]
