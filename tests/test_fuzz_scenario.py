"""Generated bad scenarios: every one ends in exit code 2 and located messages, never a traceback.

Property tests (hypothesis) build scenario files from the bundled and fixture
scenarios and break them: values replaced by wrong types, huge and tiny
numbers, NaN and infinity, very long strings and deeply nested lists; keys
removed, added, misspelt and duplicated; bytes inserted and cut; binary junk;
YAML tags that would construct Python objects; alias bombs. Each file goes
through ``bench check`` in this process (``bench.cli.main``) and must give exit
code 2 (or 0 when the change happened to keep it valid) with every line of
output in the form ``path:line:col: [field: ]message``.

Example counts: the ``ci`` profile runs 200 examples per property (the
default); ``HYPOTHESIS_PROFILE=thorough`` runs 3000 (by hand, a few minutes).
Fixed cases below cover the limits themselves (file size, nesting, aliases,
values) with memory measured, and a handful run as ``python -m bench``
subprocesses under an address-space limit.
"""

from __future__ import annotations

import contextlib
import copy
import io
import math
import os
import re
import resource
import subprocess
import sys
import tracemalloc
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis.control import currently_in_test_context
from hypothesis import strategies as st

from bench.cli import main
from bench.scenario import yamlload
from bench.scenario.ids import scenario_id, scenario_slug

REPO = Path(__file__).resolve().parents[1]

_COUNTS = {"ci": 200, "thorough": 3000}
PROFILE = os.environ.get("HYPOTHESIS_PROFILE", "ci")
for _name, _n in _COUNTS.items():
    settings.register_profile(f"bench-fuzz-{_name}", max_examples=_n, deadline=None, print_blob=True,
                              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
FUZZ = settings.get_profile(f"bench-fuzz-{PROFILE if PROFILE in _COUNTS else 'ci'}")

#: One line of `bench check` output for a problem.
LINE = re.compile(r"^(?P<file>.+?):(?P<line>\d+):(?P<col>\d+): (?P<rest>.+)$")
#: Messages about a file as a whole (no field); any other problem line is `dotted.path: message`.
FIELDLESS = ("YAML syntax error", "the file is", "control character", "file is", "the top level", "unreadable YAML",
             "cannot read", "no such file", "invalid scenario", "... and ")
SUMMARY = re.compile(r"^\d+ problems? found; nothing was run$")


def _seed_documents() -> list[dict]:
    files = sorted((REPO / "scenarios").rglob("*.yaml")) + [REPO / "tests" / "fixtures" / "scenarios" /
                                                             "full-course.yaml"]
    docs = [yaml.safe_load(f.read_text()) for f in files]
    docs = [d for d in docs if "extends" not in d]
    base = yaml.safe_load((REPO / "tests" / "fixtures" / "scenarios" / "_base-trot.yaml").read_text())
    docs.append(dict(base, name="grid", matrix={"payloads.crate.mass": [2, 6], "commands.1.vx": [0.2, 0.4]}))
    docs.append(dict(base, name="trials", trials=3, randomize={"payloads.crate.mass": [1, 5],
                                                               "ground.friction": {"choice": [0.5, 0.9]}}))
    return docs


SEEDS = _seed_documents()
SEED_TEXTS = [yaml.safe_dump(d, sort_keys=False) for d in SEEDS]


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def check_file(path: Path) -> tuple[int, str]:
    """``bench check PATH`` in this process: exit code and what it printed on stderr."""
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        try:
            rc = main(["check", str(path)])
        except SystemExit as exc:  # argparse; never expected here
            rc = exc.code
    return rc, err.getvalue()


def _note(what: str) -> None:
    if currently_in_test_context():   # hypothesis statistics (pytest --hypothesis-show-statistics)
        event(what)


def assert_reported(rc: int, err: str, path: Path | set, *, may_be_valid: bool = True, needs_field: bool = False,
                    n_lines: int | None = None) -> list[re.Match]:
    """Exit code 2 and only located problem lines (exit 0, nothing printed, if still valid and allowed)."""
    assert "Traceback" not in err
    if rc == 0 and may_be_valid:
        _note("still valid")
        assert err == ""
        return []
    assert rc == 2, err
    lines = err.rstrip("\n").split("\n")
    assert SUMMARY.match(lines[-1]), lines[-1]
    matches = []
    for text in lines[:-1]:
        m = LINE.match(text)
        assert m, f"not a located problem: {text!r}"
        # the files here extend nothing: every problem is in the file itself
        assert m.group("file") in ({str(p) for p in path} if isinstance(path, set) else {str(path)}), text
        assert int(m.group("line")) >= 1 and int(m.group("col")) >= 1
        if n_lines is not None:
            assert int(m.group("line")) <= n_lines + 1, text
        matches.append(m)
    assert matches
    if needs_field:
        assert any(": " in m.group("rest") and not m.group("rest").startswith(FIELDLESS) for m in matches), err
    _note("invalid")
    return matches


# --------------------------------------------------------------------------- values

def _nested(depth: int):
    value: object = 1
    for _ in range(depth):
        value = [value]
    return value


NASTY = st.one_of(
    st.none(), st.booleans(),
    st.integers(), st.integers(min_value=2**63 - 2, max_value=2**63 + 2), st.just(10**400), st.just(-(10**400)),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e-320, 5e-324, 1e308, -1e308, math.inf, -math.inf, math.nan, 1e-9, 1e9]),
    st.text(max_size=30), st.sampled_from(["", " ", "1 kg", "0.5 s", "yes", "NaN", "0x1F", "1e999", "~", "null",
                                           "${HOME}", "../../etc/passwd", "\u202e", "x" * 20_000]),
    st.lists(st.integers(), max_size=4), st.lists(st.floats(), min_size=1, max_size=4),
    st.dictionaries(st.text(max_size=5), st.integers(), max_size=3),
    st.integers(min_value=1, max_value=60).map(_nested),
    st.just(2000).map(lambda n: list(range(n))),   # more items than any list may have
)


def _paths(doc, prefix=()):
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(doc, list) and len(doc) <= 50:   # not into a 2000-item list put there by a mutation
        for i, v in enumerate(doc):
            yield from _paths(v, prefix + (i,))


def _parent(doc, path):
    for p in path[:-1]:
        doc = doc[p]
    return doc


@st.composite
def mutated_documents(draw):
    doc = copy.deepcopy(draw(st.sampled_from(SEEDS)))
    for _ in range(draw(st.integers(1, 3))):
        paths = list(_paths(doc))[1:]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent, last = _parent(doc, path), path[-1]
        how = draw(st.sampled_from(["replace", "replace", "replace", "delete", "add", "rename", "wrap"]))
        if how == "replace":
            parent[last] = copy.deepcopy(draw(NASTY))
        elif how == "delete":
            del parent[last]
        elif how == "add" and isinstance(parent, dict):
            parent[draw(st.text(min_size=1, max_size=12))] = copy.deepcopy(draw(NASTY))
        elif how == "rename" and isinstance(parent, dict) and isinstance(last, str) and last:
            i = draw(st.integers(0, len(last) - 1))
            parent[last[:i] + last[i + 1:] + draw(st.sampled_from(["", "s", "_", "X"]))] = parent.pop(last)
        elif how == "wrap":
            parent[last] = draw(st.sampled_from([[parent[last]], {"value": parent[last]}]))
    return doc


def _dump(doc, flow) -> str:
    return yaml.safe_dump(doc, sort_keys=False, default_flow_style=flow, allow_unicode=True, width=10**6)


@FUZZ
@given(mutated_documents(), st.sampled_from([False, None, True]))
def test_mutated_documents_are_reported_with_file_line_and_field(work, doc, flow):
    text = _dump(doc, flow)
    path = work / "mutated.yaml"
    path.write_text(text, encoding="utf-8")
    rc, err = check_file(path)
    assert_reported(rc, err, path, needs_field=True, n_lines=text.count("\n"))


# --------------------------------------------------------------------------- text and bytes

JUNK = st.sampled_from(list(":-[]{}&*!|>'\"#%@`,? \t\n") + [
    "  ", "\n  ", "- ", ": ", "&a ", "*a ", "*nope ", "<<: ", "<<: *a\n", "!!str ", "!!binary ", "!x ",
    "---\n", "...\n", "\\", "\x85", "\ufeff", "\u00e9", "\x00", "\x1b[31m", "\r", "\r\n", "%YAML 1.1\n",
    "? ", "{a: 1, a: 2}", "[[[[[[", "]]]", "\"unterminated", "'", "0x", "1e999", ".nan", "-.inf",
])


@st.composite
def mutated_texts(draw):
    lines = draw(st.sampled_from(SEED_TEXTS)).split("\n")
    for _ in range(draw(st.integers(1, 5))):
        how = draw(st.sampled_from(["insert", "insert", "cut", "duplicate-line", "swap", "indent", "truncate"]))
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        line = lines[i] if lines else ""
        if how == "insert":
            j = draw(st.integers(0, len(line)))
            lines[i] = line[:j] + draw(JUNK) + line[j:]
        elif how == "cut" and line:
            j = draw(st.integers(0, len(line) - 1))
            lines[i] = line[:j] + line[j + draw(st.integers(1, 8)):]
        elif how == "duplicate-line":
            lines.insert(draw(st.integers(0, len(lines))), line)
        elif how == "swap" and len(lines) > 1:
            k = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[k] = lines[k], lines[i]
        elif how == "indent":
            lines[i] = draw(st.sampled_from(["", " ", "  ", "\t", "    "])) + line.lstrip(" ")
        elif how == "truncate":
            lines = lines[: i + 1]
            lines[-1] = line[: draw(st.integers(0, len(line)))]
    return "\n".join(lines)


@FUZZ
@given(mutated_texts())
def test_broken_text_is_reported_with_file_and_line(work, text):
    path = work / "text.yaml"
    path.write_bytes(text.encode("utf-8", "surrogatepass"))
    rc, err = check_file(path)
    assert_reported(rc, err, path, n_lines=text.count("\n") + text.count("\r") + text.count("\x85"))


@FUZZ
@given(st.one_of(st.binary(max_size=3000), st.text(max_size=300).map(lambda t: t.encode("utf-8", "surrogatepass")),
                 st.sampled_from([b"", b" ", b"\n\n", b"\xef\xbb\xbf", b"~", b"null", b"[]", b"{}", b"- a", b"42",
                                  b"\x00" * 100, b"\xff\xfe" + "name: x".encode("utf-16-le"),
                                  b"\x89PNG\r\n\x1a\n" + bytes(range(256)), b"PK\x03\x04" + b"\x00" * 50])))
def test_junk_files_are_reported(work, data):
    path = work / "junk.yaml"
    path.write_bytes(data)
    rc, err = check_file(path)
    assert_reported(rc, err, path, may_be_valid=False)


# --------------------------------------------------------------------------- hostile YAML

MARKER = "pwned-marker"
PYTHON_TAGS = [
    '!!python/object/apply:os.system ["touch {m}"]',
    '!!python/object/apply:builtins.exec ["open(\'{m}\', \'w\')"]',
    '!!python/object/new:os.system ["touch {m}"]',
    "!!python/name:os.system",
    "!!python/module:os",
    '!!python/object:builtins.dict {{a: 1}}',
    '!<tag:yaml.org,2002:python/object/apply:os.system> ["touch {m}"]',
    "!!binary aGVsbG8=", "!!set {{a, b}}", "!!omap [a: 1]", "!!timestamp 2001-12-14", "!custom 3", "!!float x",
    "!!int 1.5", "!!bool maybe", "!!map [1, 2]", "!!seq {{a: 1}}", "!!str [1]",
]


@st.composite
def hostile_documents(draw):
    doc = copy.deepcopy(draw(st.sampled_from(SEEDS)))
    key = draw(st.sampled_from(sorted(doc)))
    value = doc.pop(key)
    kind = draw(st.sampled_from(["tag", "bomb", "deep", "duplicate", "recursive", "undefined-alias"]))
    head = _dump(doc, False)
    if kind == "tag":
        line = f"{key}: {draw(st.sampled_from(PYTHON_TAGS)).format(m=MARKER)}\n"
    elif kind == "bomb":
        width, depth = draw(st.integers(2, 12)), draw(st.integers(2, 12))
        rows = [f"b0: &b0 [{', '.join(['x'] * width)}]"]
        rows += [f"b{i}: &b{i} [{', '.join([f'*b{i - 1}'] * width)}]" for i in range(1, depth)]
        line = "bomb:\n" + "".join(f"  {r}\n" for r in rows) + f"{key}: *b{depth - 1}\n"
    elif kind == "deep":
        n = draw(st.integers(30, 3000))
        line = f"{key}: " + draw(st.sampled_from(["[" * n + "]" * n, "{a: " * n + "1" + "}" * n])) + "\n"
    elif kind == "duplicate":
        line = _dump({key: value}, False) * draw(st.integers(2, 40))
    elif kind == "recursive":
        line = f"{key}: &r [1, *r]\n"
    else:
        line = f"{key}: *undefined\n"
    return head + line


@FUZZ
@given(hostile_documents())
def test_hostile_yaml_is_refused_without_running_anything(work, text):
    before = os.getcwd()
    os.chdir(work)   # a python/object tag that ran would leave MARKER here
    try:
        path = work / "hostile.yaml"
        path.write_text(text, encoding="utf-8")
        rc, err = check_file(path)
        assert_reported(rc, err, path, may_be_valid=False, n_lines=text.count("\n"))
        assert not (work / MARKER).exists()
    finally:
        os.chdir(before)   # later tests in this worker use paths relative to where pytest started


# --------------------------------------------------------------------------- names and result folders

@FUZZ
@given(st.text(max_size=300), st.dictionaries(st.text(max_size=20), st.one_of(st.text(max_size=40), st.integers(),
                                                                               st.floats(), st.none()), max_size=3))
def test_no_scenario_name_or_variant_leaves_the_results_folder(work, name, variant):
    sid = scenario_id(name, variant)
    slug = scenario_slug(sid)
    assert re.fullmatch(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,119}", slug), slug
    assert slug not in (".", "..") and ".." not in slug
    from bench.report.results import scenario_dir

    d = scenario_dir(work / "results", slug)
    assert d.parent == work / "results" and d.name == slug


# --------------------------------------------------------------------------- the limits themselves

MIB = 1 << 20


def _peak_mb(fn) -> float:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 1e6
    finally:
        tracemalloc.stop()


@pytest.mark.parametrize("name, make, words", [
    ("flow-list", lambda: "name: x\nduration: 1\ntags: [" + ",".join(["a"] * 150_000) + "]\n",
     f"more than {yamlload.MAX_NODES} values"),
    ("block-list", lambda: "name: x\nduration: 1\ntags:\n" + "- a\n" * 150_000, f"more than {yamlload.MAX_NODES} values"),
    ("long-string", lambda: "name: x\nduration: 1\ndescription: " + "a" * (MIB - 100) + "\n",
     f"value longer than {yamlload.MAX_STRING_CHARS} characters"),
    ("deep-flow", lambda: "name: x\nduration: 1\ndescription: " + "[" * 100_000 + "]" * 100_000 + "\n",
     f"nesting deeper than {yamlload.MAX_DEPTH} levels"),
    ("deep-block", lambda: "name: x\nduration: 1\nd:\n" + "".join(" " * i + f"k{i}:\n" for i in range(1, 1000)),
     f"nesting deeper than {yamlload.MAX_DEPTH} levels"),
    ("many-duplicates", lambda: "name: x\nduration: 1\n" + "name: y\n" * 5_000,
     f"more than {yamlload.MAX_DUPLICATE_KEYS} duplicate keys"),
    ("billion-laughs", lambda: "".join(f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * 9) + "]\n" if i else
                                       "l0: &l0 [lol, lol, lol, lol, lol, lol, lol, lol, lol]\n" for i in range(10)),
     f"more than {yamlload.MAX_NODES} values after expanding aliases"),
    ("many-aliases", lambda: "a: &a 1\nb: [" + ", ".join(["*a"] * 500) + "]\n",
     f"more than {yamlload.MAX_ALIASES} aliases"),
])
def test_limits_stop_hostile_files_in_bounded_memory(work, name, make, words):
    path = work / f"{name}.yaml"
    path.write_text(make())
    assert path.stat().st_size <= yamlload.MAX_FILE_BYTES
    box = {}
    peak = _peak_mb(lambda: box.update(zip(("rc", "err"), check_file(path))))
    matches = assert_reported(box["rc"], box["err"], path, may_be_valid=False)
    assert any(words in m.group("rest") for m in matches), box["err"]
    assert peak < 200, f"{name}: {peak:.0f} MB"   # the limits keep it to some tens of MB


def test_big_and_sparse_files_are_refused_before_reading(work):
    big = work / "big.yaml"
    big.write_bytes(b"name: x\n" + b"#" * (5 * MIB))
    sparse = work / "sparse.yaml"
    with open(sparse, "wb") as fh:
        fh.truncate(3 << 30)   # 3 GiB of nothing: must not be read
    for path in (big, sparse):
        peak = _peak_mb(lambda: check_file(path))
        rc, err = check_file(path)
        [m] = assert_reported(rc, err, path, may_be_valid=False)
        assert f"more than the {yamlload.MAX_FILE_BYTES} byte limit" in m.group("rest")
        assert peak < 20


def test_limits_are_what_the_readme_says():
    assert (yamlload.MAX_FILE_BYTES, yamlload.MAX_DEPTH, yamlload.MAX_ALIASES, yamlload.MAX_NODES,
            yamlload.MAX_STRING_CHARS, yamlload.MAX_DUPLICATE_KEYS) == (1 << 20, 32, 100, 20_000, 16_384, 20)


def _limit_memory():  # 1 GiB of address space: a blow-up would fail with MemoryError, not take the machine
    resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))


@pytest.mark.parametrize("command", ["check", "run"])
def test_a_handful_through_the_real_command(work, command):
    cases = {
        "bomb.yaml": "".join(f"l{i}: &l{i} [" + ", ".join([f"*l{i - 1}"] * 9) + "]\n" if i else
                             "l0: &l0 [lol, lol, lol, lol, lol, lol, lol, lol, lol]\n" for i in range(10)),
        "tag.yaml": f'name: x\nduration: !!python/object/apply:os.system ["touch {MARKER}"]\n',
        "binary.yaml": bytes(range(256)) * 40,
        "nan.yaml": "name: x\nduration: .nan\ntimestep: -.inf\nseed: 1e999\n",
        "types.yaml": "name: [1]\nduration: '2'\npayloads: {a: 1}\nterrain: [{slope: 3}]\ncriteria: 7\n",
        "big.yaml": "name: x\n" + "#" * (2 * MIB),
    }
    paths = set()
    for name, text in cases.items():
        path = work / f"sub-{command}-{name}"
        (path.write_bytes if isinstance(text, bytes) else path.write_text)(text)
        paths.add(path)
    extra = ["--out", str(work / "never")] if command == "run" else []
    proc = subprocess.run([sys.executable, "-m", "bench", command, *map(str, sorted(paths)), *extra],
                          capture_output=True, text=True, cwd=work, preexec_fn=_limit_memory, timeout=120)
    assert proc.stdout == ""
    matches = assert_reported(proc.returncode, proc.stderr, paths, may_be_valid=False)
    assert {m.group("file") for m in matches} == {str(p) for p in paths}   # every file reported, in one pass
    assert not (work / MARKER).exists() and not (work / "never").exists()
