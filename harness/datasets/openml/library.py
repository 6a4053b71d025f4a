"""The ``openml`` package (openml-python), imported on first use.

Importing it takes about a second and creates openml's config and cache folders, which a run
without OpenML entries should not do; every module of this subpackage reaches the client
through `openml_package`, the one place it is imported.
"""

from __future__ import annotations

from types import ModuleType


def openml_package() -> ModuleType:
    """The imported ``openml`` package."""
    import openml  # deferred on purpose (see the module docstring), not to dodge a cycle

    return openml
