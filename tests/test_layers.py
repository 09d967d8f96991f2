"""The package's layers import one way only (docs/architecture.md, "Layers").

Each module belongs to a unit: its subpackage (``augplan/check/...`` is unit
``check``) or, for a top-level module, its own name. A unit may import from
itself and from units of strictly lower layers; never from a sibling of its own
layer nor from above. The imports are read with ``ast`` (every ``import`` in
the file, including the ones inside functions), so nothing is executed.
"""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "augplan"

# Lowest first.
LAYERS = [
    {"errors", "thresholds"},
    {"atomic", "files", "parallel", "cautions", "workspace", "results", "seeding"},
    {"imaging"},
    {"recipe", "data"},
    {"augment"},
    {"measure"},
    {"check", "coverage", "evaluate"},
    # Below vet, which renders the report and the plots; render reads typed
    # results (results.py) and draws, and imports no analysis.
    {"render"},
    {"vet"},
    {"demo", "torch"},
    {"cli"},
    {"__init__", "__main__"},
]
LAYER_OF = {unit: rank for rank, units in enumerate(LAYERS) for unit in units}

def _module_name(path):
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return parts[:-1] if parts[-1] == "__init__" else parts


def _unit(parts):
    """Unit of a module given as its dotted parts starting with 'augplan'."""
    return "__init__" if len(parts) == 1 else parts[1]


def _imported_modules(source, here, is_init=False):
    """Dotted parts of every augplan module that the module ``here`` imports.

    ``here`` is the module's dotted parts (``["augplan", "check", "check"]``);
    for a package's ``__init__.py`` it is the package's parts.
    """
    tree = ast.parse(source)
    package = here if is_init else here[:-1]
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "augplan":
                    found.append(alias.name.split("."))
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                target = base + (node.module.split(".") if node.module else [])
            else:
                target = node.module.split(".")
            if target[0] != "augplan":
                continue
            if len(target) == 1:
                # `from augplan import name`: a unit when name is one, else the root.
                for alias in node.names:
                    if alias.name == "__version__":
                        continue
                    found.append(["augplan", alias.name] if alias.name in LAYER_OF else ["augplan"])
            else:
                found.append(target)
    return found


def _all_edges():
    edges = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        importer = _unit(_module_name(path))
        source = path.read_text(encoding="utf-8")
        for target in _imported_modules(source, _module_name(path), path.name == "__init__.py"):
            edges.setdefault((importer, _unit(target)), []).append(path.relative_to(PACKAGE.parent).as_posix())
    return edges


def test_every_unit_has_a_layer():
    units = {_unit(_module_name(path)) for path in PACKAGE.rglob("*.py")}
    assert units - set(LAYER_OF) == set()


def test_imports_go_down_the_layers_only():
    wrong = sorted(
        f"{files[0]}: {importer} imports {imported}"
        for (importer, imported), files in _all_edges().items()
        if importer != imported
        and LAYER_OF[imported] >= LAYER_OF[importer]
    )
    assert wrong == []


@pytest.mark.parametrize("source, here, is_init, expected", [
    ("from ..recipe.parse import parse_recipe", ["augplan", "check", "check"], False, [["augplan", "recipe", "parse"]]),
    ("from . import check", ["augplan", "check", "check"], False, [["augplan", "check"]]),
    ("from .check import check_recipe", ["augplan", "check"], True, [["augplan", "check", "check"]]),
    ("from augplan import __version__", ["augplan", "vet", "job"], False, []),
    ("from augplan import parallel", ["augplan", "cli"], False, [["augplan", "parallel"]]),
    ("def f():\n    import augplan.render.page", ["augplan", "vet", "job"], False, [["augplan", "render", "page"]]),
    ("import numpy", ["augplan", "vet", "job"], False, []),
])
def test_import_reader(source, here, is_init, expected):
    # The reader itself, on hand-written sources: relative imports resolve against the module's package.
    assert _imported_modules(source, here, is_init) == expected
