"""The command line: `plumbrule fit | value | new | run | demo` (cli.main holds the parser)."""

from plumbrule.cli.main import build_parser, main, run

__all__ = ["build_parser", "main", "run"]
