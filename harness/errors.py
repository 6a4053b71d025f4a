"""The one error type the command line turns into a clear message and exit status 2."""

from __future__ import annotations


class UserError(Exception):
    """A problem with the user's input: a suite file, a data file, a folder, an option.

    The message is one line that names where the problem is (file, entry, field) and what
    to do about it. The command line prints it on stderr and exits with status 2.
    """

    def __init__(self, message: str, *, file: object | None = None, entry: str | None = None,
                 field: str | None = None) -> None:
        parts = []
        if file is not None:
            parts.append(str(file))
        if entry is not None:
            parts.append(entry)
        if field is not None:
            parts.append(f"field '{field}'")
        where = ": ".join(parts)
        super().__init__(f"{where}: {message}" if where else message)
        self.file, self.entry, self.field = file, entry, field


def closest(word: str, choices) -> str:
    """' (did you mean 'x'?)' for the closest of ``choices``, or '' when none is close."""
    import difflib

    match = difflib.get_close_matches(word, sorted(map(str, choices)), n=1, cutoff=0.6)
    return f" (did you mean '{match[0]}'?)" if match else ""
