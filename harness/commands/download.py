"""``woodlot download``: everything a suite needs from OpenML into openml-python's cache, so
that later runs work offline."""

from __future__ import annotations

from typing import Callable

from harness.datasets.openml import download
from harness.suite import load_suite


def download_suite(path, echo: Callable[[str], None] = print) -> dict[str, list[str]]:
    """Download every OpenML entry of the suite into openml's cache; entry name → downloads.

    Other sources need nothing: scikit-learn's bundled loaders, generators and files are local.
    """
    suite = load_suite(path, expand=False)
    done: dict[str, list[str]] = {}
    entries = [s for s in suite.datasets if s.source == "openml"]
    if not entries:
        echo(f"{path}: no OpenML entries; nothing to download")
    for i, spec in enumerate(entries, start=1):
        echo(f"[{i}/{len(entries)}] {spec.name}")
        done[spec.name] = download(spec, progress=lambda line: echo(f"    {line}"))
        if not done[spec.name]:
            echo("    already in the cache")
    return done
