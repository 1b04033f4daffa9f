"""The command line: the top layer, and the only one that imports ``widgets`` (for ``serve``)."""

from .main import build_parser, main, read_case_file

__all__ = ["build_parser", "main", "read_case_file"]
