"""Writing output files all-or-nothing: every file goes to a temporary file in
its own folder first and is moved into place with ``os.replace`` only when all
of them were written, so a failure never leaves a half-written or partial set
of outputs behind."""
from __future__ import annotations

import os
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
    path = ""
    try:
        for path, content in files.items():
            folder = ensure_folder(os.path.dirname(path))
            fd, tmp = tempfile.mkstemp(prefix=".chainplan-", suffix=".part", dir=folder)
            staged.append((tmp, path))
            with os.fdopen(fd, "wb") as fh:
                fh.write(content.encode("utf-8") if isinstance(content, str) else content)
            os.chmod(tmp, 0o666 & ~_umask())        # as an ordinary new file, not mkstemp's 0600
        for tmp, path in staged:
            if os.path.isdir(path):
                raise UsageError(f"cannot write '{path}': a folder of that name exists")
        for tmp, path in staged:
            os.replace(tmp, path)
    except OSError as exc:
        _discard(staged)
        raise UsageError(f"cannot write '{exc.filename or path}': {exc.strerror or exc}") from None
    except BaseException:
        _discard(staged)
        raise
    return [path for _, path in staged]


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
