"""The starting recipes, installed as the package ``augplan.recipes``.

This folder is their one home: ``pyproject.toml`` maps the package name onto
it, so a checkout and an installed augplan read the same files
(``augplan draft --list``, ``augplan draft DATA --start NAME``).
"""
