"""The ``manybody`` command line: parsing (parser.py) and the commands (commands.py)."""

from manybody.cli.parser import main

__all__ = ["main"]
