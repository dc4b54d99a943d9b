"""Writing figures: one function for every figure of every stage (atomic, Agg canvas)."""
from __future__ import annotations

from pathlib import Path

from ..errors import input_error
from .atomic import atomic_path

__all__ = ["FIGURE_FORMATS", "save_figure"]

FIGURE_FORMATS = ("png", "pdf", "svg")


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
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if fig.canvas is None or not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    stem = Path(stem)
    if stem.suffix in {f".{f}" for f in FIGURE_FORMATS}:
        stem = stem.with_suffix("")
    out = []
    for fmt in formats:
        if fmt not in FIGURE_FORMATS:
            raise input_error("formats", f"unknown figure format {fmt!r}; valid: "
                              f"{', '.join(FIGURE_FORMATS)}")
        target = stem.with_name(f"{stem.name}.{fmt}")
        with atomic_path(target, suffix=f".{fmt}") as tmp:
            fig.savefig(tmp, format=fmt, dpi=dpi)
        out.append(target)
    return out
