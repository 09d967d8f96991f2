"""Writing outputs: all or nothing, never over what is not ours, named as the user named them.

Every output augplan writes passes through this module:

- `check_output` refuses, before any work, an output that names something
  other than a regular file (or a folder, for a folder output: a device, a
  FIFO, a socket, a symlink), one inside an input folder (the data folder,
  the field folder) and one that is an input file itself.
- `write_bytes_atomic` writes a temporary file in the target's folder, then
  renames it: a reader never sees a half-written output, and an interrupted
  run leaves no partial file behind (the temporary is removed on any
  exception, ``KeyboardInterrupt`` included).
- `publish_folder` writes a whole folder of outputs the same way: every file
  into a temporary folder beside it, then one rename (or, into an existing
  folder, one rename per file once all are written).
- `output_lock` keeps two runs from writing one output folder at once.

Temporary names are siblings of the output that fit wherever the output's
own name fits (`temporary_sibling`), and every error names the user's
output, never a temporary. New files and folders get the permissions the
user's umask gives, as any file the user creates would.
"""

import errno
import fcntl
import os
import secrets
import shutil
import stat
from contextlib import contextmanager
from pathlib import Path

from augplan.errors import BadInputError

__all__ = ["write_bytes_atomic", "write_text_atomic", "temporary_sibling", "check_output", "publish_folder",
           "output_lock"]

#: Longest file name when the file system does not say (POSIX NAME_MAX on Linux).
_DEFAULT_NAME_MAX = 255


def _name_max(folder):
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return _DEFAULT_NAME_MAX


def temporary_sibling(path, tag):
    """A hidden, random name beside ``path`` that fits wherever ``path``'s name fits.

    ``.<name>.<random>.<tag>`` when that is within the folder's name limit;
    otherwise a name of exactly the length of ``path``'s own (its start, a
    ``~`` and the random part), so that neither the name nor the whole path
    is longer than the user's.

    Parameters
    ----------
    path : Path
        The output the temporary stands in for.
    tag : str
        A short word saying what the temporary is (``tmp``, ``old``).

    Returns
    -------
    Path
    """
    path = Path(path)
    token = secrets.token_hex(4)
    candidate = f".{path.name}.{token}.{tag}"
    encoded = os.fsencode(path.name)
    if len(os.fsencode(candidate)) <= _name_max(path.parent) or len(encoded) < len(token) + 4:
        return path.parent / candidate
    short = b"." + encoded[:len(encoded) - len(token) - 2] + b"~" + token.encode("ascii")
    return path.parent / os.fsdecode(short)


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _naming(error, path):
    """The same OS error, naming the output the user asked for, not our temporary file."""
    return type(error)(error.errno, error.strerror or str(error), str(path))


def _kind(mode):
    if stat.S_ISLNK(mode):
        return "a symlink"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISDIR(mode):
        return "a folder"
    return "not a regular file"


def _existing_fault(path, *, folder):
    """Why ``path`` may not be replaced by an output (None when it is missing or of the right kind)."""
    try:
        mode = os.lstat(path).st_mode
    except FileNotFoundError:
        return None
    except OSError as error:
        return f"cannot be examined ({error.strerror or error})"
    if folder and stat.S_ISDIR(mode):
        return None
    if not folder and stat.S_ISREG(mode):
        return None
    expected = "a folder" if folder else "a regular file"
    return (f"exists and is {_kind(mode)}, not {expected}; augplan replaces only {expected}s it could have "
            "written. Choose another output path.")


def check_output(path, *, folder=False, protected=(), inputs=()):
    """Refuse an output path before any work is done.

    Parameters
    ----------
    path : str or Path
        The output the user named.
    folder : bool, default False
        The output is a folder (``vet -o``, ``--evidence``, ``--plots``);
        otherwise a file.
    protected : sequence of (Path, str)
        Input folders and what they are (``"data folder"``, ``"field
        folder"``); nothing is written at or below them.
    inputs : sequence of paths
        Input files that the output may not replace.

    Raises
    ------
    BadInputError
        The path exists and is of another kind (a device, a FIFO, a
        symlink, a file where a folder is expected or the reverse), its
        folder does not exist, it lies inside a protected folder, or it is
        one of the inputs.
    """
    path = Path(path)
    fault = _existing_fault(path, folder=folder)
    if fault is not None:
        raise BadInputError(f"{path}: {fault}")
    parent = path.absolute().parent
    if not parent.is_dir():
        raise BadInputError(f"{path}: the folder {parent} does not exist")
    target = path.resolve()
    for root, what in protected:
        if root is None:
            continue
        root = Path(root).resolve()
        if target == root or root in target.parents:
            raise BadInputError(f"{path}: the output lies inside the {what} {root}; augplan never writes "
                                f"into its inputs. Choose a place outside it.")
    for given in inputs:
        given = Path(given)
        if str(given) != "-" and path.exists() and given.exists() and os.path.samefile(path, given):
            raise BadInputError(f"{path}: is the input {given}; no output may replace an input. "
                                "Choose another output file.")


def _create_file(path):
    """A new temporary file beside ``path``: (descriptor, its path)."""
    for _ in range(100):
        candidate = temporary_sibling(path, "tmp")
        try:
            return os.open(candidate, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0),
                           0o600), candidate
        except FileExistsError:
            continue
    raise FileExistsError(errno.EEXIST, "no free temporary name", str(path))


def _create_folder(path, tag):
    """A new temporary folder beside ``path``, with the permissions the umask gives."""
    for _ in range(100):
        candidate = temporary_sibling(path, tag)
        try:
            os.mkdir(candidate, 0o777)
            return candidate
        except FileExistsError:
            continue
    raise FileExistsError(errno.EEXIST, "no free temporary name", str(path))


def write_bytes_atomic(path, data, *, durable=True):
    """Write ``data`` to ``path`` so that the file appears whole or not at all.

    Parameters
    ----------
    path : str or Path
        Destination file; its folder must exist. An existing path that is
        not a regular file (a device, a FIFO, a folder) is never replaced.
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

    Raises
    ------
    BadInputError
        ``path`` exists and is not a regular file.
    OSError
        The write failed; the error names ``path``, not the temporary.
    """
    path = Path(path)
    if path.is_dir():
        raise IsADirectoryError(errno.EISDIR, "is a folder; expected the path of a file to write", str(path))
    fault = _existing_fault(path, folder=False)
    if fault is not None:
        raise BadInputError(f"{path}: {fault}")
    umask = _umask()
    try:
        handle, tmp_name = _create_file(path)
    except OSError as error:
        raise _naming(error, path) from None
    try:
        with os.fdopen(handle, "wb") as tmp:
            tmp.write(data)
            tmp.flush()
            if durable:
                os.fsync(tmp.fileno())
        # The temporary was made 0600; give the output the permissions any new file gets.
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


def write_text_atomic(path, text):
    """Write UTF-8 ``text`` to ``path`` atomically; see `write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def publish_folder(files, out_dir, *, replace=False, last=None):
    """Write ``files`` ({relative path: bytes}) as the folder ``out_dir``: all of them or none.

    Every file is first written to a temporary folder beside ``out_dir``.
    A missing or empty ``out_dir`` is then replaced by that folder in one
    rename; with ``replace`` an existing folder is swapped out whole;
    otherwise the files are moved into the existing folder, ``last`` last.
    On any fault (a full disk, Ctrl-C) nothing is left: neither a partial
    folder nor a temporary.

    Parameters
    ----------
    files : dict of str -> bytes
    out_dir : str or Path
    replace : bool, default False
    last : str, optional
        The file moved last into an existing folder (a report that refers to
        the others).

    Returns
    -------
    Path
        ``out_dir``.

    Raises
    ------
    OSError
        The write failed; the error names the output, never the temporary.
    """
    out_dir = Path(out_dir)
    try:
        staging = _create_folder(out_dir, "tmp")
    except OSError as error:
        raise _naming(error, out_dir) from None
    retired = None
    try:
        for relpath, data in files.items():
            target = staging / relpath
            try:
                target.parent.mkdir(parents=True, exist_ok=True)
                write_bytes_atomic(target, data)
            except OSError as error:  # name the output, not the staging folder
                raise _naming(error, out_dir / relpath) from None
        try:
            if out_dir.is_dir() and not out_dir.is_symlink() and not any(out_dir.iterdir()):
                out_dir.rmdir()
            elif out_dir.is_dir() and replace:
                retired = _create_folder(out_dir, "old")
                os.replace(out_dir, retired / "previous")
            if not out_dir.exists():
                os.rename(staging, out_dir)
            else:
                for relpath in sorted(files, key=lambda name: name == last):
                    (out_dir / relpath).parent.mkdir(parents=True, exist_ok=True)
                    os.replace(staging / relpath, out_dir / relpath)
        except OSError as error:
            raise _naming(error, out_dir) from None
    except BaseException:
        if retired is not None and not out_dir.exists():
            os.replace(retired / "previous", out_dir)  # put the earlier output back
        raise
    finally:
        shutil.rmtree(staging, ignore_errors=True)
        if retired is not None:
            shutil.rmtree(retired, ignore_errors=True)
    return out_dir


@contextmanager
def output_lock(out_dir):
    """Hold the one lock on ``out_dir`` for a run that writes it.

    The lock is a hidden file beside the folder (named like a temporary,
    see `temporary_sibling`, but without the random part), locked with
    ``flock`` and holding the process id of the run. A second run on the
    same folder is refused at once, naming the process that holds it. The
    lock ends with the run (or its process): nothing stale remains.

    Raises
    ------
    BadInputError
        Another run holds the lock.
    OSError
        The lock file cannot be made (the message names ``out_dir``).
    """
    out_dir = Path(out_dir)
    name = f".{out_dir.name}.lock"
    if len(os.fsencode(name)) > _name_max(out_dir.parent):
        encoded = os.fsencode(out_dir.name)
        name = os.fsdecode(b"." + encoded[:len(encoded) - 2] + b"~")
    lock_path = out_dir.parent / name
    while True:
        try:
            descriptor = os.open(lock_path, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o666)
        except OSError as error:
            raise _naming(error, out_dir) from None
        try:
            fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.read(descriptor, 64).decode("ascii", "replace").strip() or "unknown"
            os.close(descriptor)
            raise BadInputError(f"{out_dir}: another augplan run (process {holder}) is writing this output "
                                "folder; wait for it to finish or choose another folder.") from None
        # The file may have been removed by the run that held it: lock the one on disk.
        try:
            same = os.path.samestat(os.fstat(descriptor), os.stat(lock_path))
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(descriptor)
    try:
        os.ftruncate(descriptor, 0)
        os.write(descriptor, f"{os.getpid()}\n".encode("ascii"))
        yield lock_path
    finally:
        try:
            os.unlink(lock_path)
        except FileNotFoundError:
            pass
        os.close(descriptor)
