"""What every output shares: new figures that leave the user's plotting backend alone, and number formats."""

from __future__ import annotations


def new_figure(figsize: tuple[float, float], dpi: float):
    """A figure and its axes, made without pyplot: drawn by its own Agg canvas, so no global backend is chosen
    or changed and nothing is kept open (the figure is freed with its last reference). Returns (figure, axes)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, dpi=dpi)
    FigureCanvasAgg(fig)
    return fig, fig.subplots()


def volts(v: float | None) -> str:
    """A voltage as engineers read it: "1,234 V" below 10 kV, "12.35 kV" from there; "none" for a limit the
    standard does not set (None)."""
    if v is None:
        return "none"
    return f"{v / 1000:,.2f} kV" if abs(v) >= 10_000 else f"{v:,.0f} V"
