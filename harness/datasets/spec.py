"""What a suite's ``[[dataset]]`` entry says, before anything is loaded."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class DatasetSpec:
    """One ``[[dataset]]`` entry of a suite file.

    ``options`` holds the entry's keys other than ``name`` and ``from``; ``suite_file`` is the
    file it came from (paths in the entry are relative to its folder); ``position`` counts
    entries from 1 for messages.
    """

    name: str
    source: str
    options: dict[str, Any] = field(default_factory=dict)
    suite_file: Path = Path("<suite>")
    position: int = 1

    @property
    def where(self) -> str:
        """Prefix for error messages: ``suites/x.toml: dataset 'wine' (entry 2)``."""
        return f"{self.suite_file}: dataset '{self.name}' (entry {self.position})"

    def path(self, key: str = "path") -> Path:
        """A path option resolved against the suite file's folder."""
        p = Path(str(self.options[key])).expanduser()
        return p if p.is_absolute() else (self.suite_file.parent / p)
