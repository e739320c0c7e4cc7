"""The ``bench`` command: a thin dispatcher over one module per subcommand.

Each module of this package that defines ``register(subparsers)`` is a
subcommand: it adds its parser and sets ``func``; ``main`` never special-cases
one. ``ORDER`` (an int, default 50) places it in ``bench --help``. Exit codes, as
documented for every subcommand: 0 success, 1 a scenario failed or errored, 2 invalid input.
"""

from __future__ import annotations

import argparse
import importlib
import sys

import pkgutil


def _subcommand_modules():
    mods = []
    for info in pkgutil.iter_modules(__path__):
        mod = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(mod, "register"):
            mods.append(mod)
    return sorted(mods, key=lambda m: (getattr(m, "ORDER", 50), m.__name__))

EXIT_OK, EXIT_FAILED, EXIT_INVALID = 0, 1, 2


class UsageError(Exception):
    """Bad input given on the command line: printed as one line, exit code 2."""


def build_parser() -> argparse.ArgumentParser:
    from bench import __version__

    parser = argparse.ArgumentParser(
        prog="bench",
        description="Scenario test bench for legged-robot controllers (MuJoCo, headless).",
    )
    parser.add_argument("--version", action="version", version=f"quadruped-bench {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in _subcommand_modules():
        mod.register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return EXIT_INVALID
    from bench.run.errors import InvalidInput

    try:
        return int(args.func(args) or 0)
    except (UsageError, InvalidInput) as exc:
        print(f"bench {args.command}: {exc}", file=sys.stderr)
        return EXIT_INVALID
    except KeyboardInterrupt:
        print("bench: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # The reader went away (``bench list | head``): stop quietly, as Unix tools do.
        import os

        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
