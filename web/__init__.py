"""Templates and static files of the pages, shipped as package data (see pyproject.toml)."""
