"""What a reader needs to trust or reproduce a run: library versions, machine, command."""

from __future__ import annotations

import os
import platform
import socket
import sys
import time
from importlib import metadata
from pathlib import Path

LIBRARIES = ("woodlot", "numpy", "scipy", "pandas", "scikit-learn", "openml", "threadpoolctl",
             "matplotlib", "dask", "distributed")


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def load_average() -> list[float] | None:
    try:
        return [round(x, 2) for x in os.getloadavg()]
    except OSError:
        return None


def versions() -> dict[str, str]:
    out = {}
    for lib in LIBRARIES:
        try:
            out[lib] = metadata.version(lib)
        except metadata.PackageNotFoundError:
            continue
    return out


def collect(command: str | None = None) -> dict:
    return {
        "command": command if command is not None else " ".join(sys.argv),
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "host": socket.gethostname(),
        "cpu_model": cpu_model(),
        "cores": os.cpu_count(),
        "load_average": load_average(),
        "libraries": versions(),
        "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
    }


def executor_text(prov: dict) -> str:
    """Where a run's cells ran, in words, from its provenance."""
    name, dask = prov.get("executor", "–"), prov.get("dask")
    if not dask:
        return f"{name}, {prov.get('jobs', '–')} jobs"
    hosts = dask.get("worker_hosts", {})
    return (f"{name}: {dask.get('cluster')} at {dask.get('scheduler')}, "
            f"{sum(hosts.values())} worker processes on "
            + ", ".join(f"{host} ({n})" for host, n in hosts.items()))
