"""The look of refit's figures: print-friendly and safe for colour-blind readers.

Colours are the Okabe-Ito set (Okabe & Ito 2008, "Color Universal Design", from memory),
which stays distinguishable under the common colour-vision deficiencies. Every pairing
that carries meaning also differs in lightness, marker or line style, so the figures read
in greyscale print too. The style is applied with :func:`figure` through
``matplotlib.rc_context``, never globally, so importing refit changes nothing for a
researcher's own plots.
"""

from __future__ import annotations

#: Okabe-Ito colours by name
BLACK = "#000000"
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
BLUISH_GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
REDDISH_PURPLE = "#CC79A7"
GREY = "#8C8C8C"

#: roles: what each colour means in every refit figure
DATA = "#333333"            # observed records (dark grey, hollow-ish markers)
CURVE = BLUE                # the fitted curve
MEAN_BAND = BLUE            # confidence band of the mean (drawn darker)
PREDICTION_BAND = SKY_BLUE  # prediction band for a new soil (drawn lighter, dashed edges)
INVERSION = VERMILLION      # the classical-calibration inversion of a forward fit
DOMAIN = GREY               # calibration range shading and limits
TURNING = REDDISH_PURPLE    # turning point of a quadratic
FLAGGED = VERMILLION        # influential or flagged records
KEPT = BLUISH_GREEN         # records the subset kept
GROUPED = VERMILLION        # the recipe's (grouped/spatial) cross-validation
RANDOM = SKY_BLUE           # random k-fold beside it
REFERENCE = BLACK           # 1:1 lines, nominal levels

MEAN_ALPHA = 0.35
PREDICTION_ALPHA = 0.18

RC = {
    "figure.dpi": 100,
    "savefig.dpi": 150,
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#222222",
    "axes.linewidth": 0.8,
    "axes.grid": True,
    "grid.color": "#DDDDDD",
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.titlesize": 10.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 9.5,
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8,
    "legend.frameon": False,
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "lines.linewidth": 1.6,
    "lines.markersize": 4.5,
    "svg.fonttype": "none",
}

#: figure size of one panel [inches]; two-panel figures are twice as wide
PANEL = (5.0, 3.8)


def figure(ncols: int = 1, *, width: float | None = None, height: float | None = None,
           nrows: int = 1, sharex: bool = False):
    """A new Agg figure with ``nrows`` x ``ncols`` panels in refit's style; returns (fig,
    axes list, row by row). ``sharex`` makes every panel share the first one's x axis.

    The figure is built without pyplot (no global state, no GUI backend), so it can be
    made in threads and tests without a display. Draw inside :func:`styled` so the
    artists take the style too.
    """
    import matplotlib as mpl
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    w = width if width is not None else PANEL[0] * ncols
    h = height if height is not None else PANEL[1] * nrows
    with mpl.rc_context(RC):
        fig = Figure(figsize=(w, h), layout="constrained")
        FigureCanvasAgg(fig)
        axes = []
        for i in range(nrows * ncols):
            share = axes[0] if (sharex and axes) else None
            axes.append(fig.add_subplot(nrows, ncols, i + 1, sharex=share))
    return fig, axes


def styled():
    """Context manager: refit's rc settings while artists are added and saved."""
    import matplotlib as mpl

    return mpl.rc_context(RC)
