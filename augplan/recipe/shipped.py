"""The starting recipes that ship with augplan, and how a ``--start`` names one.

Their one home is the top-level ``recipes/`` folder of the source tree;
``pyproject.toml`` installs that folder as the package ``augplan.recipes``,
so a checkout and an installed augplan read the same files through
`importlib.resources`. Each file's first line is a comment saying, in one
line, what data the recipe is for (`ShippedRecipe.purpose`).
"""

import difflib
import importlib.resources
from dataclasses import dataclass
from pathlib import Path

from augplan.recipe.parse import RecipeError, read_recipe

__all__ = ["SHIPPED_PACKAGE", "ShippedRecipe", "shipped_recipes", "recipe_purpose", "find_start", "read_start",
           "listing"]

#: The package the top-level ``recipes/`` folder installs as.
SHIPPED_PACKAGE = "augplan.recipes"
_SUFFIXES = (".yaml", ".yml")


@dataclass(frozen=True)
class ShippedRecipe:
    """One starting recipe of ``recipes/``.

    Attributes
    ----------
    name : str
        The file's name without ``.yaml``: what ``--start`` accepts.
    purpose : str
        The file's first comment line: what data it is for, in one line.
    path : pathlib.Path
        The file.
    """

    name: str
    purpose: str
    path: Path


def recipe_purpose(text):
    """The one-line purpose of a recipe's text: its first line, a comment.

    Parameters
    ----------
    text : str
        The recipe file's text.

    Returns
    -------
    str
        The first line without its ``#``; empty when the file does not
        start with a comment.
    """
    first = text.split("\n", 1)[0].strip()
    return first.lstrip("#").strip() if first.startswith("#") else ""


def _folder():
    """The installed folder of the shipped recipes, or None when it is missing."""
    try:
        folder = importlib.resources.files(SHIPPED_PACKAGE)
    except ModuleNotFoundError:
        return None
    # Installed from a wheel, or editable, the folder is on disk.
    return Path(str(folder)) if Path(str(folder)).is_dir() else None


def shipped_recipes():
    """Every starting recipe that ships with augplan, sorted by name.

    Returns
    -------
    tuple of ShippedRecipe
        Empty when this installation lacks the ``augplan.recipes`` package.
    """
    folder = _folder()
    if folder is None:
        return ()
    found = []
    for path in sorted(folder.iterdir()):
        if path.suffix in _SUFFIXES and path.is_file():
            purpose = recipe_purpose(path.read_text(encoding="utf-8"))
            found.append(ShippedRecipe(name=path.stem, purpose=purpose, path=path))
    return tuple(found)


def _listing(recipes):
    width = max((len(r.name) for r in recipes), default=0)
    return "\n".join(f"  {r.name:<{width}}  {r.purpose}" for r in recipes)


def find_start(text):
    """The file a ``--start`` value names: a recipe file, or a shipped recipe by name.

    Parameters
    ----------
    text : str or Path
        A path to a recipe file; or the name of a shipped recipe
        (``aerial-tiles``), also written as a file name (``aerial-tiles.yaml``)
        or as the checkout's path (``recipes/aerial-tiles.yaml``) where that
        file is not present (an installed augplan run outside the checkout).

    Returns
    -------
    pathlib.Path

    Raises
    ------
    RecipeError
        When ``text`` names neither an existing file nor a shipped recipe;
        the message lists the shipped recipes and suggests the closest name.
    """
    path = Path(text)
    if path.is_file():
        return path
    recipes = shipped_recipes()
    by_name = {r.name: r for r in recipes}
    stem = path.stem if path.suffix in _SUFFIXES else path.name
    if path.parent in (Path("."), Path("recipes")) and stem in by_name:
        return by_name[stem].path
    closest = difflib.get_close_matches(stem, list(by_name), n=1)
    hint = f"did you mean '{closest[0]}'? " if closest else ""
    if not recipes:
        raise RecipeError(f"--start {text}: no such recipe file, and this installation of augplan ships no "
                          "starting recipes (the augplan.recipes package is missing: reinstall augplan).")
    raise RecipeError(f"--start {text}: no such recipe file and no shipped recipe of that name; {hint}"
                      f"the shipped recipes ('augplan draft --list'):\n{_listing(recipes)}")


def read_start(text):
    """Read the recipe a ``--start`` value names (see `find_start`).

    Returns
    -------
    augplan.recipe.Recipe
        With ``source`` set to the file it came from.
    """
    return read_recipe(find_start(text))


def listing():
    """The shipped recipes as text, one ``name  purpose`` line each."""
    return _listing(shipped_recipes())
