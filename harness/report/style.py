"""Colours and markers of the plots: a method keeps its colour in every plot and every report,
and a family keeps its marker.

Colours are the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal Design"), chosen to stay
distinguishable for the common forms of colour blindness; markers tell families apart in
greyscale. A second strategy of the same method (a grid, or the same method twice) gets a
lighter or darker shade of the method's colour; strategies of other methods (import paths)
take Paul Tol's "muted" colours, also designed for colour-blind readers (values from the
published scheme, recalled from memory).
"""

from __future__ import annotations

from matplotlib.colors import to_rgb

OKABE_ITO = {"black": "#000000", "orange": "#E69F00", "sky blue": "#56B4E9",
             "bluish green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
             "vermillion": "#D55E00", "reddish purple": "#CC79A7"}

METHOD_COLORS = {
    "single-tree": OKABE_ITO["black"],
    "bagged-trees": OKABE_ITO["sky blue"],
    "random-forest": OKABE_ITO["bluish green"],
    "extra-trees": OKABE_ITO["blue"],
    "gradient-boosting": OKABE_ITO["vermillion"],
    "hist-gradient-boosting": OKABE_ITO["orange"],
    "adaboost": OKABE_ITO["reddish purple"],
}
OTHER_COLORS = ("#332288", "#88CCEE", "#44AA99", "#117733", "#999933", "#DDCC77", "#CC6677",
                "#882255", "#AA4499")

FAMILY_MARKERS = {"single tree": "s", "bagging": "D", "forest": "o", "boosting": "^"}
OTHER_MARKER = "P"


def marker(family: str) -> str:
    return FAMILY_MARKERS.get(family, OTHER_MARKER)


def _shade(color: str, k: int) -> tuple[float, float, float]:
    """The k-th variant of a colour: 1 lighter, 2 darker, 3 lighter still, ..."""
    r, g, b = to_rgb(color)
    step = 0.35 * ((k + 1) // 2) / (1 + (k - 1) // 2 * 0.5)
    if k % 2:  # lighter: towards white
        return tuple(x + (1 - x) * min(step, 0.7) for x in (r, g, b))
    return tuple(x * (1 - min(step, 0.6)) for x in (r, g, b))


def strategy_colors(methods: dict[str, str]) -> dict[str, tuple[float, float, float]]:
    """Strategy → colour, given each strategy's method (catalogue key or ``custom``)."""
    out, seen, others = {}, {}, 0
    for name in sorted(methods):
        method = methods[name]
        base = METHOD_COLORS.get(method)
        if base is None:
            out[name] = to_rgb(OTHER_COLORS[others % len(OTHER_COLORS)])
            others += 1
            continue
        k = seen.get(method, 0)
        seen[method] = k + 1
        out[name] = to_rgb(base) if k == 0 else _shade(base, k)
    return out


def plain(text: object) -> str:
    """A user's name as a plot label: shown as typed, never read as math text (``$``)."""
    return str(text).replace("$", r"\$")
