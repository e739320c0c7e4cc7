"""``bench schema``: print the JSON Schema of scenario files (for editors and CI validators)."""

from __future__ import annotations

import json
import sys

from bench.cli import UsageError


def register(sub) -> None:
    p = sub.add_parser("schema", help="print the JSON Schema of scenario files",
                       description="Print the JSON Schema (draft 2020-12) of scenario YAML files, generated from "
                                   "the same definitions the loader uses. Point an editor's YAML language server "
                                   "at it to validate and complete scenario files.")
    p.add_argument("-o", "--output", metavar="FILE", help="write to FILE instead of standard output")
    p.add_argument("--indent", type=int, default=2, metavar="N", help="indentation (default 2; 0 for one line)")
    p.set_defaults(func=run)


def run(args) -> int:
    from bench.scenario import scenario_json_schema

    indent = args.indent if args.indent and args.indent > 0 else None
    text = json.dumps(scenario_json_schema(), indent=indent, sort_keys=False) + "\n"
    if args.output:
        try:
            with open(args.output, "w", encoding="utf-8") as fh:
                fh.write(text)
        except OSError as exc:
            raise UsageError(f"cannot write {args.output}: {exc}") from None
        print(f"wrote {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0


ORDER = 45
