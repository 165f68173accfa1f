"""The ``basinkit`` command line: click commands that parse options, call the workflow steps
and print."""

from .main import cli, main

__all__ = ["cli", "main"]
