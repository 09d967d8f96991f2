"""Reading the user's files: regular files only, their size bounded before reading.

A path the user gives may name anything: a symlink to ``/dev/zero`` would be
read until memory runs out, a FIFO would block forever. Every input file is
opened without blocking, checked to be a regular file, and refused when it
is larger than its kind allows, all before a byte is read.
"""

import os
import stat

from augplan.errors import BadInputError

__all__ = ["UnreadableFileError", "read_regular_file"]


class UnreadableFileError(BadInputError):
    """A file that is not read: not a regular file, too large, or unreadable.

    ``reason`` is the fault without the path, for callers that word their
    own message (a skipped image, a recipe).
    """

    def __init__(self, path, reason):
        super().__init__(f"{path}: {reason}")
        self.path = path
        self.reason = reason


def _a(noun):
    return f"{'an' if noun[:1] in 'aeiou' else 'a'} {noun}"


def _kind(mode):
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def read_regular_file(path, *, limit, what="file"):
    """The bytes of ``path`` when it is a regular file of at most ``limit`` bytes.

    Parameters
    ----------
    path : str or Path
        Symlinks are followed (callers that restrict where links may lead
        check that first).
    limit : int
        Largest size in bytes; a larger file is refused before it is read.
    what : str
        What the file should be ("image", "recipe"), for the message.

    Returns
    -------
    bytes

    Raises
    ------
    UnreadableFileError
        Not found, not a regular file, larger than ``limit``, or unreadable;
        the message names the path and the fault.
    """
    try:
        # O_NONBLOCK: opening a FIFO that no one writes to returns at once.
        descriptor = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise UnreadableFileError(path, f"{what} file not found") from None
    except IsADirectoryError:
        raise UnreadableFileError(path, f"is a folder, expected {_a(what)} file") from None
    except PermissionError:
        raise UnreadableFileError(path, "cannot read the file (permission denied)") from None
    except OSError as error:
        raise UnreadableFileError(path, f"cannot read the file ({error.strerror or error})") from None
    try:
        info = os.fstat(descriptor)
        if not stat.S_ISREG(info.st_mode):
            raise UnreadableFileError(path, f"{_kind(info.st_mode)}, not a regular file; only regular "
                                            f"files are read as {what}s")
        if info.st_size > limit:
            raise UnreadableFileError(path, f"{info.st_size} bytes is too large for {_a(what)} "
                                            f"(at most {limit} bytes); is this the right file?")
        os.set_blocking(descriptor, True)
        with os.fdopen(descriptor, "rb", closefd=True) as handle:
            descriptor = None
            # One byte past the limit: a file that grew after fstat is refused too.
            data = handle.read(limit + 1)
    except OSError as error:
        raise UnreadableFileError(path, f"cannot read the file ({error.strerror or error})") from None
    finally:
        if descriptor is not None:
            os.close(descriptor)
    if len(data) > limit:
        raise UnreadableFileError(path, f"more than {limit} bytes, too large for {_a(what)}; "
                                        "is this the right file?")
    return data
