"""The command line: a thin Typer layer over the Python API."""
