"""Figures a paper can print: format, size and dpi as asked, labels, rounded values, visible tags.

Each figure kind is drawn from small synthetic data (and ``kindyn run`` once end to end): the file
is opened and its size checked against the requested inches (PNG: pixels = inches x dpi and the
dpi recorded in the file; PDF: the MediaBox in points, 72 per inch; SVG: width and height in pt).
What the figure says is checked on the matplotlib objects (captured when they are saved): the
fit's label (slope 2 gamma, gamma rounded to its error), the stop state and under-resolution tags
above the data, colour-bar labels, the zoom panels and shaded windows of a sweep, and the note
about error bars hidden by their markers. The growth data are exact: ``ln E = 2 gamma t``.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from kindyn.cli import main
from kindyn.output import figures, figures_flow, figures_modes, figures_sweep
from kindyn.output.figures import FigureStyle


def png_size(path):
    with Image.open(path) as image:
        return image.size, image.info.get("dpi")


def pdf_points(path):
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([0-9.]+)\s+([0-9.]+)\s*\]", Path(path).read_bytes())
    return float(box.group(1)), float(box.group(2))


def svg_points(path):
    text = Path(path).read_text(encoding="utf-8")
    width = re.search(r'<svg[^>]*\swidth="([0-9.]+)pt"', text, re.S)
    height = re.search(r'<svg[^>]*\sheight="([0-9.]+)pt"', text, re.S)
    return float(width.group(1)), float(height.group(1))


def assert_size(path, inches, dpi=300):
    path = Path(path)
    if path.suffix == ".png":
        (w, h), recorded = png_size(path)
        assert abs(w - inches[0] * dpi) <= 1 and abs(h - inches[1] * dpi) <= 1, ((w, h), inches, dpi)
        # PNG stores whole pixels per metre: the dpi read back is within 0.0254/2 of the one written
        assert recorded is not None and abs(recorded[0] - dpi) < 0.013 and abs(recorded[1] - dpi) < 0.013
    elif path.suffix == ".pdf":
        assert Path(path).read_bytes()[:5] == b"%PDF-"
        assert pdf_points(path) == pytest.approx((72 * inches[0], 72 * inches[1]), abs=0.5)
    else:
        assert svg_points(path) == pytest.approx((72 * inches[0], 72 * inches[1]), abs=0.5)


@pytest.fixture
def captured(monkeypatch):
    """The figures as they are saved (``list`` of matplotlib figures), still written to disk."""
    saved = []
    original = figures.save

    def keep(fig, path, style=None):
        saved.append(fig)
        original(fig, path, style)

    for module in (figures, figures_flow, figures_modes, figures_sweep):
        monkeypatch.setattr(module, "save", keep)
    return saved


def all_text(fig) -> str:
    return "\n".join(t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text")))


def growth_data(gamma=0.00807, n=200):
    t = np.linspace(0.0, 50.0, n)
    return t, 2 * gamma * t


@pytest.mark.parametrize("fmt, size", [("png", None), ("pdf", (3.4, 2.8)), ("svg", (7.0, 4.5))])
def test_growth_figure_format_size_and_labels(tmp_path, captured, fmt, size):
    t, log_e = growth_data()
    style = FigureStyle(fmt, 300, size)
    path = style.path(tmp_path, "run")
    figures.growth_figure(path, t, log_e, 0.0080712, 0.0000412, (25.0, 50.0), "ABC, Rm = 12", converged=True,
                          estimate_times=t[10::10], estimate_rates=np.full(19, 0.00807),
                          estimate_errors=np.linspace(1e-3, 4e-5, 19), tolerance=5e-5, U=1.0, k_f=1.0, style=style)
    assert_size(path, size or (6.4, 5.2))
    text = all_text(captured[-1])
    assert r"slope $2\gamma$" in text and "+0.00807 ± 0.00004" in text  # rounded to the error
    assert "converged" in text and "UNDER-RESOLVED" not in text
    assert r"time $t$ (case units; $1/(U k_f)$ = 1)" in text and r"\ln E_M" in text


def test_a_max_time_stop_and_under_resolution_are_tagged_above_the_data(tmp_path, captured):
    t, log_e = growth_data(0.01)
    figures.growth_figure(tmp_path / "stopped.png", t, log_e, 0.01, 0.08, (20.0, 50.0), "8^3", warning="x",
                          converged=False, stop_reason="reached max_time = 30 before converging",
                          estimate_times=t[10::10], estimate_rates=np.full(19, 0.01),
                          estimate_errors=np.full(19, 0.08), tolerance=5e-5)
    fig = captured[-1]
    fig.canvas.draw()
    ax = fig.axes[0]
    frame = ax.get_window_extent()
    tags = [ax._left_title, ax.title, ax._right_title]  # the three title slots above the axes
    texts = [tag.get_text() for tag in tags]
    assert "NOT converged: stopped at max_time" in texts and "POSSIBLY UNDER-RESOLVED" in texts
    for tag in tags:
        if tag.get_text():
            assert tag.get_window_extent().y0 >= frame.y1 - 1  # above the data, never on it
    left, right = ax._left_title.get_window_extent(), ax._right_title.get_window_extent()
    assert left.x1 < right.x0  # the two tags do not overlap
    assert ax._left_title.get_color() != figures.TAG_GREEN
    # the fit of an unconverged run is drawn differently (dotted, amber) from a converged one
    fit = [line for line in ax.get_lines() if "slope" in line.get_label()][0]
    assert fit.get_linestyle() == ":" and "reached max_time = 30" in all_text(fig)


def test_flow_figure(tmp_path, captured):
    k = np.arange(0.0, 8.0)
    E = np.zeros_like(k)
    E[1:] = k[1:] ** -2.0
    H = 2 * k * E * 0.5
    path = tmp_path / "flow.pdf"
    figures_flow.flow_spectra_figure(path, k, E, H, "flow", note="SOCA holds for Rm << 1",
                                     style=FigureStyle("pdf", 300, (7.0, 3.0)))
    assert_size(path, (7.0, 3.0))
    text = all_text(captured[-1])
    assert "relative helicity" in text and "caution: SOCA holds" in text


def test_modes_figure_has_a_labelled_colour_bar(tmp_path, captured):
    rng = np.random.default_rng(3)
    panels = [("|B| on z = 0", rng.random((8, 8)), (6.3, 6.3), ("x", "y")),
              ("|B| on y = 0", rng.random((8, 8)), (6.3, 6.3), ("x", "z"))]
    path = tmp_path / "modes.png"
    figures_modes.modes_figure(path, panels, "leading mode", warning="possibly under-resolved", converged=True,
                               style=FigureStyle("png", 150, (7.0, 3.6)))
    assert_size(path, (7.0, 3.6), dpi=150)
    fig = captured[-1]
    bars = [ax for ax in fig.axes if ax.get_label() == "<colorbar>"]
    assert len(bars) == 1 and "leading eigenmode" in bars[0].get_ylabel()
    assert "POSSIBLY UNDER-RESOLVED" in all_text(fig) and "converged" in all_text(fig)


def sweep_curves():
    """Two grids of a resolution study across the first ABC window (numbers of the README's sweep)."""
    x = [5.0, 8.0, 10.0, 12.0, 14.0, 17.0, 20.0]
    fine = [-0.085, -0.008, 0.005, 0.008, 0.006, 0.0005, -0.011]
    coarse = [-0.08, -0.006, 0.006, 0.009, 0.004, -0.003, -0.015]
    curves = []
    for grid, g in (([16, 16, 16], coarse), ([24, 24, 24], fine)):
        line = {"domain.grid": grid}
        curves.append({"label": figures_sweep.line_label(line), "line": line, "x": x, "gamma": g,
                       "error": [1e-5] * len(x), "status": ["converged"] * len(x),
                       "warning": [grid[0] == 16] * len(x), "refinement": [False] * len(x)})
    critical = [{"value": 9.2, "uncertainty": 0.3, "direction": "opens", "bracket": [8.0, 10.0],
                 "line": {"domain.grid": [24, 24, 24]}},
                {"value": 17.4, "uncertainty": 0.5, "direction": "closes", "bracket": [17.0, 20.0],
                 "line": {"domain.grid": [24, 24, 24]}},
                {"value": 15.9, "uncertainty": 0.4, "direction": "closes", "bracket": [14.0, 17.0],
                 "line": {"domain.grid": [16, 16, 16]}}]
    windows = [{"lower": {"value": 9.2, "uncertainty": 0.3}, "upper": {"value": 17.4, "uncertainty": 0.5},
                "scan": [5.0, 20.0], "line": {"domain.grid": [24, 24, 24]}},
               {"lower": None, "upper": {"value": 15.9, "uncertainty": 0.4}, "scan": [5.0, 20.0],
                "line": {"domain.grid": [16, 16, 16]}}]
    return curves, critical, windows


def test_sweep_figure_zooms_on_crossings_and_shades_windows_per_grid(tmp_path, captured):
    curves, critical, windows = sweep_curves()
    path = tmp_path / "sweep.png"
    figures_sweep.sweep_figure(path, curves, critical, figures_sweep.key_label("magnetic.Rm"), "ABC sweep",
                               windows=windows, style=FigureStyle("png", 200, None))
    assert_size(path, (6.8, 6.0), dpi=200)
    fig = captured[-1]
    main_ax, *zooms = fig.axes
    assert len(zooms) == 3  # one zoom panel per sign change
    for zoom, c in zip(zooms, critical):
        low, high = zoom.get_xlim()
        assert low < c["bracket"][0] and high > c["bracket"][1] and c["value"] - c["uncertainty"] > low
        assert "zoom" in zoom.get_title()
    spans = [p for p in main_ax.patches if "dynamo window" in p.get_label()]
    assert [s.get_label() for s in spans] == ["dynamo window (grid 24x24x24)", "dynamo window (grid 16x16x16)"]
    colours = {tuple(np.round(s.get_facecolor()[:3], 3)) for s in spans}
    assert len(colours) == 2  # each window in the colour of its grid's line
    assert "Rm" in main_ax.get_xlabel() and "U/(" in main_ax.get_xlabel()
    # errors of 1e-5 on a 0.1 scale are far smaller than the markers: the figure says so
    assert "smaller than the marker" in all_text(fig)
    assert "POSSIBLY UNDER-RESOLVED" in all_text(fig)


def test_run_command_writes_the_figure_in_the_requested_format(tmp_path, write_case):
    case = write_case("""
        [domain]
        grid = [8, 8, 8]
        [flow]
        type = "abc"
        [magnetic]
        Rm = 4.0
        initial_field = "flow"
        [numerics]
        planning = "estimate"
        """, "quick.toml")
    code = main(["run", str(case), "--out", str(tmp_path / "o"), "--quiet", "--json", "--figure-format", "pdf",
                 "--figure-size", "3.4,2.6"])
    assert code == 0
    assert_size(tmp_path / "o" / "quick.pdf", (3.4, 2.6))
    assert not (tmp_path / "o" / "quick.png").exists()
    code = main(["run", str(case), "--out", str(tmp_path / "p"), "--quiet", "--json"])
    assert code == 0
    assert_size(tmp_path / "p" / "quick.png", (6.4, 5.2))  # PNG at 300 dpi by default


def test_testfield_figure_has_the_requested_size(tmp_path, write_case):
    # figures_testfield.py is drawn by save() like every figure: the style's size and dpi
    case = write_case("""
        [domain]
        grid = [8, 8, 8]
        [flow]
        type = "abc"
        [magnetic]
        Rm = 1.0
        [testfield]
        modes = [1]
        [output]
        figure_size = [6.0, 3.0]
        figure_dpi = 100
        """, "tf.toml")
    assert main(["testfield", str(case), "--out", str(tmp_path), "--quiet", "--json"]) == 0
    assert_size(tmp_path / "tf-testfield.png", (6.0, 3.0), dpi=100)
