"""Command line: ``luxsweep``.

Subcommands are registered by the modules that implement them; each appears only
once it works end to end.
"""

from __future__ import annotations

import argparse
import sys

from sweep import __version__


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="luxsweep",
        description=(
            "Annual climate-based daylight option sweeps: expand a study file into "
            "variants, compute cached daylight coefficients, run on Dask, write Zarr "
            "results, rank and report."
        ),
    )
    parser.add_argument("--version", action="version", version=f"luxsweep {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    parser.add_subparsers(dest="command", metavar="COMMAND")
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    return 0


if __name__ == "__main__":
    sys.exit(main())
