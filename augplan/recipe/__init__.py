"""Recipes: the op table, the Recipe and Transform types, parsing, validation and the JSON Schema.

Modules: `ops` (the op table, each fact about an op once), `parse` (reading,
validating, hashing and writing a recipe) and `shipped` (the starting
recipes of ``recipes/``).
"""

from augplan.recipe.ops import OP_TABLE
from augplan.recipe.parse import (
    Recipe,
    RecipeError,
    Transform,
    parse_recipe,
    read_recipe,
    recipe_hash,
    recipe_to_dict,
    write_recipe,
)

__all__ = [
    "Recipe",
    "Transform",
    "RecipeError",
    "OP_TABLE",
    "read_recipe",
    "parse_recipe",
    "recipe_hash",
    "recipe_to_dict",
    "write_recipe",
]
