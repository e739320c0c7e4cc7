"""The external protocol page: the QBX protocol from `bench.controllers.external` and sealed mode's addition."""

from __future__ import annotations

from bench.docgen import Page
from bench.docgen.md import docstring, rst_to_md

PAGE = Page(
    file="external-protocol.md",
    title="External controller protocol",
    sources="bench/controllers/external.py and bench/controllers/sealed.py",
    for_whom="**For** anyone writing a controller in another language (or a tool that speaks to one); "
             "**at the end** you know every line of the protocol, its timeouts and its failures. The how-to "
             "[a controller in another language](../how-to/other-language.md) has a complete C++ example.",
)


def body() -> str:
    from bench.controllers import external, sealed

    return "\n".join([
        f"Protocol `{external.PROTOCOL}` version {external.PROTOCOL_VERSION}; "
        f"`--controller \"{external.PREFIX}PROGRAM ARGS\"` runs a program with it.",
        "",
        rst_to_md(docstring(external)),
        "",
        "## Sealed mode (`sealed:NAME`)",
        "",
        rst_to_md(docstring(sealed)),
    ])
