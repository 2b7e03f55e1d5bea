"""Where output goes and how it gets there: the output folder and file names checked before any
computation (:func:`check_output`), and files written whole or not at all (:func:`atomic_path`,
:func:`atomic_stream`).

Before computing, every command that writes calls :func:`check_output` with its folder and the
names it will write: the folder must be a folder (not a file, not under a file) that can be
created and written (a probe file is created there and removed: permissions, read-only file
systems), and every name must be one plain file name that this file system accepts (no NUL, no
``/``, not too long: the longest temporary of the name is created and removed). A failure is a
:class:`~kindyn.errors.CaseError` (one line naming the folder or name and what was expected;
exit code 2) before anything is computed.

Writing: a temporary is created *exclusively* in the target's folder under a new random name
(``NAME.<random>.part``, opened with ``O_CREAT | O_EXCL | O_NOFOLLOW``), so
nothing already there (a planted symlink at ``NAME.part``, another process's temporary) is ever
opened or followed; after writing, the temporary must still be the regular file that was created
(same device and inode, not a link) before it is renamed over the target. On every failure the
temporary is removed and an :class:`OutputWriteFailure` (an OSError) naming the target is raised
(a library's write error, such as netCDF's "HDF error" on a full disk, becomes one:
:func:`write_failure`); commands
turn it into :class:`~kindyn.errors.WriteError` (one line, exit code 1) and keep their results
(:func:`kindyn.commands.common.results_kept`).
"""

from __future__ import annotations

import contextlib
import errno
import os
import secrets
import shutil
import stat
from pathlib import Path

from kindyn.errors import CaseError

TEMPORARY_SUFFIX = ".part"
_RANDOM = "x" * 8  # the random part of a temporary name has 8 characters (secrets.token_hex(4))


def temporary_name(name: str) -> str:
    """The longest temporary name :func:`atomic_path` uses for ``name`` (for the length check)."""
    return f"{name}.{_RANDOM}{TEMPORARY_SUFFIX}"


def check_output(folder, names=(), file: str = "", key: str = "output.name") -> Path:
    """Create ``folder`` if needed and check that it is a writable folder and that every one of
    ``names`` (plain file names, or ``"sub/name"`` inside a subfolder that is checked the same way)
    can be written there; return the folder. ``file``/``key`` say where a refused name came from
    (the case file and ``output.name``). Raises :class:`~kindyn.errors.CaseError` (exit code 2)."""
    text = str(folder)
    if "\0" in text:
        raise CaseError("--out", "--out", text, "a folder name without NUL characters")
    if not text.strip():
        raise CaseError("--out", "--out", text, "a folder name (not empty; \".\" for this folder)")
    folder = Path(text)
    _make_folder(folder, "--out")
    _probe_folder(folder, "--out")
    subfolders = set()
    for name in names:
        parts = str(name).split("/")
        *subs, leaf = parts
        place = folder
        for sub in subs:
            _check_name(sub, place, file, key)
            place = place / sub
            if place not in subfolders:
                _make_folder(place, "--out")
                _probe_folder(place, "--out")
                subfolders.add(place)
        _check_name(leaf, place, file, key)
        target = place / leaf
        if target.is_dir() and not target.is_symlink():
            raise CaseError(file, key, leaf, f"a name that is free to write in {_shown(place)}: "
                            f"{_shown(target)} is a folder")
        _probe_name(leaf, place, file, key)
    return folder


def _shown(path) -> str:
    return os.fspath(path)


def _make_folder(folder: Path, key: str) -> None:
    if folder.is_dir():
        return
    if folder.exists() or folder.is_symlink():
        raise CaseError("", key, _shown(folder), "a folder to write into; it is an existing file")
    for parent in folder.parents:  # the first that exists must be a folder
        if parent.exists():
            if not parent.is_dir():
                raise CaseError("", key, _shown(folder), f"a folder to write into; {_shown(parent)} is a file, "
                                "not a folder")
            break
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise CaseError("", key, _shown(folder), f"a folder that can be created ({_reason(exc)})") from None


def _probe_folder(folder: Path, key: str) -> None:
    try:
        _create_and_remove(folder / ".kindyn-probe")
    except OSError as exc:
        raise CaseError("", key, _shown(folder), f"a folder this process can write into ({_reason(exc)})") from None


def _create_and_remove(path: Path) -> None:
    """Create the longest temporary of ``path`` and remove it again (raises what creating raises)."""
    fd, probe = _create_temporary(path)
    os.close(fd)
    with contextlib.suppress(OSError):
        os.unlink(probe)


def _check_name(name: str, folder: Path, file: str, key: str) -> None:
    expected = "a plain file name"
    if not name or name in (".", ".."):
        raise CaseError(file, key, name, f"{expected} (not empty, not . or ..)")
    if "\0" in name:
        raise CaseError(file, key, name, f"{expected} without NUL characters")
    if os.sep in name or (os.altsep and os.altsep in name):
        raise CaseError(file, key, name, f"{expected} without {os.sep} (files go into --out)")
    try:
        limit = os.pathconf(folder, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):
        limit = 255
    try:
        size = len(os.fsencode(temporary_name(name)))
    except UnicodeError:
        raise CaseError(file, key, name, f"{expected} this file system can encode") from None
    if size > limit:
        raise CaseError(file, key, name, f"a shorter file name: with its temporary suffix it has {size} bytes, "
                        f"the file system of {_shown(folder)} allows {limit}")


def _probe_name(name: str, folder: Path, file: str, key: str) -> None:
    try:
        _create_and_remove(folder / name)  # the longest name that will be written
    except (OSError, ValueError) as exc:
        raise CaseError(file, key, name, f"a file name the file system of {_shown(folder)} accepts "
                        f"({_reason(exc)})") from None


def _reason(exc: BaseException) -> str:
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    return str(exc) or type(exc).__name__


class OutputWriteFailure(OSError):
    """A file could not be written (its temporary is already removed); ``filename`` is the file."""


def write_failure(path, exc: BaseException) -> OSError:
    """An :class:`OSError` naming ``path`` for a failed write (``exc``: the OSError itself, or a
    library's error such as netCDF's RuntimeError), with the free space of the folder when it is
    short."""
    if isinstance(exc, OutputWriteFailure):
        return exc
    path = Path(path)
    code = getattr(exc, "errno", None)
    reason = _reason(exc)
    with contextlib.suppress(OSError):
        free = shutil.disk_usage(path.parent if path.parent.exists() else ".").free
        if code == errno.ENOSPC or free < 1024 * 1024:
            reason = f"no space left on the device? ({free} bytes free in {_shown(path.parent)}; {reason})"
            code = code or errno.ENOSPC
    return OutputWriteFailure(code or errno.EIO, reason, os.fspath(path))


_EXCLUSIVE = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_CLOEXEC", 0)


def _create_temporary(path: Path) -> tuple[int, str]:
    """A new file ``NAME.<8 random characters>.part`` beside ``path``, created exclusively (an
    existing name, a link included, is never opened: another name is drawn) with the usual
    permissions (0o666 less the umask, as for any file the process creates)."""
    for _ in range(100):
        partial = os.path.join(path.parent, f"{path.name}.{secrets.token_hex(4)}{TEMPORARY_SUFFIX}")
        try:
            return os.open(partial, _EXCLUSIVE, 0o666), partial
        except FileExistsError:
            continue
    raise FileExistsError(errno.EEXIST, "no free temporary name", os.fspath(path))


def _same_file(path: str, created: os.stat_result) -> bool:
    try:
        now = os.lstat(path)
    except OSError:
        return False
    return stat.S_ISREG(now.st_mode) and (now.st_dev, now.st_ino) == (created.st_dev, created.st_ino)


@contextlib.contextmanager
def atomic_path(path):
    """Yield the name of a new, empty temporary file beside ``path`` (created exclusively, see the
    module docstring) for a writer that opens files by name (netCDF4); rename it to ``path`` when
    the block succeeds and the temporary is still the file that was created. On any failure the
    temporary is removed; an OSError is raised again as an OSError naming ``path``
    (:func:`write_failure`); anything else (a bug, an interrupt) is raised unchanged."""
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, partial = _create_temporary(path)
    except OSError as exc:
        raise write_failure(path, exc) from None
    try:
        created = os.fstat(fd)
    finally:
        os.close(fd)
    try:
        yield partial
        if not _same_file(partial, created):
            raise OSError(errno.EEXIST, "the temporary file was replaced while it was written (by a link or "
                          "another file); nothing was written", partial)
        os.replace(partial, path)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            if os.path.lexists(partial):
                os.unlink(partial)  # unlinks a link itself, never its target
        if isinstance(exc, OSError):
            raise write_failure(path, exc) from None
        raise


@contextlib.contextmanager
def atomic_stream(path, mode: str = "wb", **options):
    """Yield an open file object on a new temporary beside ``path`` (for writers that take a file
    object: matplotlib's ``savefig``, JSON); renamed to ``path`` when the block succeeds, removed on
    any failure (:func:`atomic_path`)."""
    with atomic_path(path) as partial:
        # the temporary exists and is ours: opening it without following links, never creating
        fd = os.open(partial, os.O_WRONLY | getattr(os, "O_NOFOLLOW", 0))
        with os.fdopen(fd, mode, **options) as stream:
            yield stream
            stream.flush()
            os.fsync(stream.fileno())


def remove_temporaries(path) -> None:
    """Remove the temporaries that a killed writer of ``path`` left behind (``NAME.*.part`` and the
    older ``NAME.part``), only regular files and links themselves (never what a link points to)."""
    path = Path(path)
    with contextlib.suppress(OSError):
        for entry in os.scandir(path.parent):
            name = entry.name
            if name == path.name + TEMPORARY_SUFFIX or (
                    name.startswith(path.name + ".") and name.endswith(TEMPORARY_SUFFIX)
                    and len(name) == len(temporary_name(path.name))):
                if entry.is_file(follow_symlinks=False) or entry.is_symlink():
                    with contextlib.suppress(OSError):
                        os.unlink(entry.path)
