"""Atomic file writes: write beside, flush and fsync, rename over.

The previous file stays whole until the new one is complete, so a crash or a
kill during a save never leaves a half-written file under the user's name.

Before writing, the path is resolved: a symbolic link is followed so its target
is updated (the link stays a link); a read-only file, a folder and a special file
(a device, pipe or socket) are refused rather than replaced.  Temporary files are
named ``.NAME.PID.XXXXXXXX.tmp``; those left beside the file by a save that was
killed (their process is gone) are removed by the next save.
"""

from __future__ import annotations

import os
import stat
import tempfile
import time

from regbench.errors import ProjectError

#: A temporary file of ours without a process id in its name (older releases) is stale after this long.
STALE_SECONDS = 3600


def atomic_write_bytes(path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (same folder temp file + ``os.replace``)."""
    with atomic_writer(path) as fh:
        fh.write(data)


def resolve_target(path) -> str:
    """The file a save to ``path`` must replace: links followed, special and read-only files refused.

    Raises
    ------
    ProjectError
        For a folder, a device, pipe or socket, a read-only file, or a link loop.
    """
    path = os.fspath(path)
    try:
        real = os.path.realpath(path, strict=False)
    except (OSError, RuntimeError, ValueError):
        raise ProjectError(f"cannot write {path}: the path's links go round in a loop; choose another file name") from None
    try:
        st = os.stat(real)
    except FileNotFoundError:
        return real
    except OSError as exc:
        raise ProjectError(f"cannot write {path}: {exc.strerror}; check the path and its permissions") from None
    if stat.S_ISDIR(st.st_mode):
        raise ProjectError(f"cannot write {path}: it is a folder; give a file name")
    if not stat.S_ISREG(st.st_mode):
        raise ProjectError(f"cannot write {path}: it is a device, pipe or other special file, not a regular file; "
                           "choose another file name")
    # Mode bits as well as access(): for root, access() says yes to every file.
    if not (st.st_mode & 0o222) or not os.access(real, os.W_OK):
        raise ProjectError(f"cannot write {path}: the file is read-only; make it writable or save under another name")
    return real


class atomic_writer:
    """Context manager yielding a binary file object; renamed over ``path`` on success only."""

    def __init__(self, path):
        self.path = os.fspath(path)
        self.tmp = None
        self.fh = None
        self.target = None

    def __enter__(self):
        self.target = resolve_target(self.path)
        folder = os.path.dirname(os.path.abspath(self.target))
        if not os.path.isdir(folder):
            raise ProjectError(f"cannot write {self.path}: the folder {folder} does not exist; create it or "
                               "choose another folder")
        base = os.path.basename(self.target)
        remove_stale_temporaries(self.target)
        try:
            fd, self.tmp = tempfile.mkstemp(prefix=f".{base}.{os.getpid()}.", suffix=".tmp", dir=folder)
        except OSError as exc:
            raise ProjectError(f"cannot write {self.path}: {exc.strerror}; check the folder's permissions and "
                               "free space") from None
        try:
            # mkstemp creates the file private (0600); give it the mode the target has, or the
            # mode a newly created file would get under the user's umask.
            os.chmod(self.tmp, _target_mode(self.target))
        except OSError:
            pass
        self.fh = os.fdopen(fd, "wb")
        return self.fh

    def __exit__(self, exc_type, exc, tb):
        failed = None
        try:
            if exc_type is None:
                self.fh.flush()
                os.fsync(self.fh.fileno())
            self.fh.close()
            if exc_type is None:
                os.replace(self.tmp, self.target)
                _fsync_dir(os.path.dirname(os.path.abspath(self.target)))
                self.tmp = None
        except OSError as err:
            failed = err
        finally:
            if self.tmp is not None:
                try:
                    os.unlink(self.tmp)
                except OSError:
                    pass
        if failed is None and exc_type is not None and issubclass(exc_type, OSError):
            failed = exc  # the write itself failed: a full disk, a file-size limit, ...
        if failed is not None:
            raise ProjectError(f"cannot write {self.path}: {failed.strerror or failed}; the previous file (if any) "
                               "is unchanged; free some space or choose another place") from None
        return False


def remove_stale_temporaries(target: str) -> int:
    """Remove our temporary files beside ``target`` that a killed save left behind; return how many."""
    folder = os.path.dirname(os.path.abspath(target))
    prefix = f".{os.path.basename(target)}."
    removed = 0
    try:
        names = [n for n in os.listdir(folder) if n.startswith(prefix) and n.endswith(".tmp")]
    except OSError:
        return 0
    for name in names:
        middle = name[len(prefix):-len(".tmp")]
        parts = middle.split(".")
        path = os.path.join(folder, name)
        try:
            st = os.lstat(path)
        except OSError:
            continue
        if not stat.S_ISREG(st.st_mode):
            continue
        if len(parts) == 2 and parts[0].isdigit() and len(parts[1]) == 8:
            if _alive(int(parts[0])):
                continue  # a save running now in another process
        elif len(parts) == 1 and len(parts[0]) == 8 and parts[0].replace("_", "a").isalnum():
            if time.time() - st.st_mtime < STALE_SECONDS:
                continue
        else:
            continue  # not a name this module makes
        try:
            os.unlink(path)
            removed += 1
        except OSError:
            pass
    return removed


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, ValueError):
        return True
    return True


def _target_mode(path: str) -> int:
    try:
        return os.stat(path).st_mode & 0o777
    except OSError:
        mask = os.umask(0)
        os.umask(mask)
        return 0o666 & ~mask


def _fsync_dir(folder: str) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
