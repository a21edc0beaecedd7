"""Atomic file writes: a report file is complete under its final name, or absent.

Each writer puts the bytes in a temporary file in the destination folder (same file system), flushes
and fsyncs it, then ``os.replace``-s it onto the final name. An interrupted run leaves at most a
``.<name>.*.tmp`` file, never a half-written file under a final name; the temporary file is removed
if writing fails.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

TEMP_SUFFIX = ".tmp"


def write_bytes_atomic(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically and return the path."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=TEMP_SUFFIX, dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


def write_text_atomic(path, text: str) -> Path:
    """Write ``text`` as UTF-8 with ``\\n`` line ends to ``path`` atomically."""
    return write_bytes_atomic(path, text.encode("utf-8"))


class AtomicWriter:
    """A text stream to a temporary file that becomes ``path`` only on a clean ``with`` exit.

    For large files (``clearance.json`` of a big check) written piece by piece.
    """

    def __init__(self, path):
        self.path = Path(path)
        self._fd, self._tmp = tempfile.mkstemp(prefix=f".{self.path.name}.", suffix=TEMP_SUFFIX, dir=self.path.parent)
        self._fh = os.fdopen(self._fd, "w", encoding="utf-8", newline="\n")

    def write(self, text: str) -> None:
        self._fh.write(text)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        try:
            if exc_type is None:
                self._fh.flush()
                os.fsync(self._fh.fileno())
            self._fh.close()
            if exc_type is None:
                os.chmod(self._tmp, 0o644)
                os.replace(self._tmp, self.path)
        finally:
            if os.path.exists(self._tmp):
                os.unlink(self._tmp)
        return False
