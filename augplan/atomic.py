"""Atomic file writes: a temporary file in the target's folder, then a rename.

A reader never sees a half-written output, and an interrupted run leaves no
partial file behind: the temporary file is removed on any exception,
``KeyboardInterrupt`` included.
"""

import errno
import os
import tempfile
from pathlib import Path

__all__ = ["write_bytes_atomic", "write_text_atomic"]


def write_bytes_atomic(path, data, *, durable=True):
    """Write ``data`` to ``path`` so that the file appears whole or not at all.

    Parameters
    ----------
    path : str or Path
        Destination file; its folder must exist.
    data : bytes
        The full content.
    durable : bool, default True
        fsync before the rename, so the file survives a power cut. Caches
        whose rows are only recomputed when lost skip it: it costs
        milliseconds per file.

    Returns
    -------
    Path
        The destination path.
    """
    path = Path(path)
    if path.is_dir():
        raise IsADirectoryError(errno.EISDIR, "is a folder; expected the path of a file to write", str(path))
    # mkstemp creates 0600 files; give the output the permissions any new file gets.
    umask = os.umask(0)
    os.umask(umask)
    try:
        handle, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as error:
        raise _naming(error, path) from None
    try:
        with os.fdopen(handle, "wb") as tmp:
            tmp.write(data)
            tmp.flush()
            if durable:
                os.fsync(tmp.fileno())
        os.chmod(tmp_name, 0o666 & ~umask)
        os.replace(tmp_name, path)
    except BaseException as error:
        try:
            os.unlink(tmp_name)
        except FileNotFoundError:
            pass
        if isinstance(error, OSError):
            raise _naming(error, path) from None
        raise
    return path


def _naming(error, path):
    """The same OS error, naming the output the user asked for, not our temporary file."""
    return type(error)(error.errno, error.strerror or str(error), str(path))


def write_text_atomic(path, text):
    """Write UTF-8 ``text`` to ``path`` atomically; see `write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode("utf-8"))
