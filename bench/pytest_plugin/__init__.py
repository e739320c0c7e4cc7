"""pytest plugin: scenario files as test items, a ``bench_run`` fixture, baselines and history.

Registered through the ``pytest11`` entry point (``bench = "bench.pytest_plugin"``), so
installing quadruped-bench is enough. It does nothing until asked: scenario files are
collected only from the folders given by ``--bench-scenarios`` / ini ``bench_scenarios``
(or files named on the command line), and only those matching ``bench_glob``. Every
matrix variant is an item of its own (``stand.yaml::stand[mass=6]``), and a scenario with
``trials:`` gives one item per trial (``tri.yaml::tri[trial=3]``, spread over xdist workers)
plus one verdict item (``tri.yaml::tri``, run last) judged on the pass rate as ``bench
run`` judges it; scenario tags are markers (``-m payload``). Files are loaded and checked
by the same step as ``bench check`` (robot checks included): a scenario it refuses is a
collection error at its line. An item runs its scenario through the same run path as
``bench run``, writes ``<bench_out>/<scenario>/result.json`` and ``trace.npz``, attaches
the metrics with ``record_property`` (so they land in JUnit XML), appends to the history
database as it finishes, fails with a table of criteria when the scenario fails, and, with
``--bench-baseline``, also when it regressed against the baseline. Under pytest-xdist the
workers share the items, results do not depend on ``-n``, and the controller process
writes ``summary.json``.

One module per concern: :mod:`.options` (options, ini keys, settings), :mod:`.collection`,
:mod:`.items`, :mod:`.runs` (running through the run path), :mod:`.fixture` and
:mod:`.reporting`. This module only gathers their hooks for pytest.
"""

from bench.pytest_plugin.collection import (  # noqa: F401
    ScenarioFile,
    pytest_collect_file,
    pytest_collection_finish,
    pytest_collection_modifyitems,
    pytest_report_teststatus,
    pytest_xdist_node_collection_finished,
)
from bench.pytest_plugin.fixture import BenchRunner, bench_run  # noqa: F401
from bench.pytest_plugin.items import BenchFailure, ScenarioItem, TrialItem, TrialsItem  # noqa: F401
from bench.pytest_plugin.options import (  # noqa: F401
    DEFAULT_GLOBS,
    MARKER,
    VIDEO_MODES,
    Settings,
    pytest_addoption,
    pytest_configure,
    pytest_configure_node,
)
from bench.pytest_plugin.runs import BenchRun, execute  # noqa: F401
