"""Command-line interface (typer): parses, calls a workflow, prints."""
from paths.cli.app import app, load_commands, main

load_commands()

__all__ = ["app", "main"]
