"""The `recoilsim` command line (argparse only; nothing imports it)."""

from .commands import build_parser, main

__all__ = ["build_parser", "main"]
