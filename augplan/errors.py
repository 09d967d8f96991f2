"""Errors that the command line turns into a clear message and exit code 2."""

import re

__all__ = ["BadInputError", "printable"]

# C0 controls but tab and newline, DEL, the C1 controls (U+009B is a
# terminal's CSI, as ESC [ is), and the lone surrogates that stand for bytes
# of a file name that are not UTF-8 (they cannot be printed as they are).
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\ud800-\udfff]")


def printable(text):
    r"""``text`` with every control character a terminal would act on escaped.

    A file or folder name may hold escape sequences that clear the screen,
    retitle the window or hide text; a message quoting it shows them as
    ``\x1b``-style escapes instead. Tabs and line ends are kept.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    return _CONTROL.sub(_escaped, text)


def _escaped(match):
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


class BadInputError(ValueError):
    """Input the user gave is unusable: a data set, an image, a recipe, a flag.

    The message must name the file (or flag) and the fault, and say what was
    expected; the command line prints it without a traceback and exits 2.
    """
