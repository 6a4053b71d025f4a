"""What a result depends on besides its data and settings: the one list of libraries whose
versions change results, and the version of woodlot's own code that computes a result. Used
by cell keys, the provenance and the check that Dask workers compute like the client."""

from __future__ import annotations

import ast
import functools
import hashlib
import platform
from importlib import metadata
from pathlib import Path

WOODLOT_VERSION = "0.1.0"

# Distributions whose version can change a cell's numbers: the estimators and metrics
# (scikit-learn), the arrays and linear algebra under them (NumPy, SciPy) and the tables the
# data are read into and preprocessed as (pandas). An import-path estimator adds its own
# top-level package (`estimator_distribution`).
RESULT_LIBRARIES = ("scikit-learn", "numpy", "scipy", "pandas")

# Recorded in the provenance as well, for a reader; they do not change scores.
OTHER_LIBRARIES = ("woodlot", "openml", "threadpoolctl", "matplotlib", "dask", "distributed")

# woodlot's own modules (paths inside the package) whose code changes the numbers stored for
# a unit of work: the in-fold preprocessing, the fit / predict / score / ensemble-size curve of
# a cell, the measurements and the per-row test evidence. What the key already hashes directly is left out: the
# resolved estimator and pipeline (`harness.strategies`, `harness.preprocess` build them, and
# their every parameter is in the key), the data content (`harness.datasets`: its
# fingerprint) and the split indices (`harness.splits`). A speedup point adds the module that
# times it. `code_version` hashes these files, so the key changes with the code by itself.
CELL_CODE = ("preprocess.py", "execution/run_cell.py", "execution/measure.py",
             "row_evidence.py", "search.py", "execution/run_trial.py")
SPEEDUP_CODE = (*CELL_CODE, "execution/speedup_point.py")
CODE_KEY = "woodlot code"
_PACKAGE = Path(__file__).resolve().parent


@functools.lru_cache(maxsize=None)
def version(distribution: str) -> str:
    """The installed version of a distribution, or ``"missing"`` (looked up once per process:
    reading package metadata is slow, and planning asks for it once per cell group)."""
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


def _without_docstrings(tree: ast.AST) -> ast.AST:
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)):
            body = node.body
            if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) \
                    and isinstance(body[0].value.value, str):
                node.body = body[1:] or [ast.Pass()]
    return tree


@functools.lru_cache(maxsize=None)
def code_version(files: tuple[str, ...] = CELL_CODE) -> str:
    """Hash of the normalised source of woodlot's ``files``: their syntax tree without
    comments, docstrings or layout, so that editing those changes nothing while any change of
    the code does. Where the source is not installed, woodlot's version stands in."""
    h = hashlib.sha256()
    for name in files:
        try:
            tree = ast.parse((_PACKAGE / name).read_text(encoding="utf-8"))
        except (OSError, SyntaxError, UnicodeDecodeError):
            return f"{WOODLOT_VERSION} (source not found)"
        h.update(name.encode() + b"\0" + ast.dump(_without_docstrings(tree)).encode() + b"\0")
    return h.hexdigest()[:16]


def result_versions(extra: tuple[str, ...] = (),
                    code: tuple[str, ...] = CELL_CODE) -> dict[str, str]:
    """Python's minor version, the version of every result library (plus ``extra``
    distributions) as this process sees them, and the `code_version` of ``code``."""
    out = {"python": ".".join(platform.python_version_tuple()[:2])}
    for lib in (*RESULT_LIBRARIES, *extra):
        out[lib] = version(lib)
    out[CODE_KEY] = code_version(code)
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
