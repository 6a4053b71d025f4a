"""woodlot: compare ensemble methods for tabular data, reproducibly.

Python API
----------
run_suite(path, **options)  run a suite file; see `harness.commands.run.run_suite`.
load_results(folder)        the results of a folder as a DataFrame, one row per cell.
load_trials(folder)         the trials of the folder's tuned strategies, one row per trial.

Importing the package loads nothing else and changes no global state (such as matplotlib's
backend).
"""

from __future__ import annotations

from harness.versions import WOODLOT_VERSION as __version__


def run_suite(path, **options):
    """Run a suite file; see `harness.commands.run.run_suite` for the options."""
    from harness.commands.run import run_suite as run

    return run(path, **options)


def load_results(folder, *, plan_only: bool = True):
    """One row per cell of the folder's latest plan (all stored cells with ``plan_only=False``).

    Columns include ``dataset``, ``strategy``, ``family``, ``method``, ``task``, ``repeat``,
    ``fold``, ``status`` (``ok``, ``error``, ``timeout``), ``message``, ``fit_seconds``,
    ``fit_cpu_seconds``, ``predict_seconds``, ``peak_memory_bytes``, ``model_bytes``,
    ``n_train``, ``n_test``, ``curve`` (list of [members, score]), ``row_evidence`` (per-row
    test evidence of single-split cells, `harness.row_evidence`), for tuned strategies
    ``tuned`` (True), ``configuration`` (the chosen value of every tuned parameter),
    ``trials``, ``search_seconds`` and ``refit_seconds`` (``fit_seconds`` is their sum), and
    one column per metric named after its scikit-learn scorer. Text columns hold Python
    strings (NumPy ``object``; missing text is NaN).
    """
    from harness.store import Store

    with Store(folder, read_only=True) as store:
        return store.cells_frame(plan_only=plan_only)


def load_trials(folder):
    """One row per trial of the searches of tuned strategies in the folder's latest plan:
    ``search`` (the key of the tuned cell), ``dataset``, ``strategy``, ``repeat``, ``fold``,
    ``trial`` (0 = the configuration as given), ``round`` and ``rows`` (successive halving),
    ``config`` (the parameters the trial set), ``status``, ``inner_scores`` (one per inner
    fold), ``inner_score`` (their mean), ``fit_seconds`` (the trial's wall time) and
    ``fit_cpu_seconds``."""
    from harness.store import Store

    with Store(folder, read_only=True) as store:
        return store.trials_frame()


__all__ = ["run_suite", "load_results", "load_trials", "__version__"]
