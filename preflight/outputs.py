"""Where reports go: every output path checked before the analysis, all written or none.

``plan_outputs`` runs before any computation and refuses, with one line, an
output that would overwrite an input (also through a relative path, a
symbolic link or a hard link), two outputs naming the same file, an empty
path, a folder, a folder that does not exist or cannot be written, and a
special file that cannot be replaced safely.  ``write_outputs`` then writes
regular files through a temporary file in the same folder (fsync, then
rename), so each one appears whole; every temporary is written before the
first rename, and a failure removes them all.  A character device or FIFO
(``/dev/null``, ``/dev/stdout``, a named pipe) is written as a stream, never
replaced; ``-`` is standard output.
"""

from __future__ import annotations

import os
import stat
import sys
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass

from preflight.errors import InputError

TEMP_PREFIX = ".preflight-"


@dataclass(frozen=True)
class Target:
    """One checked output."""

    option: str
    """The option that named it, e.g. ``--json``."""
    path: str
    """As the user gave it."""
    kind: str
    """``"file"`` (replaced atomically), ``"stream"`` (a device or FIFO) or ``"stdout"``."""
    real: str
    """The file actually written: symbolic links resolved."""


def _identity(path: str) -> tuple[int, int] | None:
    try:
        info = os.stat(path)
    except OSError:
        return None
    return info.st_dev, info.st_ino


def _stdin_identity() -> tuple[int, int] | None:
    """The file behind standard input when it is a redirected regular file."""
    try:
        info = os.fstat(sys.stdin.fileno())
    except (AttributeError, OSError, ValueError):
        return None
    return (info.st_dev, info.st_ino) if stat.S_ISREG(info.st_mode) else None


def _stdout_identity() -> tuple[int, int] | None:
    try:
        info = os.fstat(sys.stdout.fileno())
    except (AttributeError, OSError, ValueError):
        return None
    return info.st_dev, info.st_ino


def _check_folder_writable(folder: str, option: str, path: str) -> None:
    if not os.path.exists(folder):
        raise InputError(f"cannot write {option} {path}: folder {folder} does not exist")
    if not os.path.isdir(folder):
        raise InputError(f"cannot write {option} {path}: {folder} is not a folder")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"cannot write {option} {path}: folder {folder} is not writable")
    # access() does not see every obstacle (read-only mounts under some
    # setups, ACLs, a full disk's inode table): create and remove a file.
    try:
        handle, probe = tempfile.mkstemp(prefix=TEMP_PREFIX, suffix=".probe", dir=folder)
    except OSError as exc:
        raise InputError(f"cannot write {option} {path}: {exc.strerror or exc} in {folder}") from None
    os.close(handle)
    try:
        os.unlink(probe)
    except OSError:
        pass


def plan_outputs(requested: Sequence[tuple[str, str | None]], inputs: Sequence[str | None] = ()) -> list[Target]:
    """Check every requested output ``(option, path)`` against the files read in ``inputs``.

    ``None`` means the option was not given; ``"-"`` in ``inputs`` stands for
    standard input.  Raises :class:`InputError` on the first problem.
    """
    read: dict[tuple[int, int], str] = {}
    for source in inputs:
        if source is None:
            continue
        identity = _stdin_identity() if source == "-" else _identity(str(source))
        if identity is not None:
            read[identity] = "standard input" if source == "-" else str(source)
    targets: list[Target] = []
    claimed: dict[object, str] = {}
    for option, path in requested:
        if path is None:
            continue
        path = str(path)
        if not path.strip():
            raise InputError(f"{option} needs a file name, got an empty one")
        if path == "-" or (_identity(path) is not None and _identity(path) == _stdout_identity()):
            if "-" in claimed:
                raise InputError(f"only one report can go to standard output; {claimed['-']} and {option} "
                                 "both ask for it")
            claimed["-"] = option
            targets.append(Target(option, path, "stdout", "-"))
            continue
        real = os.path.realpath(path)
        if os.path.isdir(real):
            raise InputError(f"{option} {path} is a folder; give a file name")
        identity = _identity(path)
        if identity is not None and identity in read:
            raise InputError(f"{option} {path} is also the input ({read[identity]}); refusing to overwrite it")
        if identity is not None:
            mode = os.stat(path).st_mode
            # /dev/stdout and /dev/fd/N name whatever the descriptor is: written
            # through as a stream, never replaced, even when it is a regular file.
            if stat.S_ISCHR(mode) or stat.S_ISFIFO(mode) or os.path.abspath(path).startswith("/dev/"):
                if not os.access(path, os.W_OK):
                    raise InputError(f"cannot write {option} {path}: permission denied")
                if not (stat.S_ISCHR(mode) or stat.S_ISFIFO(mode) or stat.S_ISREG(mode)):
                    raise InputError(f"{option} {path} cannot be written as a stream; give a file name")
                targets.append(Target(option, path, "stream", path))
                continue
            if not stat.S_ISREG(mode):
                raise InputError(f"{option} {path} is neither a regular file nor a device; refusing to replace it")
            if not os.access(real, os.W_OK):
                raise InputError(f"cannot write {option} {path}: the file is read-only")
        key: object = identity if identity is not None else real
        if key in claimed:
            raise InputError(f"{claimed[key]} and {option} name the same file {path}")
        claimed[key] = option
        _check_folder_writable(os.path.dirname(real), option, path)
        targets.append(Target(option, path, "file", real))
    return targets


def _file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _fsync_folder(folder: str) -> None:
    try:
        handle = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(handle)
    except OSError:
        pass
    finally:
        os.close(handle)


def _remove(paths) -> None:
    for tmp in paths:
        try:
            os.unlink(tmp)
        except OSError:
            pass


def write_outputs(items: Sequence[tuple[Target, str]]) -> None:
    """Write every ``(target, text)``: all of them or, on any failure, no new file.

    Regular files first go to temporaries beside their targets; then the
    streams are written; then every temporary is renamed over its target.
    """
    mode = _file_mode()
    staged: list[tuple[str, Target]] = []
    created: list[str] = []
    current: Target | None = None
    try:
        for target, text in items:
            if target.kind != "file":
                continue
            current = target
            handle, tmp = tempfile.mkstemp(prefix=TEMP_PREFIX, suffix=".tmp", dir=os.path.dirname(target.real))
            staged.append((tmp, target))
            with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as out:
                out.write(text)
                out.flush()
                os.fsync(out.fileno())
            os.chmod(tmp, mode)
        for target, text in items:
            current = target
            if target.kind == "stdout":
                sys.stdout.write(text)
                sys.stdout.flush()
            elif target.kind == "stream":
                with open(target.real, "w", encoding="utf-8", newline="\n") as out:
                    out.write(text)
        while staged:
            tmp, target = staged[0]
            current = target
            existed = os.path.lexists(target.real)
            os.replace(tmp, target.real)
            staged.pop(0)
            if not existed:
                created.append(target.real)
        for folder in {os.path.dirname(t.real) for t, _ in items if t.kind == "file"}:
            _fsync_folder(folder)
    except BaseException as exc:
        _remove(tmp for tmp, _ in staged)
        _remove(created)
        if isinstance(exc, OSError):
            where = f"{current.option} {current.path}" if current is not None else "the reports"
            raise InputError(f"cannot write {where}: {exc.strerror or exc}; no report was written") from None
        raise
