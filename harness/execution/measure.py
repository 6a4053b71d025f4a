"""How a cell measures time, CPU and memory — each method stated so readers can judge it.

- Wall time: ``time.perf_counter`` around the call.
- CPU time: ``time.process_time`` (every thread of the process), plus the CPU of child
  processes that finished during the call (``resource.getrusage(RUSAGE_CHILDREN)``), plus
  what descendant processes still alive at the end used during the call (``psutil``: their
  user and system time and that of their own finished children, change over the call). The
  last term counts worker processes kept alive between calls, such as joblib's process pool
  behind ``n_jobs`` in bagging.
- Peak memory during fit: on Linux the kernel's high-water mark of resident memory is reset
  just before the fit (``/proc/self/clear_refs``, value 5) and read after it (``VmHWM``); the
  figure is that peak minus the resident size before the fit. Where the reset is not
  possible the figure is left empty rather than guessed.
"""

from __future__ import annotations

import os
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import psutil

if os.name == "posix":
    import resource
else:  # pragma: no cover - Windows: no CPU time of finished child processes
    resource = None

_STATUS = Path("/proc/self/status")
_CLEAR = Path("/proc/self/clear_refs")


def _status_kib(field: str) -> int | None:
    try:
        for line in _STATUS.read_text().splitlines():
            if line.startswith(field + ":"):
                return int(line.split()[1])
    except OSError:
        return None
    return None


def reset_peak() -> bool:
    try:
        _CLEAR.write_text("5")
        return True
    except OSError:
        return False


@dataclass
class Timing:
    wall: float = 0.0
    cpu: float = 0.0
    peak_bytes: int | None = None


def _descendants_cpu() -> dict[int, float]:
    """CPU seconds so far of each live descendant process (pid → seconds)."""
    out: dict[int, float] = {}
    try:
        children = psutil.Process().children(recursive=True)
    except psutil.Error:
        return out
    for child in children:
        try:
            t = child.cpu_times()
        except psutil.Error:
            continue
        out[child.pid] = t.user + t.system + t.children_user + t.children_system
    return out


def _own_cpu() -> float:
    if resource is None:
        return time.process_time()
    ch = resource.getrusage(resource.RUSAGE_CHILDREN)
    return time.process_time() + ch.ru_utime + ch.ru_stime


def _cpu_now() -> tuple[float, dict[int, float]]:
    kids = _descendants_cpu()  # first, so that the scan's own CPU is not counted
    return _own_cpu(), kids


def _cpu_since(start: tuple[float, dict[int, float]]) -> float:
    own0, kids0 = start
    own1 = _own_cpu()
    kids1 = _descendants_cpu()
    live = sum(c - kids0.get(pid, 0.0) for pid, c in kids1.items())
    # A child alive at the start and reaped during the call is in RUSAGE_CHILDREN with its
    # whole life; take off what it had used before the call.
    gone = sum(c for pid, c in kids0.items() if pid not in kids1)
    return own1 - own0 + live - gone


@contextmanager
def measured(memory: bool = False):
    """Context manager filling a `Timing` with wall, CPU and (optionally) peak memory."""
    t = Timing()
    base = None
    if memory and reset_peak():
        base = _status_kib("VmRSS")
    c0 = _cpu_now()
    w0 = time.perf_counter()
    try:
        yield t
    finally:
        t.wall = time.perf_counter() - w0
        t.cpu = _cpu_since(c0)
        if base is not None:
            peak = _status_kib("VmHWM")
            t.peak_bytes = max(0, (peak - base)) * 1024 if peak is not None else None
