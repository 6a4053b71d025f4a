"""Worker processes woodlot starts itself: how they are started, how a process is ended
together with every process it started, how a dead one's end is told, and how a worker
follows its parent when that is killed."""

from __future__ import annotations

import ctypes
import multiprocessing as mp
import os
import signal
import sys

import psutil


def context():
    """The start method for worker processes: forkserver (cheap, and no state of the parent
    leaks into a worker), spawn where there is none."""
    try:
        ctx = mp.get_context("forkserver")
        ctx.set_forkserver_preload(["harness.execution.run_cell"])
        return ctx
    except ValueError:  # platforms without forkserver
        return mp.get_context("spawn")


def end(procs: list, *, kill: bool) -> None:
    """Terminate (or kill) processes woodlot started, then wait for them to go."""
    for proc in procs:
        try:
            proc.kill() if kill else proc.terminate()
        except psutil.Error:
            pass
    psutil.wait_procs(procs, timeout=5)


def stop_tree(pid: int) -> None:
    """Kill process ``pid`` (one woodlot started) and all its descendants."""
    try:
        root = psutil.Process(pid)
        end(root.children(recursive=True) + [root], kill=True)
    except psutil.Error:
        return


def death(exitcode: int | None) -> str:
    """How a worker process ended, for the row of the cell it was running: the exit code,
    or the signal by name; out of memory is suggested only for SIGKILL, the signal the
    kernel's out-of-memory killer sends."""
    if exitcode is None:
        return "its exit status is unknown"
    if exitcode >= 0:
        return f"exit code {exitcode}"
    try:
        name = signal.Signals(-exitcode).name
    except ValueError:
        return f"killed by signal {-exitcode}"
    text = f"killed by {name}"
    if name == "SIGKILL":
        text += ", the signal of the kernel's out-of-memory killer: out of memory?"
    elif name == "SIGSEGV":
        text += ", a crash in native code"
    return text


def die_with_parent() -> None:
    """Linux: have the kernel kill this process when its parent dies (``PR_SET_PDEATHSIG``),
    so a worker never outlives a woodlot that was killed outright. Elsewhere nothing."""
    if not sys.platform.startswith("linux"):
        return
    parent = os.getppid()
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        return
    if os.getppid() != parent:  # the parent died before the request took effect
        os._exit(1)
