"""Errors that the command line turns into a clear message and exit code 2."""

__all__ = ["BadInputError"]


class BadInputError(ValueError):
    """Input the user gave is unusable: a data set, an image, a recipe, a flag.

    The message must name the file (or flag) and the fault, and say what was
    expected; the command line prints it without a traceback and exits 2.
    """
