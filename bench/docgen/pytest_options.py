"""The pytest plugin page: options and ini keys, read from `bench.pytest_plugin.options.pytest_addoption`."""

from __future__ import annotations

from bench.docgen import Page
from bench.docgen.md import code, docstring, rst_to_md, table, value

PAGE = Page(
    file="pytest-options.md",
    title="pytest plugin options",
    sources="bench/pytest_plugin/options.py",
    for_whom="**For** anyone running scenarios from pytest in a controller repository; **at the end** "
             "you know every command-line option and `[tool.pytest.ini_options]` key of the plugin. "
             "The tutorial [the bench in your CI](../tutorial/ci.md) puts them together.",
)


class _Recorder:
    """Stands in for pytest's parser and option group; records what the plugin declares."""

    def __init__(self) -> None:
        self.options: list[tuple[tuple[str, ...], dict]] = []
        self.ini: list[tuple[str, str, dict]] = []

    def getgroup(self, *args, **kwargs) -> "_Recorder":
        return self

    def addoption(self, *names: str, **kwargs) -> None:
        self.options.append((names, kwargs))

    def addini(self, name: str, help: str, **kwargs) -> None:
        self.ini.append((name, help, kwargs))


def body() -> str:
    from bench.pytest_plugin import options

    rec = _Recorder()
    options.pytest_addoption(rec)
    opt_rows = []
    for names, kw in rec.options:
        arg = kw.get("metavar") or ("{" + ",".join(kw["choices"]) + "}" if kw.get("choices") else "")
        if kw.get("action") in ("store_true", "store_false"):
            arg = ""
        opt_rows.append([code(", ".join(names)), code(arg) if arg else "", kw.get("help", "")])
    ini_rows = []
    for name, help_text, kw in rec.ini:
        d = kw.get("default")
        ini_rows.append([code(name), kw.get("type") or "string", code(value(d)) if d not in (None, "", []) else "",
                         help_text])
    intro = rst_to_md(docstring(options).split("\n\n", 1)[-1])
    return "\n".join([
        "The plugin is installed with the package (entry point `pytest11`) and does nothing until "
        "scenarios are configured. Command-line options win over ini keys. `-p no:bench` switches it off; "
        "scenario tags become markers (`pytest -m payload`), and every item carries the marker `bench`.",
        "",
        intro,
        "",
        "## Command-line options",
        "",
        table(["option", "argument", "meaning"], opt_rows),
        "## ini keys (`[tool.pytest.ini_options]` in pyproject.toml, or pytest.ini)",
        "",
        table(["key", "type", "default", "meaning"], ini_rows),
        "## The `bench_run` fixture",
        "",
        rst_to_md(_fixture_doc()),
    ])


def _fixture_doc() -> str:
    from bench.pytest_plugin import fixture

    return docstring(fixture)


def _fixture_doc() -> str:  # noqa: F811 - the full section: fixture, call, and what a call returns
    from bench.docgen.md import members_table
    from bench.pytest_plugin import fixture, runs

    call = fixture.BenchRunner.__call__
    import inspect

    sig = str(inspect.signature(call)).replace("(self, ", "(")
    return "\n".join([
        docstring(fixture.bench_run),
        "",
        f"`bench_run{sig}`: {docstring(call)}",
        "",
        f"`{runs.BenchRun.__name__}`: {docstring(runs.BenchRun)}",
        "",
        members_table(runs.BenchRun),
    ])
