"""Writing figures: one function for every figure of every stage (atomic, Agg canvas)."""
from __future__ import annotations

from pathlib import Path

from ..errors import input_error
from .atomic import write_bytes_atomic

__all__ = ["FIGURE_FORMATS", "save_figure", "figure_bytes"]

FIGURE_FORMATS = ("png", "pdf", "svg")


def figure_bytes(fig, fmt="png", dpi=110) -> bytes:
    """The figure rendered as ``fmt`` (png, pdf or svg), as bytes (Agg canvas, no pyplot)."""
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if fmt not in FIGURE_FORMATS:
        raise input_error("formats", f"unknown figure format {fmt!r}; valid: "
                          f"{', '.join(FIGURE_FORMATS)}")
    if fig.canvas is None or not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    _light_log_ticks(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=dpi)
    return buf.getvalue()


def _light_log_ticks(fig):
    """Minor ticks of log axes at 2 and 5 times each power of ten (not 2-9): the same reading
    aid at half the rendering time of a figure of log-log panels (a tick is two lines and two
    labels that the layout measures); labels where matplotlib puts them (narrow ranges)."""
    from matplotlib.ticker import LogLocator

    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            if axis.get_scale() == "log" and type(axis.get_minor_locator()) is LogLocator:
                axis.set_minor_locator(LogLocator(subs=(2.0, 5.0), numticks=12))


def save_figure(fig, stem, formats=("png",), dpi=110):
    """Write ``fig`` as ``<stem>.<format>`` for each format, atomically; returns the paths.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        Built with the object API (no pyplot state); rendered on an Agg canvas.
    stem : str or Path
        Output path without suffix (a suffix given is replaced).
    formats : sequence of {"png", "pdf", "svg"}
    dpi : int
        Resolution of raster formats.
    """
    stem = Path(stem)
    if stem.suffix in {f".{f}" for f in FIGURE_FORMATS}:
        stem = stem.with_suffix("")
    out = []
    for fmt in formats:
        data = figure_bytes(fig, fmt, dpi)
        out.append(write_bytes_atomic(stem.with_name(f"{stem.name}.{fmt}"), data))
    return out
