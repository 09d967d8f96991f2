"""Recipes: the op table, the Recipe and Transform types, parsing, validation and the JSON Schema."""
