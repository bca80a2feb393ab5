"""Figures for study reports, drawn with matplotlib's Agg canvas and returned as PNG bytes.

Holds:
    Line -- one plotted series, optionally with an interval band.
    Panel -- one set of axes: title, axis labels, lines, an optional horizontal level.
    line_panels -- draw panels side by side (wrapping rows); PNG bytes.
    matrix_image -- a labelled colour grid with the value in each cell; PNG bytes.

No pyplot: a ``matplotlib.figure.Figure`` with its own Agg canvas keeps no global state, so
reports can be drawn from any thread and without a display.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure as MatplotlibFigure

_COLOURS = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#8c564b", "#e377c2",
            "#7f7f7f", "#bcbd22", "#17becf")


@dataclass(frozen=True)
class Line:
    """One series: ``x`` and ``y`` of equal length; ``low``/``high`` draw an interval band.

    ``group`` picks the colour (lines of one group share it; e.g. every run of a strategy) and
    only the first line of a group is named in the legend.

    Example:
        >>> Line("warm", (50, 100), (0.4, 0.6), low=(0.3, 0.5), high=(0.5, 0.7)).group
        'warm'
    """

    label: str
    x: tuple[float, ...]
    y: tuple[float, ...]
    low: tuple[float, ...] | None = None
    high: tuple[float, ...] | None = None
    group: str | None = None
    markers: bool = True

    def __post_init__(self) -> None:
        if self.group is None:
            object.__setattr__(self, "group", self.label)
        lengths = {len(self.x), len(self.y)} | {len(v) for v in (self.low, self.high) if v}
        if len(lengths) != 1:
            raise ValueError(f"x, y, low, high: got lengths {sorted(lengths)}, expected equal "
                             "lengths")


@dataclass(frozen=True)
class Panel:
    """One set of axes. Example: ``Panel("Budget", "new episodes", "success", [line])``."""

    title: str
    xlabel: str
    ylabel: str
    lines: list
    level: float | None = None
    log_x: bool = False


def _png(figure) -> bytes:
    FigureCanvasAgg(figure)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=90, metadata={"Software": None})
    return buffer.getvalue()


def line_panels(panels: list[Panel], columns: int = 3) -> bytes:
    """Draw ``panels`` in a grid of at most ``columns`` per row; returns PNG bytes."""
    if not panels:
        raise ValueError("panels: got none, expected at least one panel")
    columns = max(1, min(columns, len(panels)))
    rows = math.ceil(len(panels) / columns)
    figure = MatplotlibFigure(figsize=(4.6 * columns, 3.4 * rows), layout="constrained")
    groups: list[str] = []
    for panel in panels:
        for line in panel.lines:
            if line.group not in groups:
                groups.append(line.group)
    colour = {group: _COLOURS[index % len(_COLOURS)] for index, group in enumerate(groups)}
    for index, panel in enumerate(panels):
        axes = figure.add_subplot(rows, columns, index + 1)
        named: set[str] = set()
        for line in panel.lines:
            label = line.label if line.group not in named else None
            named.add(line.group)
            axes.plot(line.x, line.y, marker="o" if line.markers else None, markersize=3,
                      linewidth=1.4 if line.markers else 0.9, color=colour[line.group],
                      label=label)
            if line.low is not None and line.high is not None:
                axes.fill_between(line.x, line.low, line.high, color=colour[line.group],
                                  alpha=0.18, linewidth=0)
        if panel.level is not None:
            axes.axhline(panel.level, color="#555", linestyle="--", linewidth=1,
                         label=f"level {panel.level:g}")
        if panel.log_x:
            axes.set_xscale("log")
        axes.set_title(panel.title, fontsize=10)
        axes.set_xlabel(panel.xlabel)
        axes.set_ylabel(panel.ylabel)
        axes.grid(alpha=0.3)
        if axes.get_legend_handles_labels()[0]:
            axes.legend(fontsize=8)
    return _png(figure)


def matrix_image(matrix, row_labels, column_labels, title: str) -> bytes:
    """A colour grid of ``matrix`` (rows x columns, values in [0, 1], NaN shown blank)."""
    values = np.asarray(matrix, dtype=float)
    if values.shape != (len(row_labels), len(column_labels)):
        raise ValueError(f"matrix: got shape {values.shape}, expected "
                         f"({len(row_labels)}, {len(column_labels)}) to match the labels")
    figure = MatplotlibFigure(figsize=(1.2 * values.shape[1] + 2.5, 0.6 * values.shape[0] + 1.6),
                              layout="constrained")
    axes = figure.add_subplot(1, 1, 1)
    image = axes.imshow(np.ma.masked_invalid(values), vmin=0.0, vmax=1.0, cmap="viridis",
                        aspect="auto")
    for (row, column), value in np.ndenumerate(values):
        if np.isfinite(value):
            axes.text(column, row, f"{100 * value:.0f}%", ha="center", va="center",
                      color="white" if value < 0.6 else "black", fontsize=9)
    axes.set_xticks(range(len(column_labels)), column_labels, rotation=30, ha="right")
    axes.set_yticks(range(len(row_labels)), row_labels)
    axes.set_title(title, fontsize=10)
    figure.colorbar(image, ax=axes, label="success")
    return _png(figure)
