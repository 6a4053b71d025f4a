"""Ctrl-C and SIGTERM that cannot be lost.

Python turns a signal into an exception at the next bytecode the main thread runs; when that
bytecode belongs to a finalizer (a ``__del__`` method, a weakref callback) the exception is
printed as "Exception ignored" and dropped, and the run would go on as if nothing happened.
The command line's signal handlers therefore also remember the signal here, and the run loop
asks after every cell (`raise_pending`).
"""

from __future__ import annotations

_pending: type[BaseException] | None = None


def remember(exc_type: type[BaseException]) -> None:
    """Note an interrupt (``KeyboardInterrupt`` or a subclass) a signal handler raises."""
    global _pending
    _pending = exc_type


def forget() -> None:
    global _pending
    _pending = None


def raise_pending() -> None:
    """Raise the interrupt a signal handler noted, if its own exception was swallowed."""
    exc_type = _pending
    if exc_type is not None:
        forget()
        raise exc_type()
