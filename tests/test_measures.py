"""The diagnostics seam: measures recorded at every sample, written with their metadata, checkpointed.

References: ``div(curl A) = 0`` exactly (derived), so the field of a run stays solenoidal to
round-off at every sample; the resolution guard's ratio is a time average over the second half of
the record (common practice: a property of the mode, not of the last sample).
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

from kindyn.case.load import load_case
from kindyn.diagnostics.measures import RELATIVE_DIVERGENCE, Measure, run_series
from kindyn.output.checkpoint import Checkpoint
from kindyn.output.growth_file import record_growth_run
from kindyn.run import Record, run_growth, settled_cutoff_ratio

CASE = """
[domain]
grid = [12, 10, 9]
[flow]
type = "abc"
[magnetic]
Rm = 12.0
seed = 3
[run]
max_time = 6.0
[output]
figure = false
"""


def test_every_sample_records_the_registered_measures_and_the_file_carries_them(tmp_path):
    case = load_case(tmp_path / "m.toml", text=CASE)
    outcome = run_growth(case)
    rec = outcome.record
    names = [m.name for m in run_series(case.flow.z_independent)]
    assert names == ["cutoff_ratio", "relative_divergence"]
    for name in names:
        assert len(rec.series[name]) == len(rec.times)
    assert max(rec.series["relative_divergence"]) <= 1e-13  # div B = 0 to round-off (derived)
    ratios = np.asarray(rec.series["cutoff_ratio"])
    assert outcome.cutoff_ratio == pytest.approx(ratios[ratios.size // 2:].mean(), rel=1e-15)
    path = tmp_path / "m.nc"
    record_growth_run(path, case, outcome)
    with netCDF4.Dataset(path) as ds:
        for measure in run_series(case.flow.z_independent):
            var = ds[measure.name]
            assert var.dimensions == ("time",) and var.getncattr("long_name") == measure.long_name
            np.testing.assert_array_equal(var[:], rec.series[measure.name])


def test_checkpoint_keeps_the_series(tmp_path):
    case = load_case(tmp_path / "m.toml", text=CASE)
    record = Record(times=[0.0, 0.5, 1.0], log_energy=[0.0, 0.1, 0.2], log_amplitude=[0.0, 0.0, 0.1],
                    probes=[np.ones(4), np.zeros(4), np.ones(4)],
                    series={"cutoff_ratio": [1e-3, 2e-3, 4e-3], "relative_divergence": [0.0, 1e-16, 0.0]})
    point = Checkpoint(tmp_path / "m.checkpoint.nc")
    point.save(case, {"field_hat": np.ones((3, *case.box.spectral_shape), complex), "time": 1.0, "step": 4, "log_amplitude": 0.1,
                      "record": record})
    state = point.load(case)
    assert state["record"]["series"] == record.series
    assert settled_cutoff_ratio(Record(**state["record"])) == pytest.approx((2e-3 + 4e-3) / 2, rel=1e-15)


def test_a_measure_is_a_small_named_object():
    assert isinstance(RELATIVE_DIVERGENCE, Measure)
    assert RELATIVE_DIVERGENCE.units == "1" and RELATIVE_DIVERGENCE.dims == ()
