"""Worker processes woodlot starts itself: how they are started, and how a process is ended
together with every process it started."""

from __future__ import annotations

import multiprocessing as mp

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
