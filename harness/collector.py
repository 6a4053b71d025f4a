"""Keeping Python's cyclic garbage collector from walking the same objects again and again:
`paused` while JSON texts become hundreds of thousands of containers, none of them garbage;
`set_aside` for the objects alive when a big piece of work starts (the imported libraries,
millions of objects, which every full collection would otherwise walk)."""

from __future__ import annotations

import gc
from contextlib import contextmanager
from typing import Iterator


@contextmanager
def paused() -> Iterator[None]:
    """No cyclic collection within the block (parsing the curves of 100,000 cells: 1.0 s
    with it, 0.44 s without)."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


@contextmanager
def set_aside() -> Iterator[None]:
    """The objects alive at the start of the block are left out of every collection until
    its end (`gc.freeze`; `gc.unfreeze` hands them back); what the block makes is collected
    as usual. On 100,000 cells this halved the report's collection time: 0.31–0.38 s to
    0.13–0.20 s in its own process, 0.49–0.52 s to 0.20–0.25 s in its drawing process."""
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()
