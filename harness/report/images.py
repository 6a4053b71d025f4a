"""Figures as PNG bytes, the one form the report keeps them in (written to ``plots/`` and
embedded in the page)."""

from __future__ import annotations

import io

from matplotlib.figure import Figure

DPI = 110


def png(fig: Figure, dpi: int = DPI) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()
