"""Output faults (issue 13, classes 4 and 5): output checked before computing, no half-written or
redirected files, a finished result never lost.

* a bad ``--out`` (an existing file, a path under a file, a read-only folder) and output names the
  file system refuses (NUL, 300 characters) are one line and exit code 2 before any computation,
  for every command that writes (:func:`kindyn.output.atomic.check_output`);
* a planted symlink at the old temporary name ``OUT/NAME.nc.part`` is not followed: the file it
  points to (outside ``--out``) is unchanged and the output is complete and correct;
* a full disk (a 64 kB tmpfs where the test may mount one, and an injected netCDF "HDF error" on
  close that always runs) is one line on stderr, exit code 1, no temporary left and the results on
  stdout as one JSON object.

There is no published source for I/O behaviour: everything here is `common practice` (POSIX
exclusive creation ``O_CREAT | O_EXCL | O_NOFOLLOW``, rename for atomic replacement, check before
long work).
"""

from __future__ import annotations

import contextlib
import json
import os
import subprocess
import types
from pathlib import Path

import pytest

from kindyn.cli import main

CASES = Path(__file__).resolve().parent.parent / "cases"


def small(name: str, grid: str = "[8, 8, 8]") -> str:
    return (CASES / name).read_text(encoding="utf-8").replace("grid = [24, 24, 24]", f"grid = {grid}")


ABC = small("abc-first-window.toml")
SHORT = ["--set", "run.max_time=2", "--set", "run.checkpoint_seconds=100000"]

# every command that writes, with a case it accepts (small grids; nothing is computed in the checks)
COMMANDS = {
    "run": (ABC, []),
    "flow": (ABC, []),
    "modes": (small("modes-abc-onset.toml"), []),
    "testfield": (small("testfield-abc-scale-dependence.toml", "[12, 12, 12]"), []),
    "closure": (small("testfield-abc-scale-dependence.toml", "[12, 12, 12]"), []),
    "ensemble": (small("random-helical-ember-convection.toml", "[10, 10, 10]"), ["--count", "2"]),
    "sweep": (small("sweep-abc-rm.toml"), []),
}


def cli(argv, capsys):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.err.strip().splitlines(), captured.out


def assert_refused(code, lines, *needles):
    """Exit code 2 and exactly one line on stderr (no progress: nothing was computed)."""
    assert code == 2, lines
    assert len(lines) == 1, lines
    assert "Traceback" not in lines[0] and "internal error" not in lines[0], lines[0]
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])


def case_for(command, write_case):
    text, extra = COMMANDS[command]
    return write_case(text, f"{command}-case.toml"), extra


def leftovers(folder: Path) -> list[str]:
    """Temporaries and probes under ``folder`` (none may be left)."""
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*") if p.name.endswith(".part"))


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_out_that_is_a_file(command, tmp_path, write_case, capsys):
    """``--out`` naming an existing regular file: one line naming it, exit 2, before computing; the
    file is unchanged (common practice)."""
    case, extra = case_for(command, write_case)
    target = tmp_path / "taken"
    target.write_text("keep me", encoding="utf-8")
    code, lines, _ = cli([command, case, "--out", target, *extra], capsys)
    assert_refused(code, lines, "--out", "taken", "existing file")
    assert target.read_text(encoding="utf-8") == "keep me"


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_out_under_a_file(command, tmp_path, write_case, capsys):
    """``--out`` below a regular file (``FILE/sub``): one line naming the file, exit 2, before
    computing (common practice)."""
    case, extra = case_for(command, write_case)
    (tmp_path / "plain").write_text("x", encoding="utf-8")
    code, lines, _ = cli([command, case, "--out", tmp_path / "plain" / "sub", *extra], capsys)
    assert_refused(code, lines, "--out", "plain is a file, not a folder")


@contextlib.contextmanager
def mounted_tmpfs(folder: Path, options: str):
    """A tmpfs mounted at ``folder`` (tests run as root in CI); skips where mounting is refused."""
    folder.mkdir(parents=True, exist_ok=True)
    try:
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(folder)],
                              capture_output=True, text=True, timeout=30)
    except (OSError, subprocess.SubprocessError) as exc:
        pytest.skip(f"cannot mount a tmpfs here ({exc})")
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here (mount -t tmpfs -o {options}: {done.stderr.strip()})")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True, timeout=30)


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_read_only_folder(command, tmp_path, write_case, capsys):
    """``--out`` on a read-only file system (a tmpfs mounted read-only: even root cannot write
    there), as the folder itself and as a folder to create in it: one line, exit 2, before
    computing (common practice)."""
    case, extra = case_for(command, write_case)
    with mounted_tmpfs(tmp_path / "ro", "ro,size=64k") as folder:
        for out in (folder, folder / "new"):
            code, lines, _ = cli([command, case, "--out", out, *extra], capsys)
            assert_refused(code, lines, "--out", out.name, "Read-only file system")


def test_unwritable_folder_injected(tmp_path, write_case, capsys, monkeypatch):
    """The same refusal where no mount is possible: creating any file in ``--out`` fails with
    EACCES (injected into ``os.open`` for that folder only), one line, exit 2, before computing
    (common practice)."""
    case, _ = case_for("run", write_case)
    locked = tmp_path / "locked"
    locked.mkdir()
    real_open = os.open

    def refusing(path, flags, *args, **kwargs):
        if Path(os.fsdecode(path)).parent == locked and flags & os.O_CREAT:
            raise PermissionError(13, "Permission denied", os.fsdecode(path))
        return real_open(path, flags, *args, **kwargs)

    monkeypatch.setattr(os, "open", refusing)
    code, lines, _ = cli(["run", case, "--out", locked], capsys)
    assert_refused(code, lines, "--out", "a folder this process can write into", "Permission denied")
    assert list(locked.iterdir()) == []


@pytest.mark.parametrize("command", sorted(COMMANDS))
@pytest.mark.parametrize("name, needles", [
    ("a" * 300, ["output.name", "a shorter file name", "allows"]),
    ("a\\u0000b", ["output.name", "without NUL"]),
    ("a\\u0007b", ["output.name", "without NUL or other control characters"]),
])
def test_names_the_file_system_refuses(command, name, needles, tmp_path, write_case, capsys):
    """An output name of 300 characters, with a NUL or a control character (``output.name``; the case file's stem
    otherwise): one line naming the key, exit 2, before computing, nothing written (common
    practice)."""
    case, extra = case_for(command, write_case)
    out = tmp_path / "out"
    code, lines, _ = cli([command, case, "--out", out, "--set", f'output.name="{name}"', *extra], capsys)
    assert_refused(code, lines, *needles)
    assert not out.exists() or list(out.rglob("*")) == []


def test_planted_symlink_is_not_followed(tmp_path, write_case, capsys):
    """Symlinks planted at the temporary names of earlier versions (``OUT/NAME.nc.part``,
    ``OUT/NAME.part.png``) and at ``NAME.png.part``, pointing outside ``--out``: the outside file is
    unchanged, the outputs are complete regular files and the netCDF file holds the printed growth
    rate (common practice)."""
    import netCDF4

    case = write_case(ABC)
    out = tmp_path / "out"
    out.mkdir()
    outside = tmp_path / "outside.txt"
    outside.write_text("not yours", encoding="utf-8")
    for name in ("abc-first-window.nc.part", "abc-first-window.part.png", "abc-first-window.png.part"):
        (out / name).symlink_to(outside)
    code, lines, stdout = cli(["run", case, "--out", out, "--json", "--quiet", *SHORT], capsys)
    assert code == 0, lines
    assert outside.read_text(encoding="utf-8") == "not yours"
    summary = json.loads(stdout)
    nc, png = out / "abc-first-window.nc", out / "abc-first-window.png"
    assert summary["output"] == str(nc)
    for path in (nc, png):
        assert path.is_file() and not path.is_symlink()
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    with netCDF4.Dataset(nc) as ds:
        assert float(ds.getncattr("result_time")) == summary["time"]
        assert ds["time"].size > 0
    assert sorted(p.name for p in out.iterdir() if not p.is_symlink()) == [nc.name, png.name]


def test_atomic_dataset_removes_its_temporary(tmp_path):
    """``atomic_dataset``: an exception in the block leaves neither the target nor a temporary and
    is raised unchanged; a netCDF error on close becomes an OSError naming the target; an existing
    target is kept until a complete file replaces it (common practice)."""
    import numpy as np

    import kindyn.output.netcdf as netcdf

    target = tmp_path / "data.nc"
    with pytest.raises(KeyError):
        with netcdf.atomic_dataset(target) as ds:
            ds.createDimension("a", 3)
            raise KeyError("boom")
    assert list(tmp_path.iterdir()) == []
    with netcdf.atomic_dataset(target) as ds:
        ds.createDimension("a", 3)
        ds.createVariable("v", "f8", ("a",))[...] = np.arange(3.0)
    before = target.read_bytes()
    with pytest.raises(OSError) as caught:
        with failing_close(netcdf, target.name):
            with netcdf.atomic_dataset(target) as ds:
                ds.createDimension("b", 2)
    assert caught.value.filename == str(target) and "HDF error" in str(caught.value)
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["data.nc"]


@contextlib.contextmanager
def failing_close(netcdf_module, name: str):
    """netCDF4 whose ``close`` of a dataset written for ``name`` fails as on a full disk
    ("NetCDF: HDF error", the error netCDF-C gives when HDF5 cannot flush)."""
    real = netcdf_module.netCDF4

    class Dataset:
        def __init__(self, path, *args, **kwargs):
            self._ds = real.Dataset(path, *args, **kwargs)
            self._fail = Path(path).name.startswith(name + ".")

        def __getattr__(self, attribute):
            return getattr(self._ds, attribute)

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.close()

        def close(self):
            self._ds.close()
            if self._fail:
                raise RuntimeError("NetCDF: HDF error")

    netcdf_module.netCDF4 = types.SimpleNamespace(Dataset=Dataset)
    try:
        yield
    finally:
        netcdf_module.netCDF4 = real


def assert_kept(code, lines, stdout, out: Path, needle: str):
    failures = [line for line in lines if ": failure: " in line]
    assert code == 1, lines
    assert len(failures) == 1 and needle in failures[0] and "the results are on stdout" in failures[0], lines
    assert not any("Traceback" in line or "internal error" in line for line in lines), lines
    kept = json.loads(stdout.strip().splitlines()[-1])
    assert "growth_rate" in kept and kept["Rm"] == 12.0 and kept["output_error"].startswith(str(out))
    assert leftovers(out) == []


def test_write_failure_injected_keeps_the_result(tmp_path, write_case, capsys, monkeypatch):
    """The final netCDF write of ``kindyn run`` fails on close (an injected "HDF error", as on a
    full disk): one failure line naming the file, exit 1, no temporary left, no partial file under
    the final name, and the results on stdout as one JSON object (common practice)."""
    import kindyn.output.netcdf as netcdf

    case = write_case(ABC)
    out = tmp_path / "out"
    with failing_close(netcdf, "abc-first-window.nc"):
        code, lines, stdout = cli(["run", case, "--out", out, "--quiet", *SHORT], capsys)
    assert_kept(code, lines, stdout, out, str(out / "abc-first-window.nc"))
    assert not (out / "abc-first-window.nc").exists()


def test_disk_full_keeps_the_result(tmp_path, write_case, capsys):
    """``--out`` on a 64 kB tmpfs: the folder and names pass the checks, the run computes, and the
    write of its 80 kB file fails for lack of space: one failure line, exit 1, no temporary left and
    the results on stdout as one JSON object (common practice)."""
    case = write_case(ABC)
    with mounted_tmpfs(tmp_path / "full", "size=64k") as out:
        code, lines, stdout = cli(["run", case, "--out", out, "--quiet", *SHORT], capsys)
        assert_kept(code, lines, stdout, out, "no space left")
        assert [p.name for p in out.iterdir()] == []
