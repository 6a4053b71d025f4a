"""The memory limit of a cell, so that no fit drives the machine into swap or the kernel's
out-of-memory killer.

- The limit is what one cell may allocate on top of what its worker process already holds
  (the libraries and the datasets sent to it, typically 200-400 MB). Suite key
  ``cell_memory``; by default (``"auto"``) `AUTO_SHARE` of the memory available when the run
  starts, divided among the worker processes, so cells running side by side together stay
  below what the machine has free.
- Method (Linux): around each cell the worker sets the soft ``RLIMIT_DATA`` (the private
  writable memory the kernel accounts to the process, ``VmData``) to its current size plus
  the limit, and lifts it afterwards. An allocation past it fails at once with
  ``MemoryError``, before the memory is used, and the cell becomes an error row saying so.
- Limits of the method: it counts memory reserved, not only touched, so a fit that reserves
  much more than it uses can be stopped early; processes a cell starts (joblib's worker pool)
  inherit the limit each on their own, not together; native code that does not check its
  allocations may crash instead of raising (the row then names the signal). On other systems
  the limit is not enforced, and the run says so.
"""

from __future__ import annotations

import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

import psutil

ENFORCED = sys.platform.startswith("linux")
if ENFORCED:
    import resource
AUTO_SHARE = 0.7
_STATUS = Path("/proc/self/status")
_allowance: list[int] = []  # the limit in force in this process, while a cell runs


def size_text(n: float) -> str:
    """``1.5 GiB``, ``300 MiB``."""
    for unit, factor in (("GiB", 2**30), ("MiB", 2**20)):
        if n >= factor:
            return f"{n / factor:.3g} {unit}"
    return f"{n / 2**10:.3g} KiB"


def cell_limit(setting: int | str | None, workers: int) -> tuple[int | None, str]:
    """(bytes, how it was decided) for the suite's ``cell_memory`` and the worker count."""
    if setting is None:
        return None, "none (cell_memory = \"none\")"
    if isinstance(setting, int):
        return setting, f"{size_text(setting)} per cell (cell_memory)"
    available = psutil.virtual_memory().available
    limit = int(available * AUTO_SHARE / max(1, workers))
    return limit, (f"{size_text(limit)} per cell: {AUTO_SHARE:.0%} of the "
                   f"{size_text(available)} available at the start over {workers} worker(s)")


def _data_bytes() -> int | None:
    try:
        for line in _STATUS.read_text().splitlines():
            if line.startswith("VmData:"):
                return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None


@contextmanager
def limited(limit: int | None) -> Iterator[None]:
    """Allow the block to allocate ``limit`` bytes beyond what the process holds now."""
    base = _data_bytes() if ENFORCED and limit is not None else None
    if base is None:
        yield
        return
    soft, hard = resource.getrlimit(resource.RLIMIT_DATA)
    want = base + limit
    if hard != resource.RLIM_INFINITY:
        want = min(want, hard)
    resource.setrlimit(resource.RLIMIT_DATA, (want, hard))
    _allowance.append(limit)
    try:
        yield
    finally:
        _allowance.pop()
        resource.setrlimit(resource.RLIMIT_DATA, (soft, hard))


def refusal(exc: MemoryError) -> str:
    """The message of a cell whose allocation failed."""
    detail = str(exc).splitlines()[0][:300] if str(exc) else "an allocation failed"
    if _allowance:
        return (f"over the cell memory limit of {size_text(_allowance[-1])} (cell_memory): "
                f"{detail}")
    return f"out of memory: {detail}"
