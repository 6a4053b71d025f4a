"""Calls to the OpenML server through openml-python, and what their failures tell the user.

A call that may download is retried on network failures ``WOODLOT_OPENML_ATTEMPTS`` times in
all, waiting ``WOODLOT_OPENML_BACKOFF`` seconds and twice as long before each further try, with
the client's own retry loop cut to one try so the two do not multiply. Every failure ends in
one `UserError`: not cached and offline, server unreachable, unknown id, no access, cache not
writable, cached files damaged.
"""

from __future__ import annotations

import os
import re
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Callable, Iterator, Literal

import requests
import urllib3

from harness.datasets.openml.cache import cache_directory
from harness.datasets.openml.library import openml_package
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError

ATTEMPTS_ENV = "WOODLOT_OPENML_ATTEMPTS"
BACKOFF_ENV = "WOODLOT_OPENML_BACKOFF"
DEFAULT_ATTEMPTS = 3
DEFAULT_BACKOFF = 2.0
DOWNLOAD_COMMAND = "woodlot download"  # the command that fills the cache, named in messages

# what the client raises when a cached file is damaged
READ_ERRORS = (ValueError, KeyError, IndexError, TypeError, EOFError, AttributeError)

# "load": data wanted now (a failure points to DOWNLOAD_COMMAND); "download": asked to
# download; "check": cache only, `NotCached` where a download would be needed
Purpose = Literal["load", "download", "check"]


class NotCached(Exception):
    """Raised in cache-only mode (``purpose="check"``) where a download would be needed."""


def server() -> str:
    """The base address of the configured OpenML server."""
    return openml_package().config.get_server_base_url()


def retry_policy() -> tuple[int, float]:
    """(attempts, first delay in seconds), from the environment or the defaults."""
    out = []
    for name, default, kind in ((ATTEMPTS_ENV, DEFAULT_ATTEMPTS, int),
                                (BACKOFF_ENV, DEFAULT_BACKOFF, float)):
        raw = os.environ.get(name)
        if raw is None or not raw.strip():
            out.append(default)
            continue
        try:
            value = kind(raw)
        except ValueError:
            value = -1
        if value < (1 if kind is int else 0):
            raise UserError(f"environment variable {name}={raw!r} must be "
                            + ("a whole number of at least 1" if kind is int
                               else "a number of seconds, 0 or more"))
        out.append(value)
    return int(out[0]), float(out[1])


@contextmanager
def _one_try_per_call() -> Iterator[None]:
    """Switch off the client's own retry loop (its waits are long); we retry around it."""
    config = openml_package().config
    before = config.get_config_as_dict()
    config.set_retry_policy(before["retry_policy"], 1)
    try:
        yield
    finally:
        config.set_retry_policy(before["retry_policy"], before["connection_n_retries"])


def _transient(exc: BaseException) -> bool:
    """A failure worth retrying: no connection, a broken transfer, a garbled answer."""
    errors = openml_package().exceptions
    if isinstance(exc, errors.OpenMLServerException):
        return exc.code == 107  # the server's database is busy
    if isinstance(exc, errors.OpenMLNotAuthorizedError):
        return False
    return isinstance(exc, (requests.exceptions.RequestException, urllib3.exceptions.HTTPError,
                            errors.OpenMLHashException, errors.OpenMLServerError,
                            ConnectionError, TimeoutError))


def reason(exc: BaseException) -> str:
    """The exception's type and the useful part of its message, on one short line."""
    text = " ".join(str(exc).split())
    # requests' messages nest the useful part deep inside; keep the innermost explanation
    match = re.search(r"\[Errno -?\d+\] ([^'\")\]]+)", text)
    if match:
        text = match.group(1)
    elif len(text) > 160:
        text = text[:157] + "..."
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def remote(spec: DatasetSpec, field: str, what: str, call: Callable[[], Any], *,
           purpose: Purpose) -> Any:
    """Run a client call that may download, retrying network failures with backoff.

    ``purpose`` is ``"load"`` or ``"download"`` and decides the message when the server cannot
    be reached. Every failure becomes one `UserError` naming the entry and ``field``.
    """
    errors = openml_package().exceptions
    attempts, backoff = retry_policy()
    last: BaseException | None = None
    for attempt in range(attempts):
        try:
            with _one_try_per_call():
                return call()
        except errors.OpenMLPrivateDatasetError:
            raise UserError(f"{what} is private on {server()}; set an API key with access in "
                            "openml's config file", file=spec.where, field=field) from None
        except errors.OpenMLNotAuthorizedError:
            raise UserError(f"{what} needs an OpenML API key with access; set 'apikey' in "
                            "openml's config file", file=spec.where, field=field) from None
        except errors.OpenMLCacheException as exc:
            raise UserError(f"cannot use the OpenML cache at {cache_directory()} ({exc}); "
                            "check that the folder is writable", file=spec.where,
                            field=field) from None
        except PermissionError as exc:
            raise UserError(f"cannot write to the OpenML cache at {cache_directory()} "
                            f"({exc.strerror}: {exc.filename}); set OPENML_CACHE_DIR to a "
                            "writable folder", file=spec.where, field=field) from None
        except Exception as exc:
            if isinstance(exc, errors.OpenMLServerException) and not _transient(exc):
                raise UserError(f"{what} does not exist on {server()} (the server answered "
                                f"{exc.code}: {exc.message}); check the id, it may have been "
                                "removed", file=spec.where, field=field) from None
            if not _transient(exc):
                raise
            last = exc
            if attempt + 1 < attempts:
                time.sleep(backoff * 2 ** attempt)
    assert last is not None
    tries = f"{attempts} attempt{'s' if attempts != 1 else ''}"
    if purpose == "download":
        raise UserError(f"could not download {what}: the OpenML server at {server()} did not "
                        f"answer after {tries} ({reason(last)}); check the network "
                        "connection and try again", file=spec.where, field=field)
    raise UserError(f"{what} is not in the local OpenML cache ({cache_directory()}) and the "
                    f"OpenML server at {server()} cannot be reached after {tries} "
                    f"({reason(last)}); run '{DOWNLOAD_COMMAND} {spec.suite_file}' where a "
                    "network connection is available, then run again offline",
                    file=spec.where, field=field)


def damaged(spec: DatasetSpec, field: str, what: str, folder: Path,
            exc: BaseException) -> UserError:
    """The error for cached files the client cannot read."""
    return UserError(f"the cached files of {what} cannot be read ({reason(exc)}); delete "
                     f"{folder} and run '{DOWNLOAD_COMMAND} {spec.suite_file}' again",
                     file=spec.where, field=field)
