"""The project's plot look: one place for colours, line styles and figure defaults.

Owns: matplotlib styling shared by every chiropt plot. Colours are the
Okabe & Ito (2008) colour-blind-safe set; helicity is told apart by line style
(+1 solid, -1 dashed) so plots survive greyscale printing.
"""

from __future__ import annotations

import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

PALETTE = {"R": "#0072B2", "T": "#009E73", "A": "#D55E00", "u": "#CC79A7", "g": "#E69F00",
           "docp": "#56B4E9", "c": "#000000"}
HELICITY_STYLE = {+1: "-", -1: (0, (4, 2))}
HELICITY_LABEL = {+1: "helicity +1", -1: "helicity \u22121"}


def new_figure(rows: int = 1, cols: int = 1, *, width: float = 6.4, height: float = 3.6):
    """A figure with the project's defaults: light grid, no top/right spines."""
    plt.rcParams.update({"font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9,
                         "legend.fontsize": 8, "legend.frameon": False})
    fig, axes = plt.subplots(rows, cols, figsize=(width * cols, height * rows), squeeze=False)
    for ax in axes.flat:
        ax.grid(True, color="0.9", linewidth=0.6)
        ax.spines["top"].set_visible(False)
        ax.spines["right"].set_visible(False)
    return fig, axes


def save(fig, path) -> None:
    """Write a PNG at 150 dpi and close the figure."""
    with warnings.catch_warnings():   # legends placed outside an axes: the tight
        warnings.simplefilter("ignore", UserWarning)   # bounding box below takes them in
        fig.tight_layout()
    fig.savefig(path, dpi=150, bbox_inches="tight")
    plt.close(fig)
