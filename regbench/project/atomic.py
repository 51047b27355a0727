"""Atomic file writes: write beside, flush and fsync, rename over.

The previous file stays whole until the new one is complete, so a crash or a
kill during a save never leaves a half-written file under the user's name.
"""

from __future__ import annotations

import os
import tempfile

from regbench.errors import ProjectError


def atomic_write_bytes(path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (same folder temp file + ``os.replace``)."""
    with atomic_writer(path) as fh:
        fh.write(data)


class atomic_writer:
    """Context manager yielding a binary file object; renamed over ``path`` on success only."""

    def __init__(self, path):
        self.path = os.fspath(path)
        self.tmp = None
        self.fh = None

    def __enter__(self):
        folder = os.path.dirname(os.path.abspath(self.path))
        if not os.path.isdir(folder):
            raise ProjectError(f"cannot save {self.path}: the folder {folder} does not exist")
        base = os.path.basename(self.path)
        try:
            fd, self.tmp = tempfile.mkstemp(prefix=f".{base}.", suffix=".tmp", dir=folder)
        except OSError as exc:
            raise ProjectError(f"cannot save {self.path}: {exc.strerror}; check the folder's permissions") from None
        try:
            # mkstemp creates the file private (0600); give it the mode the target has, or the
            # mode a newly created file would get under the user's umask.
            os.chmod(self.tmp, _target_mode(self.path))
        except OSError:
            pass
        self.fh = os.fdopen(fd, "wb")
        return self.fh

    def __exit__(self, exc_type, exc, tb):
        try:
            if exc_type is None:
                self.fh.flush()
                os.fsync(self.fh.fileno())
            self.fh.close()
            if exc_type is None:
                os.replace(self.tmp, self.path)
                _fsync_dir(os.path.dirname(os.path.abspath(self.path)))
                self.tmp = None
        except OSError as exc:
            raise ProjectError(f"cannot save {self.path}: {exc.strerror}") from None
        finally:
            if self.tmp is not None and os.path.exists(self.tmp):
                os.unlink(self.tmp)
        return False


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
