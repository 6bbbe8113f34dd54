"""What every output shares: new figures that leave the user's plotting backend alone, and number formats."""

from __future__ import annotations

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure


def new_figure(figsize: tuple[float, float], dpi: float):
    """A figure and its axes, made without pyplot: drawn by its own Agg canvas, so no global backend is chosen
    or changed and nothing is kept open (the figure is freed with its last reference). Returns (figure, axes)."""
    fig = Figure(figsize=figsize, dpi=dpi)
    FigureCanvasAgg(fig)
    return fig, fig.subplots()
