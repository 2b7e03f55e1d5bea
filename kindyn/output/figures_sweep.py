"""Figure of a sweep: growth rate versus the swept parameter (matplotlib, on an Agg canvas).

Main panel: gamma with its error bars along the critical key, one line per value of the other
swept keys (e.g. one per grid of a resolution study); the zero line separates growth from decay;
dynamo windows are shaded in the colour of the line (grid) they belong to; critical values (sign
changes of gamma) are dashed lines with their uncertainty as a band and ``value ± error`` printed
as the terminal does. Below it, one zoom panel per sign change (at most four) shows the points
around it with their error bars. Unconverged points are hollow, refinement runs diamonds, points
flagged as possibly under-resolved are ringed in red (with a red tag above the panel), failed points
are counted in a note. Where an error bar is smaller than its marker a note says so.
"""

from __future__ import annotations

import json
import math

import numpy as np

from kindyn.output.figures import (TAG_RED, FigureStyle, note as add_note, save, status_tags, styled_figure)
from kindyn.output.numbers import with_error

MAX_ZOOMS = 4
MARKER = 4.0  # points


def key_label(key: str | None) -> str:
    """An axis label with symbols for the common swept keys."""
    labels = {"magnetic.Rm": r"magnetic Reynolds number $\mathrm{Rm} = U/(\eta k_f)$",
              "magnetic.eta": r"magnetic diffusivity $\eta$ (case units)"}
    return labels.get(key, key or "")


def line_label(line: dict) -> str:
    """``grid 24x24x24`` for a resolution study, ``key = value`` otherwise."""
    parts = []
    for k, v in line.items():
        if k == "domain.grid" and isinstance(v, (list, tuple)):
            parts.append("grid " + "x".join(str(int(n)) for n in v))
        else:
            parts.append(f"{k} = {v}")
    return ", ".join(parts)


def curves_from_rows(rows, key: str | None) -> list[dict]:
    """Curves (see :func:`sweep_figure`) from the summary rows of a sweep: one per line along ``key``
    (the other swept values), points sorted by ``key``; without a key one curve over the points."""
    def number(v, default=math.nan):
        return default if v is None else float(v)

    if not key:
        return [{"label": "", "line": {}, "x": list(range(len(rows))),
                 "gamma": [number(r.get("growth_rate")) for r in rows],
                 "error": [number(r.get("growth_rate_error"), 0.0) for r in rows],
                 "status": [r.get("status") for r in rows],
                 "warning": [bool(r.get("resolution_warning")) for r in rows],
                 "refinement": [bool(r.get("refinement")) for r in rows]}]
    groups: dict[str, list] = {}
    for r in rows:
        others = {k: v for k, v in r["values"].items() if k != key}
        groups.setdefault(json.dumps(others, sort_keys=True), []).append(r)
    curves = []
    for text, members in groups.items():
        members = sorted(members, key=lambda r: float(r["values"][key]))
        line = json.loads(text)
        curves.append({"label": line_label(line), "line": line, "x": [float(r["values"][key]) for r in members],
                       "gamma": [number(r.get("growth_rate")) for r in members],
                       "error": [number(r.get("growth_rate_error"), math.inf) for r in members],
                       "status": [r.get("status") for r in members],
                       "warning": [bool(r.get("resolution_warning")) for r in members],
                       "refinement": [bool(r.get("refinement")) for r in members]})
    return curves


def _curve_index(curves, line) -> int:
    for n, curve in enumerate(curves):
        if curve.get("line", {}) == (line or {}):
            return n
    return 0


def _draw_points(ax, curve, color, first: bool, labels: bool = True):
    x = np.asarray(curve["x"], float)
    g = np.asarray(curve["gamma"], float)
    e = np.asarray(curve["error"], float)
    status = np.asarray(curve["status"], object)
    warned = np.asarray(curve["warning"], bool)
    ok = np.isfinite(g)
    order = np.argsort(x[ok])
    ax.plot(x[ok][order], g[ok][order], "-", color=color, lw=1.0, label=(curve["label"] or None) if labels else None)
    e_plot = np.where(np.isfinite(e), e, 0.0)
    conv = ok & (status == "converged")
    ax.errorbar(x[conv], g[conv], yerr=e_plot[conv], fmt="o", ms=MARKER, color=color, ecolor=color, elinewidth=1.2,
                capsize=2.5, zorder=3)
    unconv = ok & (status != "converged")
    if unconv.any():
        ax.errorbar(x[unconv], g[unconv], yerr=e_plot[unconv], fmt="o", ms=MARKER + 1, mfc="white", color=color,
                    capsize=2.5, zorder=3, label="not converged" if first and labels else None)
    refined = ok & np.asarray(curve.get("refinement", [False] * x.size), bool)
    if refined.any():
        ax.plot(x[refined], g[refined], "D", ms=MARKER, color=color, zorder=4,
                label="refinement run" if first and labels else None)
    if (warned & ok).any():
        ax.plot(x[warned & ok], g[warned & ok], "o", ms=MARKER + 6, mfc="none", mec=TAG_RED, mew=1.3, zorder=5,
                label="possibly under-resolved" if first and labels else None)
    return int(np.count_nonzero(~ok & (status == "failed"))), int(np.count_nonzero(warned & ok))


def _critical_mark(ax, c, color, first: bool) -> None:
    """A sign change: a dashed line at the critical value and a diamond on gamma = 0 with the
    uncertainty as a horizontal error bar."""
    v, u = c["value"], c["uncertainty"]
    ax.axvline(v, color=color, lw=0.8, ls="--", zorder=2)
    ax.errorbar([v], [0.0], xerr=[u] if np.isfinite(u) else None, fmt="D", ms=MARKER + 1, color="black",
                mfc="white", ecolor="black", elinewidth=1.4, capsize=4, zorder=6,
                label="sign change of $\\gamma$ ± uncertainty" if first else None)


def _hidden_error_bars(ax, curves, dpi) -> bool:
    """True when some finite, non-zero error bar is shorter than its marker's radius."""
    radius = MARKER / 2 * dpi / 72.0
    trans = ax.transData
    for curve in curves:
        for x, g, e in zip(curve["x"], curve["gamma"], curve["error"]):
            if not (np.isfinite(g) and np.isfinite(e) and e > 0):
                continue
            (_, y0), (_, y1) = trans.transform([(x, g), (x, g + e)])
            if abs(y1 - y0) < radius:
                return True
    return False


def sweep_figure(path, curves, critical, xlabel, title, log_x=False, tick_labels=None, *, windows=None,
                 style: FigureStyle | None = None, ylabel: str | None = None) -> None:
    """Write the figure to ``path`` atomically.

    ``curves``: list of dicts with ``label``, ``x``, ``gamma``, ``error``, ``status``, ``warning``
    and optionally ``refinement`` and ``line`` (the other swept values; equal-length lists; NaN gamma
    for failed or pending points; refinement runs are drawn as diamonds); ``critical``: list of
    dicts with ``value``, ``uncertainty``, ``direction`` and optionally ``line`` and ``bracket``;
    ``windows``: the dynamo windows (``lower``/``upper`` dicts with ``value`` or None, ``scan``,
    ``line``); ``tick_labels``: text per x position for a sweep without a numeric key.
    """
    windows = windows or []
    crossings = [c for c in critical if np.isfinite(c.get("value", math.nan))][:MAX_ZOOMS]
    zooms = len(crossings) if tick_labels is None else 0
    fig = styled_figure(style, (6.8, 6.0) if zooms else (6.8, 4.2))
    if zooms:
        grid = fig.add_gridspec(2, zooms, height_ratios=(2.0, 1.15))
        ax = fig.add_subplot(grid[0, :])
        zoom_axes = [fig.add_subplot(grid[1, j]) for j in range(zooms)]
    else:
        ax, zoom_axes = fig.subplots(), []
    ax.axhline(0.0, color="0.4", lw=0.8, zorder=1)
    failed = warned = 0
    for n, curve in enumerate(curves):
        f, w = _draw_points(ax, curve, f"C{n % 10}", n == 0)
        failed, warned = failed + f, warned + w
    for window in windows:
        n = _curve_index(curves, window.get("line"))
        lower, upper = window.get("lower"), window.get("upper")
        scan = window.get("scan") or [min(curves[n]["x"]), max(curves[n]["x"])]
        low = lower["value"] if lower else scan[0]
        high = upper["value"] if upper else scan[1]
        label = "dynamo window" + (f" ({curves[n]['label']})" if curves[n]["label"] else "")
        ax.axvspan(low, high, color=f"C{n % 10}", alpha=0.10, lw=0, zorder=0, label=label)
    for n, c in enumerate(critical):
        _critical_mark(ax, c, f"C{_curve_index(curves, c.get('line')) % 10}", first=n == 0)
    if log_x:
        ax.set_xscale("log")
    if tick_labels is not None:
        ax.set_xticks(range(len(tick_labels)))
        ax.set_xticklabels(tick_labels, fontsize=7)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel or r"growth rate $\gamma$ (case units)")
    notes = status_tags(ax, None, "", True) if warned else []
    for zax, c in zip(zoom_axes, crossings):
        _zoom(zax, curves, c, log_x, ylabel)
    fig.suptitle(title, fontsize=9.5)
    handles, labels = ax.get_legend_handles_labels()
    if labels:
        ax.legend(loc="best", fontsize=7, framealpha=0.9)
    if failed:
        notes.append(f"{failed} failed point(s) not shown (see status and message in the summary file)")
    fig.canvas.draw()  # lay out, so that the error bars can be measured against the markers
    if _hidden_error_bars(ax, curves, fig.dpi):
        notes.append("where no error bar shows, it is smaller than the marker (errors in the summary file)")
    if notes:
        add_note(fig, notes)
    save(fig, path, style)


def _zoom(ax, curves, c, log_x, ylabel) -> None:
    """The points around one sign change, with their error bars and the critical band."""
    n = _curve_index(curves, c.get("line"))
    curve = curves[n]
    color = f"C{n % 10}"
    v, u = c["value"], c["uncertainty"]
    low, high = c.get("bracket", (v - 1.0, v + 1.0))
    width = max(high - low, 2 * u if np.isfinite(u) else 0.0, 1e-12 * max(1.0, abs(v)))
    x0, x1 = low - 0.6 * width, high + 0.6 * width
    if log_x and x0 <= 0:
        x0 = low / 1.5
    _draw_points(ax, curve, color, False, labels=False)
    ax.axhline(0.0, color="0.4", lw=0.8, zorder=1)
    _critical_mark(ax, c, color, first=False)
    x = np.asarray(curve["x"], float)
    g = np.asarray(curve["gamma"], float)
    e = np.asarray(curve["error"], float)
    inside = (x >= x0) & (x <= x1) & np.isfinite(g)
    reach = np.abs(g[inside]) + np.where(np.isfinite(e[inside]), e[inside], 0.0)
    top = float(reach.max()) * 1.35 if reach.size and reach.max() > 0 else 1.0
    ax.set_xlim(x0, x1)
    ax.set_ylim(-top, top)
    if log_x:
        ax.set_xscale("log")
    ax.tick_params(labelsize=7)
    turns = "opens" if c.get("direction") == "opens" else "closes"
    ax.set_title(f"zoom: window {turns} at {with_error(v, u).replace('+-', '±')}"
                 + (f"\n{curve['label']}" if len(curves) > 1 and curve["label"] else ""), fontsize=7.5)
    ax.set_ylabel(r"$\gamma$", fontsize=8)
