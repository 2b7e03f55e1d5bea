"""Checkpoints that prove themselves (issue 13, class 6) and checkpoint writes that may fail (class 5).

A checkpoint left by a killed run (8^3 ABC flow, a checkpoint at every sample) is damaged in the
ways the fault campaign found: truncated, 5-50 bytes flipped in the field data, 500 random bytes,
a checkpoint of another case, short series, a wrong-shaped field, a directory at its path. ``kindyn
run`` must say in one line on stderr that it discards the checkpoint and why ("checkpoint PATH
discarded: REASON; starting afresh"), print no traceback, and give exactly (``==``) the result of a
fresh run. A checkpoint write that fails (disk full, injected) is said once and the run goes on.

Every fault here is `common practice` for a storage format that must detect damage: a checksum
over the data, verified on reading (sha256; FIPS 180-4), refuses what it cannot prove.
"""

from __future__ import annotations

import contextlib
import io
import json
import shutil
import textwrap
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from kindyn.case import load_case
from kindyn.cli import main
from kindyn.output.checkpoint import Checkpoint
from kindyn.run import Record, run_growth
from tests.small_cases import SEEDED_ABC

CASE = SEEDED_ABC + textwrap.dedent("""\
    [run]
    tolerance = 1e-3
    checkpoint_seconds = 1e-9
    [numerics]
    planning = "estimate"
    [output]
    figure = false
    field = false
    """)
KEYS = ("growth_rate", "growth_rate_error", "frequency", "time", "steps", "stop_reason", "converged")


class _Killed(Exception):
    pass


class _Stopping(Checkpoint):
    """A run killed right after its ``stop_after``-th checkpoint."""

    def __init__(self, path, stop_after):
        super().__init__(path)
        self.stop_after, self.saves = stop_after, 0

    def save(self, case, state):
        super().save(case, state)
        self.saves += 1
        if self.saves >= self.stop_after:
            raise _Killed()


def run_cli(case_path: Path, out: Path, *extra):
    """``kindyn run CASE --out OUT --json --quiet``: (exit code, JSON result, stderr lines)."""
    stdout, stderr = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
        code = main(["run", str(case_path), "--out", str(out), "--json", "--quiet", *extra])
    return code, (json.loads(stdout.getvalue()) if code == 0 else None), stderr.getvalue().splitlines()


@pytest.fixture(scope="module")
def setting(tmp_path_factory):
    """The case file, the result of a fresh run, and a good checkpoint of it (killed after 40 samples)."""
    folder = tmp_path_factory.mktemp("faults")
    case_path = folder / "c.toml"
    case_path.write_text(CASE, encoding="utf-8")
    code, fresh, _ = run_cli(case_path, folder / "fresh")
    assert code == 0 and not fresh["resumed"]
    good = folder / "good.checkpoint.nc"
    with pytest.raises(_Killed):
        run_growth(load_case(case_path), checkpoint=_Stopping(good, 40))
    return case_path, fresh, good


def _out_with(tmp_path, good) -> tuple[Path, Path]:
    out = tmp_path / "out"
    out.mkdir()
    target = out / "c.checkpoint.nc"
    shutil.copy(good, target)
    return out, target


def _assert_discarded_and_fresh(setting, out, why: str):
    case_path, fresh, _ = setting
    code, result, lines = run_cli(case_path, out)
    text = "\n".join(lines)
    assert code == 0, text
    assert "Traceback" not in text
    said = [line for line in lines if "checkpoint" in line]
    assert len(said) == 1, text
    assert said[0].startswith("kindyn run: ") and f"checkpoint {out / 'c.checkpoint.nc'} discarded: " in said[0]
    assert said[0].endswith("; starting afresh") and why in said[0], said[0]
    assert not result["resumed"]
    assert {k: result[k] for k in KEYS} == {k: fresh[k] for k in KEYS}
    return said[0]


def test_a_good_checkpoint_resumes_to_the_same_result(setting, tmp_path):
    """`common practice`: the control of the fault tests (an undamaged checkpoint resumes, bit-identically)."""
    case_path, fresh, good = setting
    out, _ = _out_with(tmp_path, good)
    code, result, lines = run_cli(case_path, out)
    assert code == 0 and result["resumed"]
    assert not any("discarded" in line for line in lines)
    assert {k: result[k] for k in KEYS} == {k: fresh[k] for k in KEYS}


def test_truncated_checkpoint_is_discarded(setting, tmp_path):
    """`common practice`: a file cut short (a kill or a full disk while writing) is refused."""
    out, target = _out_with(tmp_path, setting[2])
    data = target.read_bytes()
    target.write_bytes(data[: len(data) // 2])
    _assert_discarded_and_fresh(setting, out, "unreadable")


def _field_region(path: Path) -> tuple[int, int]:
    """Byte range of the stored field coefficients (contiguous float64 data) in the file."""
    with netCDF4.Dataset(path) as ds:
        real = np.asarray(ds["field_real"][...], "<f8")
    data = path.read_bytes()
    start = data.find(real.tobytes()[:256])
    assert start > 0
    return start, start + real.nbytes


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_bytes_flipped_in_the_field_data_are_detected(setting, tmp_path, seed):
    """`common practice`: 5-50 random bytes changed in the data (seeded) fail the checksum; before
    checksums such a file resumed silently from corrupt data."""
    out, target = _out_with(tmp_path, setting[2])
    start, end = _field_region(target)
    rng = np.random.default_rng(seed)
    data = bytearray(target.read_bytes())
    for position in rng.choice(np.arange(start, end), int(rng.integers(5, 51)), replace=False):
        data[position] ^= int(rng.integers(1, 256))
    target.write_bytes(bytes(data))
    _assert_discarded_and_fresh(setting, out, "checksum")


@pytest.mark.parametrize("where", ["scattered", "whole file"])
def test_500_random_bytes_are_discarded(setting, tmp_path, where):
    """`common practice`: 500 random bytes (seeded) anywhere in the file, or a file of 500 random bytes."""
    out, target = _out_with(tmp_path, setting[2])
    rng = np.random.default_rng(500)
    if where == "whole file":
        target.write_bytes(rng.integers(0, 256, 500, dtype=np.uint8).tobytes())
    else:
        data = bytearray(target.read_bytes())
        for position in rng.choice(len(data), 500, replace=False):
            data[position] ^= int(rng.integers(1, 256))
        target.write_bytes(bytes(data))
    _assert_discarded_and_fresh(setting, out, "")


def test_checkpoint_of_another_case_is_reported(setting, tmp_path):
    """`common practice`: a checkpoint of another case (here another Rm) is not used, and the user is told."""
    case_path, _, _ = setting
    other = tmp_path / "other.toml"
    other.write_text(CASE.replace("Rm = 3.0", "Rm = 3.5"), encoding="utf-8")
    out = tmp_path / "out"
    with pytest.raises(_Killed):
        run_growth(load_case(other), checkpoint=_Stopping(out / "c.checkpoint.nc", 10))
    _assert_discarded_and_fresh(setting, out, "another case")


def _saved_state(path: Path, case_path: Path) -> dict:
    saved = Checkpoint(path).load(load_case(case_path))
    assert saved is not None
    return saved


def _state_for_save(saved: dict) -> dict:
    return {"field_hat": saved["field_hat"], "time": saved["time"], "step": saved["step"],
            "log_amplitude": saved["log_amplitude"], "record": Record(**saved["record"])}


def test_short_series_are_discarded(setting, tmp_path):
    """`common practice`: a checkpoint whose checksum holds but whose series are shorter than its
    sample times (a writer's bug) is refused instead of ending in a traceback."""
    case_path, _, good = setting
    out = tmp_path / "out"
    state = _state_for_save(_saved_state(good, case_path))
    state["record"].log_energy = state["record"].log_energy[:-3]
    assert Checkpoint(out / "c.checkpoint.nc").save(load_case(case_path), state)
    _assert_discarded_and_fresh(setting, out, "log_energy")


def test_wrong_shaped_field_is_discarded(setting, tmp_path):
    """`common practice`: a field of another grid's shape (checksum intact) is refused."""
    case_path, _, good = setting
    out = tmp_path / "out"
    state = _state_for_save(_saved_state(good, case_path))
    state["field_hat"] = np.zeros((3, 6, 6, 4), complex)
    assert Checkpoint(out / "c.checkpoint.nc").save(load_case(case_path), state)
    _assert_discarded_and_fresh(setting, out, "shape")


def test_directory_at_the_checkpoint_path(setting, tmp_path):
    """`common practice`: a directory where the checkpoint belongs gives one clear line and is left
    alone, never IsADirectoryError: ``kindyn run`` refuses it before computing (its output-folder
    check, exit 2) or discards it; the library run discards it, says so once and goes on without
    checkpoints, to the result of a fresh run."""
    case_path, fresh, _ = setting
    out = tmp_path / "out"
    (out / "c.checkpoint.nc").mkdir(parents=True)
    (out / "c.checkpoint.nc" / "keep.txt").write_text("mine")
    code, result, lines = run_cli(case_path, out)
    text = "\n".join(lines)
    assert "Traceback" not in text and "IsADirectoryError" not in text
    if code == 2:
        assert len(lines) == 1 and "c.checkpoint.nc" in lines[0] and "folder" in lines[0], text
    else:
        assert code == 0
        said = [line for line in lines if "checkpoint" in line]
        assert len(said) == 1 and "discarded: it is a directory" in said[0], text
        assert {k: result[k] for k in KEYS} == {k: fresh[k] for k in KEYS}
    notes = []
    outcome = run_growth(load_case(case_path), checkpoint=Checkpoint(out / "c.checkpoint.nc", notify=notes.append))
    assert len(notes) == 1 and "discarded: it is a directory" in notes[0] and notes[0].endswith("starting afresh")
    assert outcome.checkpoint_notes == tuple(notes) and not outcome.resumed
    assert (outcome.steps, outcome.time, outcome.estimate.growth_rate) == (fresh["steps"], fresh["time"],
                                                                             fresh["growth_rate"])
    Checkpoint(out / "c.checkpoint.nc").remove()
    assert (out / "c.checkpoint.nc" / "keep.txt").read_text() == "mine"
    assert not (out / "c.checkpoint.nc.part").exists()


def test_failed_checkpoint_writes_warn_once_and_the_run_goes_on(setting, tmp_path, monkeypatch):
    """`common practice`: a checkpoint is insurance; a full disk (injected ENOSPC) while writing it
    is said in one line and the run finishes with the result of an undisturbed run."""
    import errno

    import kindyn.output.checkpoint as module

    case_path, fresh, _ = setting

    def full_disk(path):
        Path(str(path) + ".part").write_bytes(b"\0" * 100)  # a half-written temporary
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(module, "atomic_dataset", full_disk)
    out = tmp_path / "out"
    code, result, lines = run_cli(case_path, out)
    text = "\n".join(lines)
    assert code == 0 and "Traceback" not in text
    said = [line for line in lines if "checkpoint" in line]
    assert len(said) == 1 and "not written" in said[0] and "No space left" in said[0], text
    assert said[0].startswith("kindyn run: ")
    assert {k: result[k] for k in KEYS} == {k: fresh[k] for k in KEYS}
    assert sorted(p.name for p in out.iterdir()) == ["c.nc"]


def test_a_finished_run_removes_the_temporaries_a_killed_checkpoint_write_left(tmp_path):
    """A run killed while writing a checkpoint leaves ``NAME.checkpoint.nc.<hex>.part``; the run
    that finishes removes it with its checkpoint, and never what a planted link points to
    (`common practice`)."""
    case_file = tmp_path / "case.toml"
    case_file.write_text(CASE.replace("checkpoint_seconds = 1e-9", "checkpoint_seconds = 1e6"))
    out = tmp_path / "out"
    out.mkdir()
    left = out / "case.checkpoint.nc.0123abcd.part"
    left.write_bytes(b"half a checkpoint")
    outside = tmp_path / "outside.txt"
    outside.write_text("keep me")
    (out / "case.checkpoint.nc.4567cdef.part").symlink_to(outside)
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(["run", str(case_file), "--out", str(out), "--quiet"]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["case.nc"]
    assert outside.read_text() == "keep me"
