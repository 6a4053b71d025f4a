"""Measuring how each strategy's fit time falls with more cores: the points of a suite's
``[speedup]`` section (or every dataset and strategy with the default worker counts), each
timed alone, one at a time, in a fresh process (`harness.execution.speedup_point`).

A lock file makes two speedup runs on the same machine wait for each other; other woodlot
processes seen running, and a busy machine, are noted in the provenance and the tables.
Points are keyed like cells, so a resumed run measures only the points it lacks.
"""

from __future__ import annotations

import os
import socket
import tempfile
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator

import psutil

from harness import interrupts, provenance
from harness.commands.lifecycle import Echo, Session, session, stderr_echo, refresh_outputs
from harness.commands.progress import Progress
from harness.execution.memory import cell_limit
from harness.execution.speedup_point import run_point
from harness.locks import exclusive
from harness.plan import plan_speedup, usable_cores
from harness.report.outputs import Outputs
from harness.suite import SpeedupSettings
from harness.work_units import OK

MACHINE_LOCK = Path(tempfile.gettempdir()) / "woodlot-speedup.lock"
BUSY_LOAD = 0.5  # a one-minute load average above this before the points: "busy machine"


def other_woodlot_processes() -> list[int]:
    """Pids of woodlot processes that are not this one, its ancestors or its descendants."""
    me = psutil.Process()
    own = {me.pid} | {p.pid for p in me.parents()} | {p.pid for p in me.children(recursive=True)}
    found = []
    for proc in psutil.process_iter(["pid", "cmdline"]):
        if proc.info["pid"] in own:
            continue
        cmd = " ".join(proc.info["cmdline"] or ())
        if "woodlot" in cmd or "harness.execution" in cmd or "-m harness" in cmd:
            found.append(proc.info["pid"])
    return found


@dataclass
class SpeedupResult:
    planned: int = 0
    reused: int = 0
    ran: int = 0
    failed: int = 0
    workers: list[int] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    provenance: dict[str, Any] = field(default_factory=dict)


@contextmanager
def _machine_lock(echo: Echo) -> Iterator[None]:
    """Hold the machine-wide lock of speedup runs (waits while another run holds it); when the
    file cannot be opened (another user's), go on and say so."""
    try:
        with open(MACHINE_LOCK, "a"):
            pass
    except OSError as exc:
        echo(f"speedup: cannot use the lock file {MACHINE_LOCK} ({exc}); other speedup runs "
             "on this machine are not kept out")
        yield
        return
    note = f"host {socket.gethostname()}, process {os.getpid()}, since {time.ctime()}"
    with exclusive(MACHINE_LOCK, wait=True, note=note, on_wait=lambda holder: echo(
            f"speedup: waiting for another speedup run on this machine to finish ({holder})")):
        yield


def measure_points(s: Session, settings: SpeedupSettings, *, fresh: bool = False,
                   retry_failed: bool = False, progress: bool | None = None,
                   echo: Echo = stderr_echo) -> SpeedupResult:
    """Measure every speedup point of the session's suite not yet in its store; store each
    point in one transaction. The run's provenance gets the method, machine, worker counts,
    load average before and after, and notes under ``"speedup"``."""
    cores = usable_cores()
    points, counts, notes = plan_speedup(s.plan, settings, cores)
    result = SpeedupResult(planned=len(points), workers=counts, notes=notes)
    s.store.set_speedup_plan(p.key for p in points)
    done = set() if fresh else s.store.speedup_keys(include_failed=not retry_failed)
    todo = [p for p in points if p.key not in done]
    result.reused = len(points) - len(todo)
    timeout = s.suite.protocol.cell_timeout
    timeout = None if timeout is None else timeout * (settings.repeats + 1)
    memory, memory_how = cell_limit(s.suite.protocol.cell_memory, 1)
    started = time.time()
    prov: dict[str, Any] = {
        "cpu_model": provenance.cpu_model(), "cores": os.cpu_count(), "usable_cores": cores,
        "workers_requested": list(settings.workers) or "default", "workers": counts,
        "repeats": settings.repeats, "noise_margin": settings.noise_margin,
        "method": "each point alone in a fresh process; n_jobs = p where the estimator has "
                  "it and OpenMP/BLAS limited to p (threadpoolctl), read back inside each fit; "
                  "one untimed warm-up fit, then the timed repeats",
        "memory_limit": memory_how,
    }
    for note in notes:
        echo(f"speedup: {note}")
    if todo:
        echo(f"speedup: {len(todo)} point(s) to measure ({len(points) - len(todo)} stored), "
             f"workers {', '.join(map(str, counts))}, {settings.repeats} repeat(s) each, one "
             "point at a time in a fresh process")
        with _machine_lock(echo):
            _measure(s, todo, (timeout, memory), result, prov, notes, cores, progress, echo)
    prov["seconds"] = round(time.time() - started, 1)
    prov["notes"] = notes
    result.provenance = prov
    s.provenance["speedup"] = prov
    return result


def _measure(s: Session, todo, limits: tuple[float | None, int | None], result: SpeedupResult,
             prov: dict, notes: list[str], cores: int, progress: bool | None,
             echo: Echo) -> None:
    others = other_woodlot_processes()
    if others:
        notes.append(f"{len(others)} other woodlot process(es) were running when the speedup "
                     "points started; their work can slow the points measured")
        echo(f"speedup: {notes[-1]}")
    prov["load_average_before"] = provenance.load_average()
    load = (prov["load_average_before"] or [0.0])[0]
    if load > BUSY_LOAD:
        notes.append(f"the machine was busy before the speedup points (load average {load:g} "
                     f"over the last minute, {cores} cores)")
        echo(f"speedup: {notes[-1]}")
    bar = Progress(len(todo), label="speedup points", enabled=progress)
    try:
        for point in todo:
            rows = run_point(point, s.plan.datasets[point.dataset], *limits)
            s.store.put_speedup(rows, s.run)
            interrupts.raise_pending()
            result.ran += 1
            failed = rows[0]["status"] != OK
            result.failed += failed
            bar.step(not failed)
    finally:
        bar.close()
        prov["load_average_after"] = provenance.load_average()


def speedup_suite(path, *, out=None, fresh: bool = False, retry_failed: bool = False,
                  progress: bool | None = None, echo: Echo = stderr_echo,
                  command: str | None = None, write_outputs: bool = True,
                  wait: bool = False) -> tuple[SpeedupResult, Outputs | None]:
    """``woodlot speedup``: the speedup points of a suite alone, then the outputs rewritten.

    A suite without a ``[speedup]`` section is measured with the defaults (every dataset and
    strategy, workers 1, 2, 4, … up to the cores present, 3 repeats).
    """
    with session(path, out=out, command=command, timing="speedup points only", wait=wait,
                 echo=echo) as s:
        if s.suite.speedup is None:
            echo("speedup: the suite has no [speedup] section; measuring every dataset and "
                 "strategy with the default worker counts")
        result = measure_points(s, s.suite.speedup or SpeedupSettings(), fresh=fresh,
                                retry_failed=retry_failed, progress=progress, echo=echo)
    return result, refresh_outputs(s.folder) if write_outputs else None
