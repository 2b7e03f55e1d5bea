"""The first dynamo window of the 1:1:1 ABC flow located by a coarse Rm sweep plus refinement (slow).

Published: for A = B = C = 1, k = 1 (Rm = 1/eta) the leading mode grows for about
8.9 < Rm < 17.5 (Arnold & Korkina 1983, Vestnik Moskov. Univ. Ser. 1 Mat. Mekh. no. 3, 43;
Galloway & Frisch 1986, Geophys. Astrophys. Fluid Dyn. 36, 53; the bounds as quoted in issue 5).
Check (issue 5): both critical values within 2 % of these bounds, each with an uncertainty below
2 %, and exactly one window inside the scan.

Grid: 32^3. 16^3 does not resolve the mode near the upper bound: measured with this command at
16^3 the window closes at Rm = 16.20 +- 0.14 (7 % low). 24^3 gets the value (17.58) but the
resolution guard flags Rm >= 17 there (3.5 % of the peak shell energy at the cut-off, threshold 3 %),
so those runs carry the shadow-grid (20^3) grid dependence in their error (1.2e-3 at Rm = 17) and the
upper bound comes out 17.58 +- 0.91, too wide for the 2 % check. At 32^3 no run is flagged
(cut-off ratio 9e-4 at Rm = 17; gamma(17) = 8.23e-4 against 7.64e-4 at 24^3).
Measured at 32^3 (tolerance 5e-4): 8.940 +- 0.044 and 17.49 +- 0.21 (11 runs, 6 of them
refinement); runtime about 150 s on 2 otherwise idle cores.
"""

from __future__ import annotations

import json
import time

import pytest

from kindyn.cli import main

CASE = """\
[domain]
grid = [32, 32, 32]
[flow]
type = "abc"
A = 1.0
B = 1.0
C = 1.0
k = 1.0
[magnetic]
seed = 7
[run]
tolerance = 5e-4
[numerics]
planning = "estimate"
[output]
figure = false
field = false
[sweep]
"magnetic.Rm" = [8, 10, 14, 17, 20]
refine_runs = 4
refine_width = 0.01
"""

PUBLISHED = (8.9, 17.5)  # Arnold & Korkina 1983; Galloway & Frisch 1986 (see module docstring)


@pytest.mark.slow
def test_coarse_sweep_and_refinement_find_the_first_abc_window(write_case, tmp_path, capsys):
    started = time.time()
    code = main(["sweep", str(write_case(CASE)), "--out", str(tmp_path), "--workers", "2", "--refine", "--json",
                 "--quiet"])
    result = json.loads(capsys.readouterr().out)
    assert code == 0
    (window,) = result["windows"]
    for end, published in zip((window["lower"], window["upper"]), PUBLISHED):
        assert end is not None
        assert abs(end["value"] - published) <= 0.02 * published, (end, published)
        assert end["uncertainty"] <= 0.02 * published
    assert [c["direction"] for c in result["critical"]] == ["opens", "closes"]
    assert any(p["refinement"] for p in result["points"])
    print(f"ABC window: {window['lower']} .. {window['upper']} in {time.time() - started:.0f} s")
