"""Figure of an eigenfield on slices (matplotlib, on an Agg canvas; ``kindyn modes``).

Plain arrays in: every panel is ``(title, values (n1, n2), (L1, L2), (label1, label2))`` with the
first array axis along the horizontal of the panel. Written atomically by
:func:`kindyn.output.figures.save`.
"""

from __future__ import annotations

import numpy as np

from kindyn.output.figures import new_figure, save


def modes_figure(path, panels, title: str, warning: str = "") -> None:
    """One colour map per panel (shared colour scale: the panels show the same quantity)."""
    count = len(panels)
    fig = new_figure(figsize=(3.6 * count + 0.8, 3.6))
    axes = fig.subplots(1, count, squeeze=False)
    vmax = max(float(np.max(p[1])) for p in panels) or 1.0
    image = None
    for ax, (name, values, lengths, labels) in zip(axes[0], panels):
        image = ax.imshow(np.asarray(values).T, origin="lower", extent=(0, lengths[0], 0, lengths[1]),
                          cmap="magma", vmin=0.0, vmax=vmax, aspect="equal", interpolation="nearest")
        ax.set_title(name, fontsize=9)
        ax.set_xlabel(labels[0])
        ax.set_ylabel(labels[1])
    fig.colorbar(image, ax=axes[0].tolist(), shrink=0.85)
    fig.suptitle(title, fontsize=10)
    if warning:
        fig.text(0.01, 0.01, warning, fontsize=8, color="C3", va="bottom")
    save(fig, path)
