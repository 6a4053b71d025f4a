"""Per-row test evidence of a cell, for datasets judged on one split (a holdout or one published
split), where the evidence for a difference is in the test rows, not in fold-to-fold variance:
per-row correctness for classification (one bit a row) and per-row squared error for regression
(float32), zlib-compressed into one bytes value. Kept only for test sets of at most `MAX_ROWS`
rows (a few MiB at most per cell); larger ones store none and their single-split pairs are
undecided with that reason."""

from __future__ import annotations

import zlib

import numpy as np

MAX_ROWS = 500_000
CORRECT, SQUARED_ERROR = b"c", b"e"
# Metrics the evidence can judge: per-row values whose mean is the metric (or, for RMSE, whose
# mean's square root is); the stored per-row value is higher-is-better like a scorer.
SUPPORTED = {"accuracy": CORRECT, "neg_mean_squared_error": SQUARED_ERROR,
             "neg_root_mean_squared_error": SQUARED_ERROR}


def encode(y_true, y_pred, classification: bool) -> bytes | None:
    """The evidence of one cell's test rows; None above `MAX_ROWS`."""
    y_true, y_pred = np.asarray(y_true), np.asarray(y_pred)
    if len(y_true) > MAX_ROWS:
        return None
    if classification:
        body = np.packbits(y_true == y_pred).tobytes()
        return CORRECT + len(y_true).to_bytes(8, "little") + zlib.compress(body)
    err = (y_true.astype(float) - y_pred.astype(float)) ** 2
    return SQUARED_ERROR + zlib.compress(err.astype(np.float32).tobytes())


def decode(blob: bytes) -> tuple[bytes, np.ndarray]:
    """(kind, per-row values, higher is better): correctness as 0/1, squared error negated."""
    kind = blob[:1]
    if kind == CORRECT:
        n = int.from_bytes(blob[1:9], "little")
        bits = np.unpackbits(np.frombuffer(zlib.decompress(blob[9:]), dtype=np.uint8))[:n]
        return kind, bits.astype(float)
    return kind, -np.frombuffer(zlib.decompress(blob[1:]), dtype=np.float32).astype(float)
