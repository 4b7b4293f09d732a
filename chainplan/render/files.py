"""Writing output files all-or-nothing: every file goes to a temporary file in
its own folder first and is moved into place with ``os.replace`` only when all
of them were written, so a failure never leaves a half-written or partial set
of outputs behind.  Only regular files are replaced that way: ``-`` means
standard output, and an existing device or pipe (``/dev/stdout``, a FIFO) is
written to directly — replacing it would destroy it.  A symbolic link to a
regular file has its target replaced, not the link."""
from __future__ import annotations

import os
import stat
import sys
import tempfile

from ..errors import UsageError


def ensure_folder(folder: str) -> str:
    """Create ``folder`` if needed; a folder that cannot be made or written is a UsageError."""
    folder = folder or "."
    if os.path.exists(folder) and not os.path.isdir(folder):
        raise UsageError(f"cannot write to the folder '{folder}': it is a file, not a folder")
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"cannot write to the folder '{folder}': {exc.strerror or exc}") from None
    if not os.path.isdir(folder) or not os.access(folder, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write to the folder '{folder}': not a writable folder")
    return folder


def check_folder(folder: str) -> str:
    """Refuse, before any work is done, a folder that could not be created or written
    (nothing is created here: that waits until there is something to write)."""
    folder = folder or "."
    probe = os.path.abspath(folder)
    while not os.path.exists(probe):
        parent = os.path.dirname(probe)
        if parent == probe:
            break
        probe = parent
    if not os.path.isdir(probe):
        what = "it is a file, not a folder" if probe == os.path.abspath(folder) else f"'{probe}' is a file"
        raise UsageError(f"cannot write to the folder '{folder}': {what}")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write to the folder '{folder}': '{probe}' is not writable")
    return folder


def write_atomic(files: dict[str, bytes | str]) -> list[str]:
    """Write every ``path -> content`` (text is UTF-8) or none of them; returns the paths."""
    staged: list[tuple[str, str]] = []
    streams: list[tuple[str, bytes]] = []
    path = ""
    try:
        for path, content in files.items():
            data = content.encode("utf-8") if isinstance(content, str) else content
            kind, target = _target(path)
            if kind == "stream":
                streams.append((target, data))
                continue
            folder = ensure_folder(os.path.dirname(target))
            fd, tmp = tempfile.mkstemp(prefix=".chainplan-", suffix=".part", dir=folder)
            staged.append((tmp, target))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())        # as an ordinary new file, not mkstemp's 0600
        for path, data in streams:
            if path == "-":
                sys.stdout.flush()
                sys.stdout.buffer.write(data)
                sys.stdout.buffer.flush()
            else:
                with open(path, "wb") as fh:
                    fh.write(data)
        for tmp, path in staged:
            os.replace(tmp, path)
    except OSError as exc:
        _discard(staged)
        raise UsageError(f"cannot write '{exc.filename or path}': {exc.strerror or exc}") from None
    except BaseException:
        _discard(staged)
        raise
    return [path for _, path in staged] + [path for path, _ in streams]


def _target(path: str) -> tuple[str, str]:
    """('stream', path) for '-' and existing non-regular files, else ('file', real path)."""
    if path == "-":
        return "stream", path
    if os.path.lexists(path):
        try:
            mode = os.stat(path).st_mode
        except OSError:                      # a dangling link: replace the link itself
            return "file", path
        if stat.S_ISDIR(mode):
            raise UsageError(f"cannot write '{path}': a folder of that name exists")
        if not stat.S_ISREG(mode):
            return "stream", path
        return "file", os.path.realpath(path)
    return "file", path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _discard(staged):
    for tmp, _ in staged:
        try:
            os.unlink(tmp)
        except OSError:
            pass
