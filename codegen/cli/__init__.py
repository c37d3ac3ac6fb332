"""The thin command line: one small module per command over the pure API."""

from edgetally.cli.main import main

__all__ = ["main"]
