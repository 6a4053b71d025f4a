"""The one run lifecycle of every command that computes (``run``, ``speedup``, ``choose``):
load and check the suite and its datasets, plan, open the executor (before anything is
written, so an unreachable cluster fails early), open the store, record the datasets and the
provenance, start the run, and mark it finished or interrupted however the work ends. A
cluster woodlot started is closed in every case, including when the store cannot be opened."""

from __future__ import annotations

import sys
from contextlib import contextmanager, nullcontext
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterator

from harness import provenance
from harness.execution.executor import Executor
from harness.plan import Plan, make_plan
from harness.report.writer import clear_outputs
from harness.store import Store, remove_store
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
            echo: Echo = stderr_echo) -> Iterator[Session]:
    """Open a run of the suite at ``path``; nothing is written before the suite and every
    dataset pass their checks. ``timing`` says how the run's timings were taken."""
    suite = load_suite(path)
    plan = make_plan(suite)
    folder = results_folder(suite, out)
    with executor if executor is not None else nullcontext():
        for line in executor.notes() if executor is not None else ():
            echo(line)
        if fresh:
            remove_store(folder)
            clear_outputs(folder)
        with Store(folder) as store:
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
            except BaseException:  # Ctrl-C, a lost cluster, a bug: the run did not finish
                store.finish_run(run, "interrupted")
                raise
            prov["load_average_after"] = provenance.load_average()
            store.finish_run(run, "finished", prov)
