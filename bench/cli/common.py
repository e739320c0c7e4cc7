"""Helpers shared by subcommands: loading scenarios and printing their problems."""

from __future__ import annotations

import sys
from pathlib import Path

from bench.errors import ScenarioError, ScenarioErrors


def load_or_report(paths: list[str], roots: list[str] | None = None):
    """Load scenarios; on problems print each as ``path:line:col: message`` and return None."""
    from bench.scenario.loader import load_scenarios

    from bench.world.validate import check_against_robot

    try:
        scenarios = load_scenarios(list(paths), roots=[Path(r) for r in (roots or [])])
        errors = [e for sc in scenarios for e in check_against_robot(sc)]
        if errors:
            raise ScenarioErrors(errors)
        return scenarios
    except ScenarioErrors as exc:
        for err in exc.errors:
            print(str(err), file=sys.stderr)
        n = len(exc.errors)
        print(f"{n} problem{'s' if n != 1 else ''} found; nothing was run", file=sys.stderr)
        return None
    except ScenarioError as exc:
        print(str(exc), file=sys.stderr)
        return None


def print_table(rows: list[list[str]], header: list[str], file=None) -> None:
    file = file or sys.stdout
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    line = "  ".join(h.ljust(w) for h, w in zip(header, widths))
    print(line.rstrip(), file=file)
    print("  ".join("-" * w for w in widths), file=file)
    for r in rows:
        print("  ".join(str(c).ljust(w) for c, w in zip(r, widths)).rstrip(), file=file)
