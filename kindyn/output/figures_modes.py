"""Figure of an eigenfield on slices (matplotlib, on an Agg canvas; ``kindyn modes``).

Plain arrays in: every panel is ``(title, values (n1, n2), (L1, L2), (label1, label2))`` with the
first array axis along the horizontal of the panel. One colour scale for all panels (they show
the same quantity), with a labelled colour bar; the stop state and an under-resolution tag above
the panels (:func:`kindyn.output.figures.status_tags`). Written atomically by
:func:`kindyn.output.figures.save` in the style's format, size and dpi.
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import TAG_AMBER, TAG_RED, FigureStyle, note, save, styled_figure, tag_row

COLOUR_LABEL = r"$|\mathbf{B}|$ of the leading eigenmode (unit energy)"


def modes_figure(path, panels, title: str, warning: str = "", *, converged=None, stop_reason: str = "",
                 colour_label: str = COLOUR_LABEL, style: FigureStyle | None = None) -> None:
    """One colour map per panel, a shared and labelled colour bar."""
    count = len(panels)
    fig = styled_figure(style, (3.3 * count + 1.0, 3.9))
    grid = fig.add_gridspec(2, count, height_ratios=(0.02, 1.0))
    tags = fig.add_subplot(grid[0, :])
    axes = [[fig.add_subplot(grid[1, j]) for j in range(count)]]
    vmax = max(float(np.max(p[1])) for p in panels) or 1.0
    image = None
    for ax, (name, values, lengths, labels) in zip(axes[0], panels):
        image = ax.imshow(np.asarray(values).T, origin="lower", extent=(0, lengths[0], 0, lengths[1]),
                          cmap="magma", vmin=0.0, vmax=vmax, aspect="equal", interpolation="nearest")
        ax.set_xlabel(f"${labels[0]}$ (case units)", fontsize=8)
        ax.set_ylabel(f"${labels[1]}$ (case units)", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.set_title(name, fontsize=8)
    bar = fig.colorbar(image, ax=axes[0], shrink=0.85)
    bar.set_label(colour_label, fontsize=8)
    bar.ax.tick_params(labelsize=7)
    notes = tag_row(tags, converged, stop_reason, bool(warning))
    fig.suptitle(title, fontsize=9)
    note(fig, notes, color=TAG_RED if warning else TAG_AMBER)
    save(fig, path, style)
