"""Subcommands of the ``basinkit`` command line (one module each, loaded on demand)."""
