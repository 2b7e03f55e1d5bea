"""Checkpoints of a running growth computation (netCDF, written atomically), which prove themselves.

A checkpoint holds the spectral field (real and imaginary parts), time, step, accumulated
log-amplitude, the time-step error once it is measured, and the sample record, tagged with the
case fingerprint and a sha256 ``checksum`` over all of it (:func:`state_checksum`). It is used only
by a run of the same resolved case, and only if it is whole: :meth:`Checkpoint.load` verifies the
checksum, the shapes and lengths (field ``(3, nx, ny, nz//2+1)``, every series as long as
``times``) and that every number is finite. Anything else (unreadable, truncated, garbled, written
for another case, a directory at the path) is *discarded* with one line through ``notify``
("checkpoint PATH discarded: REASON; starting afresh") and the run starts afresh; a file is
never deleted for it (the next checkpoint replaces it), a directory is left alone.

A checkpoint is insurance: a failed write (disk full, a read-only folder) is reported in one line
through ``notify`` (once per run of failures) and the run goes on.

*Finished* checkpoints: when a run has finished (and before its result is written), the run saves
its final state with ``finished`` (the stop reason and the run's post-processing results: the
time-step error, the shadow grid, its growth rate and the grid error). A run that finds a finished
checkpoint rebuilds its outcome from it without stepping, so a kill between the final write of
the result and the removal of the checkpoint never recomputes a finished run. The checkpoint is
removed when the result is written.
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np

from kindyn.errors import clip
from kindyn.output.atomic import remove_temporaries
from kindyn.output.netcdf import atomic_dataset, read_dataset

_SERIES = ("times", "log_energy", "log_amplitude", "estimate_times", "estimate_rates", "estimate_errors")
_ESTIMATE_SERIES = ("estimate_times", "estimate_rates", "estimate_errors")
FORMAT = "kindyn checkpoint 2"  # the checksum's recipe; a file without it is discarded


class _Invalid(Exception):
    """Why a checkpoint cannot be used (the reason of the discard line)."""


def state_checksum(fingerprint: str, time: float, step: int, log_amplitude: float, time_error: float,
                   finished: str, field_real, field_imag, series: dict, probes) -> str:
    """sha256 (hex) over everything a resume uses, in a fixed order, as float64 / int64 bytes."""
    h = hashlib.sha256()
    h.update(FORMAT.encode())
    h.update(str(fingerprint).encode())
    h.update(np.asarray([time, log_amplitude, time_error], "<f8").tobytes())
    h.update(np.asarray([step], "<i8").tobytes())
    h.update(str(finished).encode())
    for name, values in [("field_real", field_real), ("field_imag", field_imag), *sorted(series.items()),
                         ("probes", probes)]:
        values = np.ascontiguousarray(values, "<f8")
        h.update(name.encode())
        h.update(np.asarray(values.shape, "<i8").tobytes())
        h.update(values.tobytes())
    return h.hexdigest()


def _describe(exc: BaseException) -> str:
    text = str(exc) or type(exc).__name__
    return clip(f"{type(exc).__name__}: {text}" if not isinstance(exc, OSError) else text, 160)


class Checkpoint:
    """The checkpoint file at ``path``. ``notify(text)`` (optional) is told, in one line, when a
    checkpoint is discarded or cannot be written; :attr:`notes` keeps those lines in order."""

    def __init__(self, path, notify=None):
        self.path = Path(path)
        self.notify = notify
        self.notes: list[str] = []
        self._failing = False

    def _tell(self, text: str) -> None:
        self.notes.append(text)
        if self.notify is not None:
            self.notify(text)

    def discard(self, reason: str) -> None:
        """Say that the checkpoint is not used (the run starts afresh)."""
        self._tell(f"checkpoint {clip(str(self.path))} discarded: {reason}; starting afresh")

    # --- writing ---------------------------------------------------------------------------------

    def save(self, case, state: dict) -> bool:
        """Write ``state`` atomically; on failure say so once (until a write succeeds again) and
        return False: a checkpoint is insurance, never a reason to stop a run."""
        try:
            if self.path.is_dir() and not self.path.is_symlink():
                raise IsADirectoryError(f"{self.path} is a directory")
            self._write(case, state)
        except (OSError, RuntimeError, ValueError) as exc:  # atomic_dataset has removed its temporary
            if not self._failing:
                self._tell(f"checkpoint {clip(str(self.path))} not written ({_describe(exc)}); the run goes on "
                           "without it (a kill now loses the time since the last checkpoint)")
            self._failing = True
            return False
        self._failing = False
        return True

    def _write(self, case, state: dict) -> None:
        rec = state["record"]
        field = np.asarray(state["field_hat"])
        real, imag = np.ascontiguousarray(field.real, "f8"), np.ascontiguousarray(field.imag, "f8")
        series = {name: np.asarray(getattr(rec, name), "f8") for name in _SERIES}
        for name, values in rec.series.items():  # the measures of every sample (one per time)
            series[f"series_{name}"] = np.asarray(values, "f8")
        probes = np.asarray(rec.probes, "f8")
        probes = probes.reshape(len(rec.probes), -1) if probes.size else np.zeros((len(rec.probes), 0))
        time_error = state.get("time_error")
        time_error = math.nan if time_error is None else float(time_error)
        finished = json.dumps(state["finished"], sort_keys=True) if state.get("finished") else ""
        checksum = state_checksum(case.fingerprint, float(state["time"]), int(state["step"]),
                                  float(state["log_amplitude"]), time_error, finished, real, imag, series, probes)
        with atomic_dataset(self.path) as ds:
            ds.setncattr("format", FORMAT)
            ds.setncattr("fingerprint", case.fingerprint)
            ds.setncattr("time", float(state["time"]))
            ds.setncattr("step", np.int64(state["step"]))
            ds.setncattr("log_amplitude", float(state["log_amplitude"]))
            ds.setncattr("time_error", time_error)
            ds.setncattr("finished", finished)
            ds.setncattr("checksum", checksum)
            for i, n in enumerate(field.shape):
                ds.createDimension(f"f{i}", n)
            dims = tuple(f"f{i}" for i in range(field.ndim))
            ds.createVariable("field_real", "f8", dims)[...] = real
            ds.createVariable("field_imag", "f8", dims)[...] = imag
            for name, values in series.items():
                dim = (name,) if name in _SERIES else (f"{name}_samples",)
                if dim[0] not in ds.dimensions:
                    ds.createDimension(dim[0], values.size)
                ds.createVariable(name, "f8", dim)[...] = values
            ds.createDimension("probe_samples", probes.shape[0])
            ds.createDimension("probe", probes.shape[1])
            ds.createVariable("probes", "f8", ("probe_samples", "probe"))[...] = probes

    # --- reading ---------------------------------------------------------------------------------

    def load(self, case):
        """The saved state (``"record"`` as a dict of the record's series, plain lists; ``"finished"``
        a dict or None), or None: no checkpoint, or one that was discarded (said through ``notify``)."""
        path = self.path
        if not (path.exists() or path.is_symlink()):
            return None
        if path.is_dir():
            self.discard("it is a directory, not a checkpoint file (left alone: no checkpoints are written "
                         "until it is removed)")
            self._failing = True  # said: the writes that fail on it are not reported again
            return None
        try:
            data = read_dataset(path)
        except Exception as exc:  # noqa: BLE001 -- any damage to the file: HDF errors, decoding errors
            self.discard(f"unreadable, truncated or not a netCDF file ({_describe(exc)})")
            return None
        try:
            return _state_of(data, case)
        except _Invalid as exc:
            self.discard(str(exc))
        except Exception as exc:  # noqa: BLE001 -- a malformed file that still opened
            self.discard(f"malformed ({_describe(exc)})")
        return None

    def remove(self) -> None:
        """Remove the checkpoint and the temporaries a run killed while writing one left behind; a
        directory at the path is the user's (reported when the run started) and left alone."""
        if not (self.path.is_dir() and not self.path.is_symlink()):
            self.path.unlink(missing_ok=True)
        remove_temporaries(self.path)


def _state_of(data: dict, case) -> dict:
    attributes = data["attributes"]
    if "fingerprint" not in attributes:
        raise _Invalid("not a kindyn checkpoint (it has no case fingerprint)")
    if attributes["fingerprint"] != case.fingerprint:
        raise _Invalid(f"it belongs to another case (fingerprint {clip(str(attributes['fingerprint']), 20)}, "
                       f"this case {case.fingerprint[:16]}...)")
    if attributes.get("format") != FORMAT or "checksum" not in attributes:
        raise _Invalid("it carries no checksum (written by an older kindyn)")
    real, imag = np.asarray(data["field_real"], "f8"), np.asarray(data["field_imag"], "f8")
    series = {name: np.asarray(values, "f8") for name, values in data.items()
              if name in _SERIES or name.startswith("series_")}
    missing = [name for name in _SERIES if name not in series]
    if missing:
        raise _Invalid(f"its record lacks {', '.join(missing)}")
    probes = np.asarray(data["probes"], "f8")
    time, step = float(attributes["time"]), int(attributes["step"])
    log_amplitude, time_error = float(attributes["log_amplitude"]), float(attributes["time_error"])
    finished = str(attributes.get("finished", ""))
    checksum = state_checksum(attributes["fingerprint"], time, step, log_amplitude, time_error, finished,
                              real, imag, series, probes)
    if checksum != attributes["checksum"]:
        raise _Invalid("its data do not match its checksum (the file is damaged)")
    problem = _state_problem(real.shape, case.box.spectral_shape, series, probes.shape, time, step, log_amplitude)
    if problem:
        raise _Invalid(problem)
    if not np.all(np.isfinite(real)) or not np.all(np.isfinite(imag)):
        raise _Invalid("its field holds non-finite coefficients")
    record = {name: list(series[name]) for name in _SERIES}
    record["probes"] = list(probes)
    record["series"] = {name[len("series_"):]: list(values) for name, values in series.items()
                        if name.startswith("series_")}
    return {"field_hat": real + 1j * imag, "time": time, "step": step, "log_amplitude": log_amplitude,
            "time_error": None if math.isnan(time_error) else time_error, "record": record,
            "finished": json.loads(finished) if finished else None}


def _state_problem(field_shape, spectral_shape, series: dict, probes_shape, time, step, log_amplitude) -> str:
    """What makes a saved state unusable ("" when nothing): shapes, lengths, non-finite numbers."""
    expected = (3, *spectral_shape)
    if tuple(field_shape) != expected:
        return f"its field has shape {list(field_shape)}, this case's {list(expected)}"
    samples = len(series.get("times", ()))
    if samples < 1:
        return "its record has no samples"
    for name, values in series.items():
        if name in _ESTIMATE_SERIES:
            continue
        if len(values) != samples:
            return f"its series '{clip(name, 40)}' has {len(values)} samples, its times {samples}"
    lengths = {len(series.get(name, ())) for name in _ESTIMATE_SERIES}
    if len(lengths) != 1:
        return "its estimate series differ in length"
    if len(probes_shape) != 2 or probes_shape[0] != samples:
        return f"its probes have shape {list(probes_shape)}, not one row per sample ({samples})"
    for name, values in series.items():
        if name in ("times", "log_energy", "log_amplitude") and not np.all(np.isfinite(values)):
            return f"its series '{name}' holds non-finite values"
    if not (math.isfinite(time) and math.isfinite(log_amplitude)) or step < 0:
        return f"its time, step or log-amplitude is not valid ({time}, {step}, {log_amplitude})"
    if float(series["times"][-1]) > time:
        return f"its last sample time {series['times'][-1]} is after its time {time}"
    return ""
