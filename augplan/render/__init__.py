"""Rendering: HTML report, text tables, contact sheets. The only layer that draws or writes figures."""
