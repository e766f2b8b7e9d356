"""Invented demo scenarios, shipped as package data (see pyproject.toml)."""
