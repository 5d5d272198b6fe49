"""The one matplotlib set-up of the reports: Agg backend, house style, PNG bytes."""
from __future__ import annotations

import io

INK = "#1d2b36"
MEASURED = "#2f6ea5"
BAND = "#9cc0e0"
LIMIT = "#b03a2e"
MUTED = "#9aa4ad"
GAP = "#f3d3cf"


def pyplot():
    """matplotlib.pyplot on the Agg backend in the house style (imported on first use: it costs about 0.4 s).

    The style is set on every call, before any figure: a figure made before the first style update would look
    different from the same figure made later in the same process (same input, different bytes).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update({"font.size": 9, "axes.edgecolor": INK, "axes.labelcolor": INK, "xtick.color": INK,
                         "ytick.color": INK, "axes.spines.top": False, "axes.spines.right": False})
    return plt


def new_figure(w=10, h=3.6, **subplots):
    """(fig, ax) in the house style."""
    return pyplot().subplots(figsize=(w, h), **subplots)


def png_bytes(fig, dpi=120) -> bytes:
    """Render and close ``fig``."""
    plt = pyplot()
    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight", metadata={"Software": None})
    plt.close(fig)
    return buf.getvalue()
