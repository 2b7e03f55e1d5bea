"""Figures (matplotlib only in output/figures*.py). Each function takes plain arrays and a path.

No pyplot and no global backend: every figure is a :class:`matplotlib.figure.Figure` drawn on its
own Agg canvas (:func:`new_figure`). Importing kindyn therefore never switches the backend of a
notebook or of a user's script, and no figure stays registered anywhere (nothing to close).

Figures are meant to go into a paper as they are: a :class:`FigureStyle` (the case's ``[output]``
keys ``figure_format``, ``figure_dpi``, ``figure_size``) chooses PNG (300 dpi by default), PDF or
SVG and the size in inches; the file has exactly that size (constrained layout, no tight-bbox
cropping), so everything (notes, tags) is drawn inside it. Values with errors are printed as on
the terminal (:func:`kindyn.output.numbers.with_error`). Cautions that change what a figure means
are drawn as tags above the data, never on it: :func:`status_tags`.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from kindyn.output.atomic import atomic_stream
from kindyn.output.numbers import with_error

FORMATS = ("png", "pdf", "svg")
UNDER_RESOLVED = "POSSIBLY UNDER-RESOLVED: spurious growth possible; repeat on a finer grid"
TAG_RED = "#b2182b"
TAG_AMBER = "#b35806"
TAG_GREEN = "#1a7837"


@dataclass(frozen=True)
class FigureStyle:
    """File format, resolution and size of the figures (``size``: inches, None = each figure's own)."""

    format: str = "png"
    dpi: int = 300
    size: tuple[float, float] | None = None

    @classmethod
    def from_output(cls, output) -> "FigureStyle":
        """The style of a case's ``[output]`` section (any object with the three keys)."""
        size = getattr(output, "figure_size", None)
        return cls(getattr(output, "figure_format", "png"), int(getattr(output, "figure_dpi", 300)),
                   tuple(size) if size else None)

    def path(self, folder, stem: str) -> Path:
        """``folder/stem.<format>``."""
        return Path(folder) / f"{stem}.{self.format}"

    def figsize(self, default: tuple[float, float]) -> tuple[float, float]:
        return tuple(self.size) if self.size else tuple(default)


DEFAULT_STYLE = FigureStyle()


def new_figure(**options) -> Figure:
    """A figure (``options`` as for :class:`~matplotlib.figure.Figure`) on its own Agg canvas."""
    fig = Figure(**options)
    FigureCanvasAgg(fig)
    return fig


def styled_figure(style: FigureStyle | None, default_size, **options) -> Figure:
    """A constrained-layout figure of the style's size (or ``default_size`` inches)."""
    style = style or DEFAULT_STYLE
    return new_figure(figsize=style.figsize(default_size), layout="constrained", **options)


def save(fig, path, style: FigureStyle | None = None) -> None:
    """Write atomically (a temporary created exclusively, then renamed: :mod:`kindyn.output.atomic`)
    in the format of ``path``'s suffix (png, pdf, svg) at the style's dpi, at exactly the figure's
    size."""
    style = style or DEFAULT_STYLE
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    suffix = path.suffix.lower().lstrip(".") or style.format
    if suffix not in FORMATS:
        raise ValueError(f"figure format {suffix!r}: one of {', '.join(FORMATS)}")
    metadata = {"Creator": "kindyn"} if suffix in ("png", "pdf", "svg") else None
    if suffix == "pdf":
        metadata["CreationDate"] = None  # reproducible files
    if suffix == "svg":
        metadata = {"Creator": "kindyn", "Date": None}
    with atomic_stream(path) as stream:  # a new temporary, no link followed, removed on failure
        fig.savefig(stream, dpi=style.dpi, format=suffix, metadata=metadata)


def rounded(value, error, sign: bool = False) -> str:
    """``value ± error`` for a figure: rounded to the error as on the terminal, but at most six
    significant digits (an error far below them is shown as its order of magnitude)."""
    from kindyn.output.numbers import number_text

    text = with_error(value, error, sign=sign).replace("+-", "±")
    try:
        small = error is not None and np.isfinite(error) and 0 < abs(error) < 1e-6 * abs(float(value))
    except (TypeError, ValueError):
        small = False
    if small:
        return f"{number_text(value, 6, sign)} (± {abs(error):.0e})"
    return text


def tag_row(ax, converged: bool | None = None, stop: str = "", under_resolved: bool = False,
            fontsize: float = 8.0) -> list[str]:
    """The status tags of a multi-panel figure in ``ax``, a thin axes of their own in the top row of
    the figure's grid (its frame is removed): the stop state on the left, the under-resolution tag
    on the right. Returns the explaining notes (for :func:`note`)."""
    ax.set_axis_off()
    ax.set_ylim(0, 1)
    return status_tags(ax, converged, stop, under_resolved, fontsize)


def short_stop(stop: str) -> str:
    """``"stopped at max_time"`` for ``"reached max_time = 30 before converging"`` (tags stay short)."""
    for guard in ("max_time", "max_steps"):
        if guard in stop:
            return f"stopped at {guard}"
    return stop


def status_tags(ax, converged: bool | None = None, stop: str = "", under_resolved: bool = False,
                fontsize: float = 8.0) -> list[str]:
    """Tags above the axes (outside the data): the stop state on the left (green "converged" or an
    amber "NOT converged: <why>"), a red under-resolution tag on the right. Returns the notes that
    explain them (for :func:`note`)."""
    notes = []
    if converged is not None:
        text, color = ("converged", TAG_GREEN) if converged else (
            "NOT converged" + (f": {short_stop(stop)}" if stop else ""), TAG_AMBER)
        ax.set_title(text, loc="left", fontsize=fontsize, color=color, fontweight="bold",
                     bbox=dict(boxstyle="round,pad=0.25", fc="white", ec=color, lw=1.0))
        if not converged and stop:
            notes.append(f"not converged: {stop}; the estimate carries its error, which is above the tolerance")
    if under_resolved:
        ax.set_title("POSSIBLY UNDER-RESOLVED", loc="right", fontsize=fontsize, color="white", fontweight="bold",
                     bbox=dict(boxstyle="round,pad=0.25", fc=TAG_RED, ec=TAG_RED))
        notes.append(UNDER_RESOLVED.lower().replace("possibly under-resolved:", "possibly under-resolved (red tag):"))
    return notes


def note(fig, text, color="0.25", fontsize: float = 7.0) -> None:
    """A note (text or list of texts, one line each) along the bottom of the figure, inside it
    (laid out by the constrained layout)."""
    import textwrap

    texts = [t for t in (text if isinstance(text, (list, tuple)) else [text]) if t]
    if not texts:
        return
    width = max(30, int(fig.get_figwidth() * 72 / (0.52 * fontsize)))
    lines = [line for t in texts for line in textwrap.wrap(t, width)]
    fig.supxlabel("\n".join(lines), fontsize=fontsize, color=color, ha="left", x=0.01)


def time_label(U, k_f) -> str:
    """The time axis: simulation time in the case's units, with the flow's time scale."""
    scale = _scale_text(U, k_f)
    return r"time $t$ (case units" + (rf"; $1/(U k_f)$ = {scale}" if scale else "") + ")"


def rate_label(symbol: str = r"\gamma", U=None, k_f=None, what: str = "growth rate") -> str:
    scale = _scale_text(U, k_f, inverse=False)
    return rf"{what} ${symbol}$ (case units" + (rf"; $U k_f$ = {scale}" if scale else "") + ")"


def _scale_text(U, k_f, inverse: bool = True) -> str:
    try:
        value = float(U) * float(k_f)
    except (TypeError, ValueError):
        return ""
    if not np.isfinite(value) or value <= 0:
        return ""
    return f"{1.0 / value if inverse else value:.4g}"


def growth_figure(path, times, log_energy, growth_rate, error, window, title, warning="", *, converged=None,
                  stop_reason="", estimate_times=None, estimate_rates=None, estimate_errors=None, tolerance=None,
                  U=None, k_f=None, style: FigureStyle | None = None) -> None:
    """ln E_M versus time with the fitted line of slope 2 gamma over the fit window (shaded) and, when
    the running estimates are given, a lower panel with gamma and its error bars against time.

    ``converged`` (None: not stated) and ``stop_reason`` tag the stop state above the data; a
    non-empty ``warning`` (an under-resolved run) adds the red tag. The fit's label prints gamma
    rounded to its error, as the terminal does.
    """
    times = np.asarray(times, float)
    log_energy = np.asarray(log_energy, float)
    panels = estimate_times is not None and len(estimate_times) > 0
    fig = styled_figure(style, (6.4, 5.2) if panels else (6.4, 4.0))
    if panels:
        ax, low = fig.subplots(2, 1, sharex=True, height_ratios=(2.2, 1.0))
    else:
        ax, low = fig.subplots(), None
    ax.plot(times, log_energy, lw=1.0, color="0.15", label=r"$\ln E_M$ (kindyn run)")
    finite = growth_rate is not None and np.isfinite(growth_rate)
    ok = bool(converged) if converged is not None else True
    if finite:
        t0, t1 = window
        t1 = t1 if t1 and t1 > t0 else (times[-1] if times.size else t0)
        sel = (times >= t0) & (times <= t1 + 1e-12 * max(1.0, abs(t1)))
        tt = times[sel]
        if tt.size:
            y0 = float(np.mean(log_energy[sel] - 2 * growth_rate * tt))
            ax.axvspan(tt[0], tt[-1], color="C0", alpha=0.08, lw=0, label="fit window")
            text = rounded(growth_rate, error, sign=True)
            ax.plot(tt, y0 + 2 * growth_rate * tt, "--" if ok else ":", color="C3" if ok else TAG_AMBER, lw=1.6,
                    label=rf"fit: slope $2\gamma$, $\gamma$ = {text}")
    ax.set_ylabel(r"$\ln E_M$,  $E_M = \langle |\mathbf{B}|^2 \rangle / 2$")
    ax.legend(loc="best", fontsize=7.5, framealpha=0.9)
    notes = status_tags(ax, converged, stop_reason, bool(warning))
    fig.suptitle(title, fontsize=9.5)
    if panels:
        et = np.asarray(estimate_times, float)
        er = np.asarray(estimate_rates, float)
        ee = np.asarray(estimate_errors, float)
        good = np.isfinite(er) & np.isfinite(ee)
        if good.any():
            low.errorbar(et[good], er[good], yerr=ee[good], fmt="o", ms=3, color="C0", ecolor="C0", elinewidth=1.0,
                         capsize=2, label=r"running estimate $\gamma \pm$ error")
            if finite:
                color = "C3" if ok else TAG_AMBER
                low.axhline(growth_rate, color=color, lw=1.0, ls="--")
                if error is not None and np.isfinite(error):
                    low.axhspan(growth_rate - error, growth_rate + error, color=color, alpha=0.15, lw=0,
                                label="final $\\gamma$ ± error")
                if tolerance:
                    for sign in (-1, 1):
                        low.axhline(growth_rate + sign * tolerance, color="0.4", lw=0.7, ls=":",
                                    label="± tolerance" if sign > 0 else None)
            last = er[good][-len(er[good]) // 2:]  # zoom on the settled half so the final error bars show
            spread = float(np.nanmax(np.abs(last - (growth_rate if finite else np.nanmean(last))))) if last.size else 0
            half = max(spread, float(np.nanmax(ee[good][-len(er[good]) // 2:])), tolerance or 0.0) * 3.0
            centre = growth_rate if finite else float(np.nanmean(last))
            if half > 0 and np.isfinite(half):
                low.set_ylim(centre - half, centre + half)
            low.legend(loc="best", fontsize=7)
        low.set_ylabel(rate_label(U=U, k_f=k_f, what="").strip(), fontsize=8)
        low.set_xlabel(time_label(U, k_f))
    else:
        ax.set_xlabel(time_label(U, k_f))
    note(fig, notes, color=TAG_RED if warning else TAG_AMBER)
    save(fig, path, style)
