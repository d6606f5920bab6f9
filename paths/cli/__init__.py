"""Command-line interface (typer): parses, calls the library, prints and writes."""
from paths.cli.app import _load_commands, app, main

_load_commands()

__all__ = ["app", "main"]
