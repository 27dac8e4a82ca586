"""Writing outputs safely: checked before any computing (:func:`check_output`),
written to a temporary file beside the output and published under the final
name when finished (:func:`publish`, :func:`atomic_write`).

Never over an input, a symlink or a special file; exclusively when the name is
new (two runs racing for one name give one success and one clear error);
keeping the permissions of a file it replaces; removing its temporary file on
errors and SIGTERM. Temporary files left by a killed run are swept on the next
run (:func:`sweep_stale_temps`).

References
----------
POSIX ``rename(2)`` (atomic replacement within one file system) and ``link(2)``
/ ``O_EXCL`` (exclusive creation); common practice for atomic file output.
"""
from __future__ import annotations

import itertools
import os
import re
import shutil
import signal
import stat
import threading
from pathlib import Path

from ..core.errors import InputError
from .formats import (
    DELIMITED_FORMATS,
    STDOUT_FORMATS,
    file_kind,
    guess_format,
    is_stdout,
    sidecar_path,
)

__all__ = ["check_output", "check_path", "temp_path_for", "publish", "atomic_write", "sweep_stale_temps",
           "Terminated", "TEMP_TAG", "make_folder"]

#: Marker in the names of our temporary files: ``.<name>.specpar-<pid>-<n>.tmp``.
TEMP_TAG = "specpar"


#: Permission bits of a new output before the umask, as ``open(2)`` creates files
#: (POSIX; common practice).
NEW_FILE_BITS = 0o666
#: A temporary file is private (owner read/write) until it is published (common practice).
TEMP_FILE_BITS = 0o600
_TEMP_RE = re.compile(r"^\.(?P<name>.+)\." + TEMP_TAG + r"-(?P<pid>\d+)-\d+\.tmp$")


def _check_replaceable(path, st, overwrite, what) -> None:
    """An existing output may be replaced only when it is a regular file and overwriting is allowed."""
    if stat.S_ISLNK(st.st_mode):
        raise InputError(f"{what} {path} is a symbolic link; refusing to replace it (its target would "
                         "be left untouched); give the target's path or another name")
    if not stat.S_ISREG(st.st_mode):
        raise InputError(f"{what} {path} exists and is {file_kind(st.st_mode)}; refusing to replace it; "
                         "choose another name")
    if not overwrite:
        raise InputError(f"{what} {path} exists; choose another name or allow overwriting (--overwrite)")


def _check_folder(path: Path) -> Path:
    """The folder of ``path``, which must exist."""
    folder = path.parent
    if not folder.is_dir():
        raise InputError(f"output folder {folder} does not exist" if not folder.exists()
                         else f"output folder {folder} is not a folder")
    return folder


def _check_sidecar(path: Path, fmt: str, overwrite: bool) -> None:
    """The sidecar beside a CSV/text output may be replaced only as the output itself may."""
    try:
        side = os.lstat(sidecar_path(path))
    except FileNotFoundError:
        return
    if not stat.S_ISREG(side.st_mode):
        raise InputError(f"{sidecar_path(path)} (the metadata file written beside a {fmt} output) is "
                         f"{'a symbolic link' if stat.S_ISLNK(side.st_mode) else file_kind(side.st_mode)}; "
                         "refusing to replace it; choose another output name")
    if not overwrite:
        raise InputError(f"{sidecar_path(path)} (the metadata file written beside a {fmt} output) "
                         "exists; use --overwrite (Python: overwrite=True) to replace it with the output")


def check_output(path, fmt=None, *, inputs=(), overwrite=False, what="output") -> str:
    """Check an output path before any computing; returns the format name.

    Checks the format, that the folder exists and is writable, that the path is
    none of ``inputs`` (the table, calibration or locus files), and that an
    existing path is a regular file (not a symlink, FIFO, device or folder)
    that may be replaced (``overwrite``). ``"-"`` means standard output.

    Raises
    ------
    InputError
        One message naming the problem and how to fix it.
    """
    if is_stdout(path):
        fmt = guess_format("", fmt or "csv")
        if fmt not in STDOUT_FORMATS:
            raise InputError(f"{fmt} cannot be written to standard output; use csv, text or ecsv with -o -")
        return fmt
    path = Path(path)
    fmt = guess_format(path, fmt)
    folder = _check_folder(path)
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"output folder {folder} is not writable; choose another folder")
    for inp in inputs:
        if inp is None or is_stdout(inp):
            continue
        try:
            same = os.path.samefile(inp, path)
        except OSError:
            same = False
        if same or Path(os.path.abspath(inp)) == Path(os.path.abspath(path)):
            raise InputError(f"refusing to write the {what} over the input file {inp}; choose another "
                             "output name")
    if fmt in DELIMITED_FORMATS:  # the provenance sidecar is replaced too: only a regular file
        _check_sidecar(path, fmt, overwrite)
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return fmt
    _check_replaceable(path, st, overwrite, what)
    if not os.access(path, os.W_OK):
        raise InputError(f"{what} {path} exists and is read-only; refusing to replace it")
    return fmt


def check_path(path, inputs=(), overwrite=False, what="output") -> None:
    """:func:`check_output` without the format test (plots and other non-table files)."""
    path = Path(path)
    _check_folder(path)
    for inp in inputs:
        if inp is None:
            continue
        try:
            same = os.path.samefile(inp, path)
        except OSError:
            same = False
        if same:
            raise InputError(f"refusing to write the {what} over the input file {path}")
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        return
    _check_replaceable(path, st, overwrite, what)


_counter = itertools.count()


def temp_path_for(path) -> Path:
    """A fresh temporary name beside ``path`` (same folder, so renames are atomic)."""
    path = Path(path)
    return path.with_name(f".{path.name}.{TEMP_TAG}-{os.getpid()}-{next(_counter)}.tmp")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def sweep_stale_temps(path) -> list:
    """Remove our temporary files (and folders of pieces) for ``path`` left by
    runs that no longer exist.

    Only names of our own pattern (``.<name>.specpar-<pid>-<n>.tmp``) whose
    process is gone are removed; returns the paths removed.
    """
    path = Path(path)
    removed = []
    try:
        entries = list(os.scandir(path.parent))
    except OSError:
        return removed
    for e in entries:
        m = _TEMP_RE.match(e.name)
        if not m or m["name"] != path.name or int(m["pid"]) == os.getpid() or _pid_alive(int(m["pid"])):
            continue
        try:
            if e.is_file(follow_symlinks=False):
                os.remove(e.path)
                removed.append(Path(e.path))
            elif e.is_dir(follow_symlinks=False):
                shutil.rmtree(e.path)
                removed.append(Path(e.path))
        except OSError:
            pass
    return removed


def _new_file_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return NEW_FILE_BITS & ~umask


def publish(tmp, path, *, overwrite=False, what="output") -> None:
    """Put the finished file ``tmp`` under the name ``path``.

    A new name is created exclusively (hard link, else ``O_EXCL``), so of two
    runs racing for it one wins and the other gets a clear error. An existing
    regular file is replaced atomically only with ``overwrite`` and keeps its
    permission bits; symlinks and special files are never replaced. ``tmp`` is
    gone afterwards in every case.
    """
    tmp, path = Path(tmp), Path(path)
    try:
        try:
            st = os.lstat(path)
        except FileNotFoundError:
            st = None
        if st is None:
            os.chmod(tmp, _new_file_mode())
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise InputError(_raced(what, path)) from None
            except OSError:  # file systems without hard links
                try:
                    fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, _new_file_mode())
                except FileExistsError:
                    raise InputError(_raced(what, path)) from None
                os.close(fd)
                os.replace(tmp, path)
            return
        if stat.S_ISLNK(st.st_mode) or not stat.S_ISREG(st.st_mode):
            raise InputError(f"{what} {path} is {'a symbolic link' if stat.S_ISLNK(st.st_mode) else file_kind(st.st_mode)}; "
                             "refusing to replace it; choose another name")
        if not overwrite:
            raise InputError(_raced(what, path))
        os.chmod(tmp, stat.S_IMODE(st.st_mode))
        os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.remove(tmp)


def _raced(what, path) -> str:
    return (f"{what} {path} was created by another process while this one was computing; nothing "
            "was written; choose another name or use --overwrite")


class Terminated(BaseException):
    """Raised inside a write when SIGTERM arrives, so temporary files are removed."""


def _raise_terminated(signum, frame):
    raise Terminated(signum)


def atomic_write(path, writer, *, inputs=(), overwrite=False, what="output") -> None:
    """Create ``path`` through ``writer(temporary_path)`` and :func:`publish` it.

    The output is checked first (:func:`check_output`); stale temporary files
    of earlier killed runs are swept; the temporary file is removed if
    ``writer`` fails or SIGTERM arrives (the exit then reports termination).
    """
    path = Path(path)
    check_path(path, inputs, overwrite, what)
    sweep_stale_temps(path)
    tmp = temp_path_for(path)
    old = None
    main = threading.current_thread() is threading.main_thread()
    if main:
        old = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        try:
            fd = os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, TEMP_FILE_BITS)
            os.close(fd)
            writer(str(tmp))
        except OSError as exc:  # the file system refused: no space, quota, read-only, permissions
            raise InputError(f"cannot write {what} {path}: {exc.strerror or exc}") from None
        publish(tmp, path, overwrite=overwrite, what=what)
    finally:
        try:
            if os.path.lexists(tmp):
                os.remove(tmp)
        finally:
            if main:
                signal.signal(signal.SIGTERM, old if old is not None else signal.SIG_DFL)


def make_folder(path, *, parents=False, exist_ok=True, what="output folder") -> Path:
    """``Path(path).mkdir(...)``; a refusal of the file system becomes :class:`InputError`."""
    path = Path(path)
    try:
        path.mkdir(parents=parents, exist_ok=exist_ok)
    except OSError as exc:
        raise InputError(f"cannot create {what} {path}: {exc.strerror or exc}") from None
    return path
