"""``kindyn modes``: JSON, netCDF eigenfields, figure, the sweep entry point and bad input.

The numbers printed are checked against the independent dense reference
``tests/reference/roberts_galerkin.py`` (Roberts 1972 flow, scipy.linalg.eig of the truncated
operator) and against an exact property of the written eigenfields (solenoidal, zero mean, unit
energy, eigenvalue relation of the planar amplitude under the induction operator).

Runtime: about 5 s on two idle cores.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from kindyn.cli import main
from kindyn.output.netcdf import read_dataset

try:
    from tests.reference import roberts_galerkin as rg
except ImportError:  # plain `pytest` with rootdir-relative imports
    from reference import roberts_galerkin as rg

ROBERTS = """
[domain]
lengths = ["2*pi", "2*pi", "4*pi"]
grid = [16, 16, 8]
[flow]
type = "roberts"
[magnetic]
eta = 0.2
[modes]
count = 3
kz = [0.5, 1.0]
fields = 2
"""

ABC = """
[domain]
grid = [8, 9, 8]
[flow]
type = "abc"
[magnetic]
Rm = 6.0
[modes]
count = 2
"""


def _write(tmp_path, text, name="case"):
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return path


def test_json_eigenvalues_match_dense_reference_and_files_are_written(tmp_path, capsys):
    path = _write(tmp_path, ROBERTS, "roberts")
    assert main(["modes", str(path), "--out", str(tmp_path / "out"), "--json", "--quiet"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["method"] == "planar" and result["z_independent"] is True
    eigenvalues = np.array(result["eigenvalues"])
    assert eigenvalues.shape == (3, 2) and len(result["residuals"]) == 3
    with threadpool_limits(limits=1, user_api="blas"):
        dense = rg.leading_eigenvalues(rg.roberts_velocity_coefficients(), 1.0, 0.5, 0.2, 5, count=1)
    # grid 16 keeps |m| <= 5: the same truncation as M = 5 in the reference
    assert eigenvalues[0, 0] == pytest.approx(dense[0].real, abs=1e-6)
    assert result["vertical_wavenumbers"][0] == 0.5
    data = read_dataset(tmp_path / "out" / "roberts-modes.nc")
    np.testing.assert_allclose(data["growth_rate"], eigenvalues[:, 0], rtol=0, atol=1e-15)
    np.testing.assert_allclose(data["residual"], result["residuals"], rtol=0, atol=1e-20)
    assert data["eigenfield_x_real"].shape == (2, 16, 16)
    b = np.stack([data[f"eigenfield_{c}_real"][0] + 1j * data[f"eigenfield_{c}_imag"][0] for c in "xyz"])
    # planar amplitude of B = Re[b exp(i kz z)]: unit <|b|^2>, solenoidal with d/dz -> i kz
    assert np.mean(np.sum(np.abs(b) ** 2, axis=0)) == pytest.approx(1.0, rel=1e-10)
    b_hat = np.fft.fft2(b, axes=(1, 2)) / 256
    k = np.fft.fftfreq(16, 1 / 16)
    div = 1j * (k[:, None] * b_hat[0] + k[None, :] * b_hat[1] + 0.5 * b_hat[2])
    assert np.max(np.abs(div)) < 1e-12
    assert data["attributes"]["method"] == "planar"
    assert (tmp_path / "out" / "roberts-modes.png").stat().st_size > 0


def test_box_method_writes_three_dimensional_eigenfields(tmp_path, capsys):
    path = _write(tmp_path, ABC, "abc")
    assert main(["modes", str(path), "--out", str(tmp_path / "out"), "--count", "3", "--quiet"]) == 0
    table = capsys.readouterr().out
    assert "gamma" in table and "residual" in table
    data = read_dataset(tmp_path / "out" / "abc-modes.nc")
    assert data["growth_rate"].shape == (3,)
    assert np.all(np.diff(data["growth_rate"]) <= 1e-12)  # largest growth rate first
    real = np.stack([data[f"eigenfield_{c}_real"][0] for c in "xyz"])
    imag = np.stack([data[f"eigenfield_{c}_imag"][0] for c in "xyz"])
    assert real.shape == (3, 8, 9, 8)
    # unit energy <|B_r|^2 + |B_i|^2>/2 and zero mean (the neutral k = 0 mode is excluded)
    assert 0.5 * np.mean(np.sum(real**2 + imag**2, axis=0)) == pytest.approx(1.0, rel=1e-10)
    assert np.max(np.abs(real.mean(axis=(1, 2, 3)))) < 1e-12


@pytest.mark.parametrize("overrides, message", [
    (["modes.method=planar"], "modes.method"),
    (["modes.kz=[-1.0]"], "modes.kz"),
    (["modes.count=0"], "modes.count"),
    (["modes.colour=1"], "modes.colour"),
    (["modes.planar_grid=[8]"], "modes.planar_grid"),
])
def test_bad_input_is_one_line_and_exit_code_two(tmp_path, capsys, overrides, message):
    path = _write(tmp_path, ABC, "abc")
    argv = ["modes", str(path), "--out", str(tmp_path / "out"), "--quiet"]
    for text in overrides:
        argv += ["--set", text]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and "abc.toml" in err[0]
    assert not (tmp_path / "out" / "abc-modes.nc").exists()


def test_count_option_must_be_positive(tmp_path, capsys):
    assert main(["modes", str(_write(tmp_path, ABC, "abc")), "--out", str(tmp_path / "o"), "--count", "0"]) == 2
    assert "--count" in capsys.readouterr().err
