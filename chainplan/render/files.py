"""The one output writer of every command: all-or-nothing, and never destroying a
file it was not asked to write.

Rules (docs/output.md):

* ``-`` is standard output.  An existing pipe, FIFO, socket or device
  (``/dev/stdout``, ``/dev/null``, a FIFO), or a link to one, is written through:
  replacing it would destroy it.
* A regular file is replaced atomically: the new content goes to a temporary
  folder beside it (``.chainplan-*.part``) and is renamed into place only when
  every output of the command is written.  The renames run with SIGINT and
  SIGTERM held back, so an interruption comes before them (nothing published, the
  temporary folder removed) or after (everything published): a set of plots is
  never half old, half new.  SIGINT and SIGTERM during the writing remove the
  temporary files.
* A symbolic link to a regular file keeps being a link: its target is replaced.
* The replaced file keeps its mode and owner; where the owner cannot be kept the
  file is refused.  A read-only file, a file with several hard links (replacing
  it would split them) and a folder are refused.
* No command writes onto a file it read in the same run (a spec, an included
  parts file, ``--parts``), after resolving links — except ``buffers --in-place``,
  which rewrites its spec on purpose (``replaces=``).
"""
from __future__ import annotations

import contextlib
import os
import shutil
import signal
import stat
import sys
import tempfile
import threading

from ..errors import UsageError
from ..spec.yamlsrc import files_read, short

PART_PREFIX = ".chainplan-"


def ensure_folder(folder: str) -> str:
    """Create ``folder`` if needed; a folder that cannot be made or written is a UsageError."""
    folder = folder or "."
    if os.path.exists(folder) and not os.path.isdir(folder):
        raise UsageError(f"cannot write to the folder '{short(folder)}': it is a file, not a folder")
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"cannot write to the folder '{short(folder)}': {exc.strerror or exc}") from None
    if not os.path.isdir(folder) or not os.access(folder, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write to the folder '{short(folder)}': not a writable folder")
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
        what = "it is a file, not a folder" if probe == os.path.abspath(folder) else f"'{short(probe)}' is a file"
        raise UsageError(f"cannot write to the folder '{short(folder)}': {what}")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write to the folder '{short(folder)}': '{short(probe)}' is not writable")
    return folder


def check_target(path: str, replaces: str | None = None) -> None:
    """Refuse, before any work is done, an output path that :func:`write_atomic` would refuse."""
    kind, target = _target(path, replaces)
    if kind == "file":
        check_folder(os.path.dirname(target))


def write_atomic(files: dict[str, bytes | str], replaces: str | None = None) -> list[str]:
    """Write every ``path -> content`` (text is UTF-8) or none of them; returns the paths.
    ``replaces`` names the one input the caller rewrites on purpose (``--in-place``)."""
    plan = [(path, content.encode("utf-8") if isinstance(content, str) else content, *_target(path, replaces))
            for path, content in files.items()]
    staged: list[tuple[str, str, os.stat_result | None]] = []      # (temporary, final, old stat)
    folders: dict[str, str] = {}                                    # target folder -> its temporary folder
    path = ""
    with _cleanup_on_signals(folders):
        try:
            for path, data, kind, target in plan:
                if kind == "stream":
                    continue
                folder = os.path.dirname(target) or "."
                if folder not in folders:
                    ensure_folder(folder)
                    folders[folder] = tempfile.mkdtemp(prefix=PART_PREFIX, suffix=".part", dir=folder)
                tmp = os.path.join(folders[folder], os.path.basename(target))
                old = _existing(target)
                with open(tmp, "xb") as fh:
                    fh.write(data)
                _keep_mode_and_owner(tmp, target, old)
                staged.append((tmp, target, old))
            for path, data, kind, target in plan:
                if kind == "stream":
                    _write_through(target, data)
            with _signals_held():
                for tmp, target, old in staged:
                    if _existing(target) != old:
                        raise UsageError(f"'{short(target)}' changed while chainplan was writing; nothing "
                                         "more replaced")
                    os.replace(tmp, target)
        except OSError as exc:
            raise UsageError(f"cannot write '{short(exc.filename or path)}': {exc.strerror or exc}") from None
        finally:
            for tmp_folder in folders.values():
                shutil.rmtree(tmp_folder, ignore_errors=True)
    return [path for path, *_ in plan]


def _target(path: str, replaces: str | None) -> tuple[str, str]:
    """('stream', path) for '-' and existing non-regular files, else ('file', real path);
    refuses folders, inputs of the run, read-only files and files with several links."""
    if path == "-":
        return "stream", path
    if "\0" in path:
        raise UsageError("an output path cannot contain a NUL byte")
    if not path:
        raise UsageError("an output path is empty")
    try:
        st = os.stat(path)
    except FileNotFoundError:
        st = None
    except OSError as exc:
        raise UsageError(f"cannot write '{short(path)}': {exc.strerror or exc}") from None
    if st is None:
        if os.path.islink(path):                 # a dangling link: write where it points
            return "file", os.path.realpath(path)
        return "file", os.path.abspath(path)
    if stat.S_ISDIR(st.st_mode):
        raise UsageError(f"cannot write '{short(path)}': a folder of that name exists")
    if not stat.S_ISREG(st.st_mode):
        return "stream", path
    real = os.path.realpath(path)
    ident = (st.st_dev, st.st_ino)
    allowed = replaces is not None and _ident(replaces) == ident
    if ident in files_read() and not allowed:
        raise UsageError(f"'{short(path)}' is an input of this run" + (f" ({short(real)})" if real != os.path.abspath(path)
                         else "") + "; chainplan never writes over its input: name another file")
    if not _writable(st, path):
        raise UsageError(f"'{short(path)}' is read-only; chainplan does not replace it")
    if st.st_nlink > 1:
        raise UsageError(f"'{short(path)}' has {st.st_nlink} hard links; replacing it would split them: "
                         "name another file")
    return "file", real


def _ident(path: str):
    try:
        st = os.stat(path)
    except OSError:
        return None
    return st.st_dev, st.st_ino


def _writable(st: os.stat_result, path: str) -> bool:
    """Writable by this user, and (for the superuser, whom access() never refuses) not marked read-only."""
    if not os.access(path, os.W_OK):
        return False
    return not (hasattr(os, "geteuid") and os.geteuid() == 0 and not st.st_mode & 0o222)


def _existing(target: str):
    try:
        st = os.stat(target)
    except FileNotFoundError:
        return None
    return st.st_dev, st.st_ino, st.st_mode, st.st_uid, st.st_gid


def _keep_mode_and_owner(tmp: str, target: str, old) -> None:
    """The new file gets the old one's mode and owner, or an ordinary new file's mode."""
    if old is None:
        os.chmod(tmp, 0o666 & ~_umask())
        return
    _, _, mode, uid, gid = old
    os.chmod(tmp, stat.S_IMODE(mode))
    st = os.stat(tmp)
    if (st.st_uid, st.st_gid) != (uid, gid):
        try:
            os.chown(tmp, uid, gid)
        except OSError:
            raise UsageError(f"'{short(target)}' belongs to another user; chainplan cannot keep its owner "
                             "and does not replace it") from None


def _write_through(path: str, data: bytes) -> None:
    if path == "-":
        sys.stdout.flush()
        sys.stdout.buffer.write(data)
        sys.stdout.buffer.flush()
        return
    with open(path, "wb") as fh:
        fh.write(data)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


class Interrupted(KeyboardInterrupt):
    """SIGTERM while writing, turned into an exception so the temporary files go."""


@contextlib.contextmanager
def _cleanup_on_signals(folders: dict):
    """SIGTERM raises Interrupted while the outputs are written (SIGINT already raises
    KeyboardInterrupt), so the ``finally`` above removes the temporary folders."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def on_term(signum, frame):
        raise Interrupted()

    previous = signal.signal(signal.SIGTERM, on_term)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextlib.contextmanager
def _signals_held():
    """SIGINT and SIGTERM wait until the renames are done (they then act as usual)."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)
