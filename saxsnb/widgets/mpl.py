"""The plots of a panel as matplotlib figures (``panel.to_matplotlib()``), no browser needed."""

from __future__ import annotations

import numpy as np

from . import _bq as bq

__all__ = ["figure_to_matplotlib"]


def _scale_kind(scale) -> str:
    return "log" if isinstance(scale, bq.LogScale) else "linear"


def figure_to_matplotlib(fig: bq.Figure, ax) -> None:
    """Draw the marks of a bqplot Figure onto a matplotlib Axes."""
    for mark in fig.marks:
        if not mark.visible:
            continue
        if isinstance(mark, bq.HeatMap):
            c = np.asarray(mark.color, dtype=float)
            mesh = ax.pcolormesh(np.asarray(mark.x), np.asarray(mark.y), c, shading="nearest", cmap="viridis")
            ax.figure.colorbar(mesh, ax=ax, label="log\u2081\u2080 I")
        elif isinstance(mark, bq.GridHeatMap):
            continue  # transparent click targets
        elif isinstance(mark, bq.Label):
            colors = list(mark.colors) or ["black"]
            for k, (x, y, t) in enumerate(zip(np.atleast_1d(mark.x), np.atleast_1d(mark.y), mark.text)):
                ax.annotate(
                    str(t),
                    (float(x), float(y)),
                    fontsize=7,
                    ha="center",
                    va="bottom",
                    color=colors[k % len(colors)],
                )
        elif isinstance(mark, bq.Scatter):
            x, y = np.atleast_1d(mark.x), np.atleast_1d(mark.y)
            if x.size == 0:
                continue
            colors = list(mark.colors) or ["black"]
            if mark.color is not None and np.size(mark.color) == x.size and len(colors) > 1:
                idx = np.asarray(mark.color, dtype=int) % len(colors)
                col = [colors[i] for i in idx]
            elif len(colors) == x.size > 1:  # one colour per point (e.g. peaks by phase)
                col = colors
            else:
                col = colors[0]
            label = mark.labels[0] if mark.labels and mark.display_legend else None
            ax.scatter(x, y, s=max(12.0, 1.2 * mark.default_size), c=col, label=label)
        elif isinstance(mark, bq.Lines):
            x, y = np.asarray(mark.x, dtype=float), np.asarray(mark.y, dtype=float)
            if x.size == 0 or y.size == 0:
                continue
            ys = y if y.ndim == 2 else y[None, :]
            xs = x if x.ndim == 2 else np.broadcast_to(x, ys.shape)
            colors = list(mark.colors) or ["black"]
            style = {"solid": "-", "dashed": "--", "dotted": ":", "dash_dotted": "-."}[mark.line_style]
            for k, (xx, yy) in enumerate(zip(xs, ys)):
                label = mark.labels[k] if k < len(mark.labels) and mark.display_legend else None
                ax.plot(
                    xx,
                    yy,
                    style,
                    color=colors[k % len(colors)],
                    lw=1.2,
                    marker="o" if mark.marker else None,
                    ms=0.7 * np.sqrt(mark.marker_size),
                    label=label,
                )
    for axis in fig.axes:
        if isinstance(axis, bq.ColorAxis):
            continue
        if axis.side in ("left", "right"):
            ax.set_ylabel(axis.label)
            ax.set_yscale(_scale_kind(axis.scale))
        else:
            ax.set_xlabel(axis.label)
            ax.set_xscale(_scale_kind(axis.scale))
    if fig.title:
        ax.set_title(fig.title, fontsize=9)
    handles, _labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=7)
