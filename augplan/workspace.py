"""Where augplan keeps its own files, and the rule that it never writes into the data.

A data folder ``DATA`` gets a workspace ``.augplan/`` beside it (in its parent
folder, never inside it): the results ledger ``.augplan/ledger.sqlite`` and the
feature cache ``.augplan/features/``. Every path augplan writes to passes
`ensure_outside_data` first.
"""

from pathlib import Path

from augplan.errors import BadInputError

__all__ = ["WORKSPACE_NAME", "workspace_dir", "default_ledger", "default_feature_cache", "ensure_outside_data"]

WORKSPACE_NAME = ".augplan"


def workspace_dir(data_root):
    """``<parent of the data folder>/.augplan``; the data folder itself is never written to.

    Parameters
    ----------
    data_root : str or Path
        The data folder (``Dataset.root``), not a manifest file.

    Returns
    -------
    Path
    """
    return Path(data_root).resolve().parent / WORKSPACE_NAME


def default_ledger(data_root=None):
    """The results ledger of a data folder; ``./.augplan/ledger.sqlite`` without one."""
    if data_root is None:
        return Path(WORKSPACE_NAME) / "ledger.sqlite"
    return workspace_dir(data_root) / "ledger.sqlite"


def default_feature_cache(data_root):
    """The feature cache folder of a data folder: ``<parent>/.augplan/features``."""
    return workspace_dir(data_root) / "features"


def ensure_outside_data(path, data_root, *, what="output"):
    """Raise `BadInputError` when ``path`` is the data folder or lies inside it.

    Parameters
    ----------
    path : str or Path
        Where augplan is about to write.
    data_root : str or Path
        The data folder (``Dataset.root``).
    what : str, default "output"
        What is written there, for the message.

    Raises
    ------
    BadInputError
        ``path`` resolves to ``data_root`` or to a path below it.
    """
    root = Path(data_root).resolve()
    target = Path(path).resolve()
    if target != root and root not in target.parents:
        return
    raise BadInputError(f"{path}: the {what} lies inside the data folder {data_root}; augplan never writes "
                        "into the data. Choose a place outside it.")
