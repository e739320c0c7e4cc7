"""The command-line page: every `bench` subcommand and option, from the argparse parsers of `bench.cli`."""

from __future__ import annotations

import argparse

from bench.docgen import Page
from bench.docgen.md import code, table, value

PAGE = Page(
    file="cli.md",
    title="The bench command",
    sources="the argument parsers of bench/cli/",
    for_whom="**For** anyone running `bench` by hand or in a script; **at the end** you know every "
             "command and option, its default and its exit codes (0 success, 1 a scenario failed or "
             "errored, 2 invalid input, unless a command says otherwise).",
)

_WIDTH = 100  # fixed, so the page does not depend on the terminal


def _usage(parser: argparse.ArgumentParser) -> str:
    fmt = argparse.HelpFormatter(parser.prog, width=_WIDTH)
    fmt.add_usage(parser.usage, parser._actions, parser._mutually_exclusive_groups, prefix="")
    return fmt.format_help().strip()


def _help(parser: argparse.ArgumentParser, action: argparse.Action) -> str:
    if not action.help or action.help == argparse.SUPPRESS:
        return ""
    fmt = argparse.HelpFormatter(parser.prog, width=_WIDTH)
    return fmt._expand_help(action)


def _argument(action: argparse.Action) -> str:
    if action.nargs == 0:
        return ""
    if action.metavar is not None:
        mv = action.metavar if isinstance(action.metavar, str) else " ".join(action.metavar)
    elif action.choices is not None:
        mv = "{" + ",".join(str(c) for c in action.choices) + "}"
    else:
        mv = action.dest.upper()
    if action.nargs in ("+", "*"):
        mv += " ..."
    elif isinstance(action.nargs, int) and action.nargs > 1:
        mv = " ".join([mv] * action.nargs) if action.metavar is None or isinstance(action.metavar, str) else mv
    return mv


def _default(action: argparse.Action) -> str:
    d = action.default
    if d is None or d is False or d == [] or d == argparse.SUPPRESS or action.nargs == 0:
        return ""
    return value(d)


def _subparsers(parser: argparse.ArgumentParser) -> list[tuple[str, str, argparse.ArgumentParser]]:
    out = []
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helps = {a.dest: a.help or "" for a in action._choices_actions}
            for name, sub in action.choices.items():
                out.append((name, helps.get(name, ""), sub))
    return out


def _command(parser: argparse.ArgumentParser, name: str, summary: str, level: int) -> list[str]:
    lines = [f"{'#' * level} `{parser.prog}`", ""]
    if summary:
        lines += [summary[0].upper() + summary[1:] + ".", ""]
    if parser.description and parser.description != summary:
        lines += [parser.description, ""]
    lines += ["```text", _usage(parser), "```", ""]
    rows = []
    for action in parser._actions:
        if isinstance(action, (argparse._HelpAction, argparse._SubParsersAction)):
            continue
        names = ", ".join(action.option_strings) if action.option_strings else (
            action.metavar if isinstance(action.metavar, str) else action.dest)
        rows.append([code(names), code(_argument(action)) if _argument(action) else "",
                     code(_default(action)) if _default(action) else "", _help(parser, action)])
    if rows:
        lines += [table(["option", "argument", "default", "meaning"], rows)]
    for sub_name, sub_help, sub in _subparsers(parser):
        lines += _command(sub, sub_name, sub_help, level + 1)
    return lines


def body() -> str:
    from bench.cli import build_parser

    parser = build_parser()
    subs = _subparsers(parser)
    lines = ["Commands: " + ", ".join(f"[`bench {n}`](#bench-{n})" for n, _, _ in subs) + ".", "",
             "`bench --version` prints the version. Every command takes `-h`/`--help`.", ""]
    for name, summary, sub in subs:
        lines += _command(sub, name, summary, 2)
    return "\n".join(lines)
