"""Command-line interface (typer): parses, calls the library, prints and writes."""
from .app import app, main

__all__ = ["app", "main"]
