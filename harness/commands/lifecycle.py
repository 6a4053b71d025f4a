"""The one run lifecycle of every command that computes (``run``, ``speedup``, ``choose``):
load and check the suite and its datasets, check the results folder can be written, plan,
open the executor (before anything is written, so an unreachable cluster fails early), take
the folder's run lock (`harness.folder_lock`; one run per folder), open the store, mark runs
whose process is gone as killed, record the datasets and the provenance, start the run, and
mark it finished or interrupted however the work ends. A cluster woodlot started is closed in
every case, including when the store cannot be opened."""

from __future__ import annotations

import sys
from contextlib import contextmanager, nullcontext
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

from harness import provenance
from harness.errors import UserError
from harness.execution.executor import Executor
from harness.files import writable_folder
from harness.folder_lock import holding
from harness.plan import Plan, make_plan
from harness.report.outputs import Outputs, clear_outputs, up_to_date
from harness.store import STORE_NAME, Store, remove_store
from harness.suite import Suite, load_suite

DEFAULT_RESULTS = Path("results")
Echo = Callable[[str], None]


def stderr_echo(line: str) -> None:
    print(line, file=sys.stderr)


def results_folder(suite: Suite, out: str | Path | None) -> Path:
    return Path(out) if out is not None else DEFAULT_RESULTS / suite.name


def changed_datasets(plan: Plan, store: Store) -> list[str]:
    """Notes for datasets whose content differs from the cells stored under their name."""
    known = store.known_fingerprints()
    notes = []
    for name, ds in plan.datasets.items():
        old = known.get(name, set())
        if old and ds.fingerprint not in old:
            notes.append(f"dataset '{name}' changed since its cells were stored (content "
                         f"fingerprint {sorted(old)[0][:12]} -> {ds.fingerprint[:12]}); its "
                         "cells are recomputed")
    return notes


def killed_note(run: dict[str, Any], folder: Path) -> str:
    prov = run.get("provenance") or {}
    return (f"run {run['run']} in {folder} (process {prov.get('process', '?')} on "
            f"{prov.get('host', '?')}) ended without finishing; marked as killed, its stored "
            "cells are kept")


def refresh_outputs(folder: Path) -> Outputs:
    """The folder's tables, plots and report (`harness.report.writer.write_report`), unless
    they are up to date: after a rerun that fitted nothing they are left as they are."""
    found = up_to_date(folder)
    if found is not None:
        return found
    from harness.report.writer import write_report  # plotting libraries only when drawing

    return write_report(folder)


@dataclass
class Session:
    """An open run: the suite, its plan, the results folder and store, the run's number and
    its provenance (add to it; it is stored when the run finishes)."""

    suite: Suite
    plan: Plan
    folder: Path
    store: Store
    run: int
    provenance: dict[str, Any]
    notes: list[str] = field(default_factory=list)


@contextmanager
def session(path: str | Path, *, out: str | Path | None = None, command: str | None = None,
            executor: Executor | None = None, fresh: bool = False, timing: str,
            wait: bool = False, echo: Echo = stderr_echo) -> Iterator[Session]:
    """Open a run of the suite at ``path``; nothing is written before the suite and every
    dataset pass their checks. ``timing`` says how the run's timings were taken; ``wait``
    waits for another run using the same results folder instead of stopping."""
    suite = load_suite(path)
    plan = make_plan(suite)
    folder = writable_folder(results_folder(suite, out))
    if not fresh and (folder / STORE_NAME).exists():
        Store(folder, read_only=True).close()  # a store it cannot use: refused, nothing written
    with executor if executor is not None else nullcontext(), \
            holding(folder, wait=wait, echo=echo):
        for line in executor.notes() if executor is not None else ():
            echo(line)
        if fresh:
            remove_store(folder)
            clear_outputs(folder)
        with Store(folder) as store:
            for gone in store.mark_killed():
                echo(killed_note(gone, folder))
            notes = changed_datasets(plan, store)
            for note in notes:
                echo(note)
            store.record_datasets((d.fingerprint, d.name, d.summary())
                                  for d in plan.datasets.values())
            prov = provenance.collect(command)
            prov.update(suite=str(suite.path), suite_name=suite.name,
                        metrics={k: list(v) for k, v in suite.protocol.metrics.items()},
                        equivalence=suite.equivalence.settings(),
                        timing=timing,
                        **(executor.describe() if executor is not None
                           else {"executor": "none"}))
            run = store.start_run(suite.name, suite.text, prov["command"], prov)
            try:
                yield Session(suite, plan, folder, store, run, prov, notes)
            except BaseException:  # Ctrl-C, SIGTERM, a full disk, a lost cluster, a bug
                try:
                    store.finish_run(run, "interrupted")
                except UserError:  # the store cannot be written (disk full): the first
                    pass           # error is the one to tell
                raise
            prov["load_average_after"] = provenance.load_average()
            store.finish_run(run, "finished", prov)
