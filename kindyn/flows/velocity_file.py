"""A flow read from a netCDF file of velocity components on a periodic grid (netCDF4 only here).

File layout (what ``kindyn flow`` writes is readable as is)::

    dimensions   x, y, z (any names; a permutation of x, y, z is reordered), optionally time first
    variables    ux, uy, uz (names from the ``variables`` key): (x, y, z) or (time, x, y, z)
    coordinates  optional x, y, z: uniform, starting at 0, no endpoint (x_j = j L/n); the box length
                 is the ``period`` attribute or n * spacing, and must equal the case's
                 optional time (strictly increasing) for a time series
    attributes   optional global ``U`` and ``k_f``: the flow's scales in Rm = U/(eta k_f), used
                 when the case gives no ``flow.U``/``flow.k_f`` (``kindyn flow`` writes them;
                 ``result_U``/``result_k_f`` of older files are read too; :mod:`kindyn.flows.scales`)

Each snapshot is transformed on the file's grid, resampled spectrally to the run's grid (zero
padding or truncation, exact for band-limited fields; :func:`kindyn.flows.gridded.resample_hat`),
checked (finite, energy within the 2/3-rule band, divergence, no uniform part unless
``mean_flow = "allow"``) and kept as Fourier coefficients on the band.
Time: the run's ``t = 0`` is the first snapshot ``t_0``; between snapshots the field is
interpolated linearly; past the last snapshot it is held (``ends = "hold"``) or the series repeats
with period ``loop_period`` (``ends = "loop"``; default ``M dt`` for ``M`` equally spaced
snapshots, the first not repeated at the end), interpolating from the last snapshot back to the
first over the gap ``t_0 + loop_period - t_last``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from kindyn.errors import ParameterError
from kindyn.flows import checks
from kindyn.flows.gridded import band_mask, grid_from_hat, hat_from_grid, is_box_grid, resample_hat, values_at
from kindyn.flows.scales import resolve_scales, rms_speed
from kindyn.flows.user import COMMON_KEYS, optional_positive, unknown_keys

FILE_KEYS = ("file", "variables", "ends", "loop_period") + COMMON_KEYS
SCALE_ATTRIBUTES = ("U", "k_f")
ENDS = ("hold", "loop")
DEFAULT_VARIABLES = ("ux", "uy", "uz")  # the velocity components' names when flow.variables is not given


def declared_shape(params: dict, case_dir="."):
    """``(path, variable, dimension names, shape)`` the file's header declares for the first velocity
    variable, read without reading any data (for the memory check of :mod:`kindyn.case.budget`,
    before the file is read); None when the file or the variable cannot be found or read (the
    reader then says what is wrong)."""
    spec = params.get("file")
    names = params.get("variables", list(DEFAULT_VARIABLES))
    if not isinstance(spec, str) or not spec or not isinstance(names, (list, tuple)) or not names \
            or not isinstance(names[0], str):
        return None
    path = (Path(case_dir) / spec).resolve()
    try:
        if not path.is_file():
            return None
        import netCDF4

        with netCDF4.Dataset(path) as ds:
            if names[0] not in ds.variables:
                return None
            var = ds.variables[names[0]]
            return path, names[0], tuple(var.dimensions), tuple(int(len(ds.dimensions[d])) for d in var.dimensions)
    except (OSError, RuntimeError, KeyError, ValueError, TypeError):
        return None


def read_velocity_file(path: Path, names, box, spec):
    """``(times or None, data (S, 3, nx', ny', nz'), (U or None, k_f or None))`` from the file;
    raise on layout problems."""
    try:
        import netCDF4  # here, not at import: validating a case must not load netCDF4

        ds = netCDF4.Dataset(path)
    except (OSError, RuntimeError) as exc:
        raise ParameterError("file", spec, f"a readable netCDF file ({path}: {exc})") from None
    with ds:
        arrays, dims = [], None
        for name in names:
            if name not in ds.variables:
                raise ParameterError("variables", list(names), f"variables present in {path.name} "
                                     f"(no {name!r}; it has {', '.join(ds.variables) or 'none'})")
            var = ds.variables[name]
            if var.ndim not in (3, 4):
                raise ParameterError("file", spec, f"{name} with dimensions (x, y, z) or (time, x, y, z); "
                                     f"got {var.dimensions}")
            if dims is None:
                dims = var.dimensions
            elif var.dimensions != dims or var.shape != ds.variables[names[0]].shape:
                raise ParameterError("file", spec, f"{', '.join(names)} on the same dimensions; {name} has "
                                     f"{var.dimensions} {var.shape}, {names[0]} has {dims}")
            arrays.append(np.ma.filled(np.ma.asarray(var[...], dtype=float), np.nan))
        data = np.stack(arrays, axis=-4 if len(dims) == 4 else 0)
        if len(dims) == 3:
            data = data[None]
        spatial = list(dims[-3:])
        if sorted(spatial) == ["x", "y", "z"]:
            order = [spatial.index(a) for a in "xyz"]
            data = np.transpose(data, (0, 1, *(2 + o for o in order)))
            spatial = ["x", "y", "z"]
        _check_coordinates(ds, spatial, data.shape[2:], box, spec)
        times = None
        if len(dims) == 4:
            tname = dims[0]
            if tname not in ds.variables or ds.variables[tname].ndim != 1:
                raise ParameterError("file", spec, f"a coordinate variable {tname!r} for the time dimension")
            times = np.asarray(np.ma.filled(ds.variables[tname][...], np.nan), dtype=float)
            if not np.all(np.isfinite(times)) or np.any(np.diff(times) <= 0):
                raise ParameterError("file", spec, f"strictly increasing, finite times in {tname!r}")
        scales = tuple(_scale_attribute(ds, key, spec) for key in SCALE_ATTRIBUTES)
    return times, data, scales


def _scale_attribute(ds, key: str, spec):
    """The file's declared ``U`` or ``k_f`` (global attribute; ``result_U``/``result_k_f`` of files
    written by earlier versions of ``kindyn flow``), or None."""
    attrs = ds.ncattrs()
    name = key if key in attrs else f"result_{key}" if f"result_{key}" in attrs else None
    if name is None:
        return None
    value = ds.getncattr(name)
    try:
        number = float(np.asarray(value).reshape(-1)[0]) if np.size(value) == 1 else None
    except (TypeError, ValueError):
        number = None
    if number is None or not (number > 0 and np.isfinite(number)):
        raise ParameterError("file", spec, f"a positive number in the file's attribute {name} (the flow's {key} "
                             f"in Rm = U/(eta k_f)); got {value!r}")
    return number


def _check_coordinates(ds, spatial, shape, box, spec) -> None:
    for axis, (name, n) in enumerate(zip(spatial, shape)):
        if name not in ds.variables:
            continue
        coord = np.asarray(ds.variables[name][...], dtype=float)
        if coord.shape != (n,):
            raise ParameterError("file", spec, f"a 1-D coordinate {name!r} of length {n}")
        if n > 1 and abs(coord[-1] - box.lengths[axis]) <= 1e-9 * box.lengths[axis]:
            raise ParameterError("file", spec, f"a periodic grid along {name} with no endpoint: its last "
                                 f"coordinate {coord[-1]:.6g} equals the box length, so the first point is "
                                 "repeated; drop the last point")
        spacing = coord[1] - coord[0] if n > 1 else box.lengths[axis]
        attrs = ds.variables[name].ncattrs()
        length = float(ds.variables[name].getncattr("period")) if "period" in attrs else n * spacing
        uniform = np.allclose(coord, coord[0] + spacing * np.arange(n), rtol=0, atol=1e-9 * length)
        if not uniform or abs(coord[0]) > 1e-9 * length or abs(n * spacing - length) > 1e-9 * length:
            raise ParameterError("file", spec, f"a periodic grid along {name}: uniform coordinates "
                                 f"x_j = j L/n from 0 with no endpoint (got {coord[0]:.6g} .. {coord[-1]:.6g}, "
                                 f"{n} points, period {length:.6g})")
        if abs(length - box.lengths[axis]) > 1e-9 * box.lengths[axis]:
            raise ParameterError("file", spec, f"the box length along {'xyz'[axis]} = {box.lengths[axis]:.6g} "
                                 f"(the file's grid spans {length:.6g})")


@dataclass(frozen=True)
class VelocityFileFlow:
    """Velocity snapshots from a netCDF file (see the module docstring)."""

    file: str
    variables: tuple
    ends: str
    speed: float
    wavenumber: float
    steady: bool
    period: float | None
    times: np.ndarray | None = field(repr=False, compare=False)
    coefficients: np.ndarray = field(repr=False, compare=False)   # (S, 3, nx, ny, nz//2+1)
    box: object = field(repr=False, compare=False)
    source_grid: tuple = ()
    scale_rule: str = ""
    measured_scales: tuple = ()
    u_rms: float = np.nan
    _cache: dict = field(default_factory=dict, repr=False, compare=False)
    z_independent = False

    @classmethod
    def from_case(cls, params: dict, box, case_dir="."):
        unknown_keys(params, FILE_KEYS, "velocity-file")
        spec = params.get("file")
        if not isinstance(spec, str) or not spec:
            raise ParameterError("file", spec if spec is not None else "<missing>", "a path to a netCDF file")
        path = (Path(case_dir) / spec).resolve()
        if not path.is_file():
            why = "is a folder" if path.is_dir() else ("is not a regular file" if path.exists() else "not found")
            raise ParameterError("file", spec, f"an existing netCDF file ({path} {why})")
        names = params.get("variables", list(DEFAULT_VARIABLES))
        if not isinstance(names, (list, tuple)) or len(names) != 3 or not all(isinstance(n, str) for n in names):
            raise ParameterError("variables", names, "three variable names, e.g. [\"ux\", \"uy\", \"uz\"]")
        ends = params.get("ends", "hold")
        if ends not in ENDS:
            raise ParameterError("ends", ends, "one of " + ", ".join(f'"{e}"' for e in ENDS))
        divergence, tolerance = checks.divergence_options(dict(params))
        mean_flow = checks.mean_flow_option(params)
        times, data, file_scales = read_velocity_file(path, tuple(names), box, spec)
        source_grid = tuple(int(n) for n in data.shape[2:])
        mask = band_mask(box)
        coefficients = np.empty((data.shape[0], 3, *box.spectral_shape), dtype=complex)
        for s, snapshot in enumerate(data):
            t = 0.0 if times is None else float(times[s] - times[0])
            checks.check_finite(snapshot, _Grid(source_grid, box.lengths), "file", spec, t)
            u_hat = resample_hat(hat_from_grid(snapshot), source_grid, box.grid) * mask
            total = float(np.mean(np.sum(snapshot**2, axis=0)))
            kept = float(np.sum(box.parseval_weights * np.sum(np.abs(u_hat) ** 2, axis=0)))
            lost = max(0.0, 1.0 - kept / total) if total > 0 else 0.0
            coefficients[s] = checks.check_coefficients(u_hat, box, "file", spec, t, divergence, tolerance,
                                                        band_share=lost)
            checks.check_mean_flow(u_hat, box, t, mean_flow, params.get("mean_flow"))
        period = None
        if times is not None and len(times) > 1 and ends == "loop":
            period = _loop_period(times, params, spec)
        steady = coefficients.shape[0] == 1
        U, k_f, rule, measured = resolve_scales(params, coefficients[0], box, file_scales, steady=steady)
        return cls(spec, tuple(names), ends, U, k_f, steady, period,
                   None if steady else times - times[0], coefficients, box, source_grid,
                   scale_rule=rule, measured_scales=measured, u_rms=rms_speed(coefficients[0], box))

    def check_box(self, box) -> None:
        if self.box.lengths != box.lengths or self.box.grid != box.grid:
            raise ParameterError("grid", list(box.grid), f"the grid the file was resampled to {list(self.box.grid)}")

    # --- time interpolation ------------------------------------------------------------------
    def weights(self, t: float) -> tuple[int, int, float]:
        """Snapshots ``(i, j)`` and weight ``f`` with ``u(t) = (1 - f) u_i + f u_j``."""
        times = self.times
        last = len(times) - 1
        if self.period:
            s = t % self.period
            i = int(np.searchsorted(times, s, side="right")) - 1
            if i == last:
                gap = self.period - times[last]
                return last, 0, (s - times[last]) / gap
        else:
            s = min(max(t, 0.0), times[last])
            i = min(int(np.searchsorted(times, s, side="right")) - 1, last - 1)
        return i, i + 1, (s - times[i]) / (times[i + 1] - times[i])

    def coefficients_at(self, t: float) -> np.ndarray:
        if self.steady:
            return self.coefficients[0]
        i, j, f = self.weights(t)
        return (1 - f) * self.coefficients[i] + f * self.coefficients[j]

    def fourier_coefficients(self, t: float) -> np.ndarray:
        """Half-grid coefficients ``(3, nx, ny, nz//2+1)`` on the case's grid at ``t`` (a layout
        synthesises the velocity from them with its own transform)."""
        return self.coefficients_at(t)

    def _snapshot_grid(self, i: int) -> np.ndarray:
        store = self._cache.setdefault("grids", {})
        if i not in store:
            if len(store) >= 3:
                store.pop(next(iter(store)))
            store[i] = grid_from_hat(self.coefficients[i], self.box.grid)
        return store[i]

    def velocity(self, x, y, z, t):
        if not is_box_grid(self.box, x, y, z):
            return values_at(self.coefficients_at(t), self.box, x, y, z)
        if self.steady:
            return tuple(self._snapshot_grid(0))
        i, j, f = self.weights(t)
        return tuple((1 - f) * self._snapshot_grid(i) + f * self._snapshot_grid(j))


class _Grid:
    """Shape and axes of the file's grid (for the finite-value check's message)."""

    def __init__(self, grid, lengths):
        self.shape, self.lengths = tuple(grid), tuple(lengths)

    def axis(self, i):
        return np.arange(self.shape[i]) * (self.lengths[i] / self.shape[i])


def _loop_period(times, params, spec) -> float:
    given = optional_positive(params, "loop_period")
    span = float(times[-1] - times[0])
    if given is None:
        steps = np.diff(times)
        if not np.allclose(steps, steps[0], rtol=1e-9, atol=0):
            raise ParameterError("loop_period", "<missing>", "a loop period for unequally spaced snapshots "
                                 f"(longer than their span {span:g})")
        return span + float(steps[0])
    if not given > span:
        raise ParameterError("loop_period", given, f"a period longer than the snapshots' span {span:g}")
    return given

