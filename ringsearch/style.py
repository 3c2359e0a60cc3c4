"""Plot style shared by every figure: a colour-blind-safe palette and defaults.

The palette is the Okabe & Ito (2008) set of eight colours that stay distinct
under the common forms of colour blindness.  Figures label every axis with
its unit.
"""

from __future__ import annotations

from typing import Any

#: Okabe–Ito colours (Okabe & Ito 2008, "Color Universal Design").
PALETTE: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}

#: Order in which series take colours (one per overtone count, detector, ...).
CYCLE: list[str] = [PALETTE[k] for k in ("blue", "vermillion", "green", "orange",
                                         "purple", "sky", "yellow", "black")]

#: Fixed colour per detector so every figure agrees.
DETECTOR_COLOURS: dict[str, str] = {
    "H1": PALETTE["vermillion"],
    "L1": PALETTE["blue"],
    "V1": PALETTE["purple"],
    "K1": PALETTE["green"],
}


def colour(i: int) -> str:
    """Colour for the ``i``-th series."""
    return CYCLE[i % len(CYCLE)]


def detector_colour(name: str) -> str:
    """Colour of a detector (a stable fallback for unknown names)."""
    return DETECTOR_COLOURS.get(name, CYCLE[sum(map(ord, name)) % len(CYCLE)])


def figure(**kwargs: Any):
    """A new matplotlib figure on the non-interactive Agg backend, in our style."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    from cycler import cycler

    plt.rcParams.update({
        "axes.prop_cycle": cycler(color=CYCLE),
        "axes.grid": True,
        "grid.alpha": 0.3,
        "figure.dpi": 110,
        "savefig.bbox": "tight",
    })
    kwargs.setdefault("layout", "constrained")
    return plt.subplots(**kwargs)


def save_figure(fig, path) -> None:
    """Save a figure atomically (PNG or PDF by suffix) and close it."""
    from pathlib import Path

    import matplotlib.pyplot as plt

    from ringsearch.files import atomic_path

    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=path.suffix.lstrip(".") or "png")
    plt.close(fig)
