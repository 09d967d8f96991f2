"""Which files become records: the byte limit, the symlink rule and the list of skipped files.

One rule for folders and manifests alike: only regular files are read, each
at most `MAX_IMAGE_BYTES`; a file symlink is followed only when it leads
inside the data folder (or the separate field folder); folder symlinks are
never followed; a file that is not a readable image is listed and skipped
(an error under ``strict``).
"""

import hashlib
import unicodedata
from pathlib import Path

from augplan.data.decoding import MAX_IMAGE_BYTES, identify
from augplan.errors import BadInputError
from augplan.files import UnreadableFileError, read_regular_file



def label_of(name):
    # NFC so that a class typed on one system matches the folder made on another.
    return unicodedata.normalize("NFC", name)


def _link_leads_outside(path, allowed):
    """Where a file symlink leads when that is outside every folder of ``allowed``, else None.

    One rule for folders and manifests alike: a link is followed only when
    it resolves inside the data folder (or the separate field folder).
    """
    if not path.is_symlink():
        return None
    try:
        real = path.resolve(strict=True)
    except (OSError, RuntimeError):
        return None  # a dangling link or loop: reading it reports the fault
    if any(real.is_relative_to(folder) for folder in allowed):
        return None
    return real


class Scanner:
    """Reads file bytes, hashes and identifies them, and keeps the skip list."""

    def __init__(self, root, strict, allowed=None):
        self.root = root
        self.strict = strict
        self.allowed = tuple(Path(folder).resolve() for folder in (allowed or (root,)))
        self.skipped = []

    def skip(self, relpath, reason, path=None):
        if self.strict:
            shown = path if path is not None else self.root / relpath
            raise BadInputError(f"{shown}: {reason} (strict mode stops on any "
                                "file that is not a readable image; remove it or drop --strict)")
        self.skipped.append((relpath, reason))

    def note(self, relpath, reason):
        """A skip that is not a bad file (an empty folder): never fatal."""
        self.skipped.append((relpath, reason))

    def examine(self, path, relpath):
        """sha256 of a usable image file, or None after recording why not."""
        if path.is_symlink() and path.is_dir():
            self.skip(relpath, "folder symlink, not followed", path)
            return None
        if path.is_dir():
            self.skip(relpath, "a folder, not an image file (subfolders of a class are not read)", path)
            return None
        outside = _link_leads_outside(path, self.allowed)
        if outside is not None:
            self.skip(relpath, f"a symlink to {outside}, outside the data folder; links are followed "
                               "only within it", path)
            return None
        try:
            data = read_regular_file(path, limit=MAX_IMAGE_BYTES, what="image")
        except UnreadableFileError as error:
            self.skip(relpath, error.reason, path)
            return None
        except PermissionError:
            self.skip(relpath, "cannot read the file (permission denied)", path)
            return None
        except OSError as error:
            self.skip(relpath, f"cannot read the file ({error.strerror or error})", path)
            return None
        reason = identify(data)
        if reason is not None:
            self.skip(relpath, reason, path)
            return None
        return hashlib.sha256(data).hexdigest()
