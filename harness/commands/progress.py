"""A progress bar with counts and ETA on a terminal; silent otherwise."""

from __future__ import annotations

import sys
import time


class Progress:
    def __init__(self, total: int, label: str = "cells", stream=None, enabled: bool | None = None):
        self.total, self.label, self.done, self.failed = total, label, 0, 0
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.t0 = time.perf_counter()
        self._last = 0.0

    def step(self, ok: bool = True) -> None:
        self.done += 1
        self.failed += 0 if ok else 1
        now = time.perf_counter()
        if self.enabled and (now - self._last > 0.2 or self.done == self.total):
            self._last = now
            self._draw(now)

    def _draw(self, now: float) -> None:
        elapsed = now - self.t0
        frac = self.done / self.total if self.total else 1.0
        eta = elapsed / self.done * (self.total - self.done) if self.done else 0.0
        width = 28
        bar = "#" * int(width * frac) + "-" * (width - int(width * frac))
        failed = f", {self.failed} failed" if self.failed else ""
        self.stream.write(f"\r[{bar}] {self.done}/{self.total} {self.label}{failed}  "
                          f"{_clock(elapsed)} elapsed, ~{_clock(eta)} left ")
        self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.total:
            self.stream.write("\n")
            self.stream.flush()


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 60}:{seconds % 60:02d}"
