"""What a reader needs to trust or reproduce a run: library versions, machine, command."""

from __future__ import annotations

import os
import platform
import socket
import sys
import time
from pathlib import Path

from harness.versions import CELL_CODE, SPEEDUP_CODE, code_version, installed_versions


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
    except (OSError, AttributeError):  # AttributeError: Windows has no load average
        return None


def collect(command: str | None = None) -> dict:
    return {
        "command": command if command is not None else " ".join(sys.argv),
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "host": socket.gethostname(),
        "process": os.getpid(),
        "cpu_model": cpu_model(),
        "cores": os.cpu_count(),
        "load_average": load_average(),
        "libraries": installed_versions(),
        "woodlot_code": {"cells": code_version(CELL_CODE),
                         "speedup points": code_version(SPEEDUP_CODE)},
        "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
    }
