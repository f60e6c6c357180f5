"""mdgas's own figure style, "slate": quiet, print-friendly, readable in greyscale.

Series differ by luminance, line style and marker, not by hue alone, so a figure
printed in black and white still tells them apart. Used by :mod:`mdgas.plots` through
:func:`use`; the palette is also used by the HTML report for its accents.
"""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

NAME = "slate"

#: Ink colours, darkest first; neighbours differ clearly in lightness.
INK = ("#1a1a1a", "#2f5d8a", "#c0722b", "#5e8c4a", "#8a2f4f", "#8c8c8c")
LINESTYLES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1)), (0, (1, 2)))
MARKERS = ("o", "s", "^", "D", "v", "x")
#: Fill for error bands and histograms (light grey-blue, prints as light grey).
BAND = "#c9d6e3"
ACCENT = "#2f5d8a"
PASS, WARN, FAIL = "#3f7a3a", "#b07d1a", "#a33a3a"


def rc() -> dict:
    """The matplotlib rcParams of the slate style."""
    from cycler import cycler
    return {
        "figure.figsize": (6.4, 4.0),
        "figure.dpi": 110,
        "savefig.dpi": 110,
        "savefig.bbox": "tight",
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "axes.edgecolor": "#444444",
        "axes.linewidth": 0.8,
        "axes.grid": True,
        "grid.color": "#e2e2e2",
        "grid.linewidth": 0.6,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.titlesize": 11,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.labelsize": 10,
        "axes.labelcolor": "#222222",
        "axes.prop_cycle": cycler(color=list(INK)) + cycler(linestyle=list(LINESTYLES)),
        "lines.linewidth": 1.5,
        "lines.markersize": 4.5,
        "xtick.labelsize": 9,
        "ytick.labelsize": 9,
        "xtick.color": "#333333",
        "ytick.color": "#333333",
        "legend.fontsize": 8.5,
        "legend.frameon": False,
        "font.family": "DejaVu Sans",
        "mathtext.fontset": "dejavusans",
        "image.cmap": "Greys",
    }


@contextmanager
def use() -> Iterator[None]:
    """Draw with the slate style inside a ``with`` block (Agg backend)."""
    import matplotlib
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    with plt.rc_context(rc()):
        yield
