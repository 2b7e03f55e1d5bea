"""Checkpoints of a running growth computation (netCDF, written atomically).

A checkpoint holds the spectral field (real and imaginary parts), time, step, accumulated
log-amplitude and the sample record, tagged with the case fingerprint; it is used only by a run
of the same resolved case. It is removed when the run finishes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from kindyn.output.netcdf import atomic_dataset, read_dataset

_SERIES = ("times", "log_energy", "log_amplitude", "estimate_times", "estimate_rates", "estimate_errors")


class Checkpoint:
    def __init__(self, path):
        self.path = Path(path)

    def save(self, case, state: dict) -> None:
        rec = state["record"]
        with atomic_dataset(self.path) as ds:
            ds.setncattr("fingerprint", case.fingerprint)
            ds.setncattr("time", float(state["time"]))
            ds.setncattr("step", int(state["step"]))
            ds.setncattr("log_amplitude", float(state["log_amplitude"]))
            field = state["field_hat"]
            for i, n in enumerate(field.shape):
                ds.createDimension(f"f{i}", n)
            dims = tuple(f"f{i}" for i in range(field.ndim))
            ds.createVariable("field_real", "f8", dims)[...] = field.real
            ds.createVariable("field_imag", "f8", dims)[...] = field.imag
            for name in _SERIES:
                values = np.asarray(getattr(rec, name), float)
                ds.createDimension(name, values.size)
                ds.createVariable(name, "f8", (name,))[...] = values
            for name, values in rec.series.items():  # the measures of every sample (one per time)
                ds.createVariable(f"series_{name}", "f8", ("times",))[...] = np.asarray(values, float)
            probes = np.asarray(rec.probes, float)
            probes = probes.reshape(len(rec.probes), -1) if probes.size else np.zeros((len(rec.probes), 0))
            ds.createDimension("probe", probes.shape[1])
            ds.createVariable("probes", "f8", ("times", "probe"))[...] = probes

    def load(self, case):
        """The saved state (``"record"`` as a dict of the record's series, plain lists), or None."""
        if not self.path.exists():
            return None
        try:
            data = read_dataset(self.path)
            attributes = data["attributes"]
            if attributes["fingerprint"] != case.fingerprint:
                return None
            record = {name: list(np.asarray(data[name], float)) for name in _SERIES}
            record["probes"] = list(np.asarray(data["probes"], float))
            record["series"] = {name[len("series_"):]: list(np.asarray(values, float))
                                for name, values in data.items() if name.startswith("series_")}
            field = np.asarray(data["field_real"]) + 1j * np.asarray(data["field_imag"])
            return {"field_hat": field, "time": float(attributes["time"]), "step": int(attributes["step"]),
                    "log_amplitude": float(attributes["log_amplitude"]), "record": record}
        except (OSError, KeyError, AttributeError):
            return None

    def remove(self) -> None:
        self.path.unlink(missing_ok=True)
        # a run killed while writing a checkpoint leaves its temporary file behind
        self.path.with_name(self.path.name + ".part").unlink(missing_ok=True)
