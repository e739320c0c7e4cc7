"""``python -m bench.docgen [--check] [--out DIR]``: write (or check) the generated reference pages."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from bench.docgen import COMMAND, differing, reference_dir, write


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog=COMMAND, description="Generate docs/reference/*.md from the code.")
    p.add_argument("--check", action="store_true", help="write nothing; exit 1 when a page is out of date")
    p.add_argument("--out", default=None, metavar="DIR", help="folder to write (default docs/reference/ of this checkout)")
    args = p.parse_args(argv)
    target = Path(args.out) if args.out else reference_dir()
    if args.check:
        bad = differing(target)
        for name in bad:
            print(f"{target / name}: out of date", file=sys.stderr)
        if bad:
            print(f"run `{COMMAND}` and commit the pages", file=sys.stderr)
        return 1 if bad else 0
    changed = write(target)
    print(f"{len(changed)} page(s) written to {target}" if changed else "reference pages are up to date")
    return 0


if __name__ == "__main__":
    sys.exit(main())
