"""Which library versions a result depends on: the one list used by cell keys, the
provenance and the check that Dask workers compute like the client."""

from __future__ import annotations

import functools
import platform
from importlib import metadata

WOODLOT_VERSION = "0.1.0"

# Distributions whose version can change a cell's numbers: the estimators and metrics
# (scikit-learn), the arrays and linear algebra under them (NumPy, SciPy) and the tables the
# data are read into and preprocessed as (pandas). An import-path estimator adds its own
# top-level package (`estimator_distribution`).
RESULT_LIBRARIES = ("scikit-learn", "numpy", "scipy", "pandas")

# Recorded in the provenance as well, for a reader; they do not change scores.
OTHER_LIBRARIES = ("woodlot", "openml", "threadpoolctl", "matplotlib", "dask", "distributed")


def version(distribution: str) -> str:
    """The installed version of a distribution, or ``"missing"``."""
    try:
        return metadata.version(distribution)
    except metadata.PackageNotFoundError:
        return "missing"


@functools.lru_cache(maxsize=None)
def estimator_distribution(import_path: str) -> str | None:
    """The distribution that provides the top-level package of ``module:Class`` (None for
    scikit-learn's own classes, which `RESULT_LIBRARIES` covers, and for local modules)."""
    top = import_path.partition(":")[0].split(".")[0]
    if top == "sklearn":
        return None
    names = metadata.packages_distributions().get(top)
    return names[0] if names else None


def result_versions(extra: tuple[str, ...] = ()) -> dict[str, str]:
    """Python's minor version and the version of every result library (plus ``extra``
    distributions), as this process sees them."""
    out = {"python": ".".join(platform.python_version_tuple()[:2])}
    for lib in (*RESULT_LIBRARIES, *extra):
        out[lib] = version(lib)
    return out


def installed_versions() -> dict[str, str]:
    """Every library of interest that is installed, for the provenance."""
    out = {}
    for lib in (*OTHER_LIBRARIES[:1], *RESULT_LIBRARIES, *OTHER_LIBRARIES[1:]):
        v = version(lib)
        if v != "missing":
            out[lib] = v
    return out


def differences(theirs: dict[str, str], ours: dict[str, str]) -> list[str]:
    """``"numpy 2.0 (here 2.1)"`` for each library whose version differs."""
    return [f"{lib} {theirs.get(lib, 'missing')} (here {ours[lib]})" for lib in ours
            if theirs.get(lib) != ours[lib]]
