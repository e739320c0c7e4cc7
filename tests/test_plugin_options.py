"""Plugin options: the seed, controller parameters, and ini paths relative to the ini file (exec: included)."""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path

import pytest

# Imported before any in-process pytest run (pytester drops what a run imported; numpy and MuJoCo load once).
import bench.controllers.simple  # noqa: F401
import bench.controllers.stacks  # noqa: F401
import bench.execute.job  # noqa: F401
import bench.report.history  # noqa: F401
import bench.scenario  # noqa: F401
from bench.pytest_plugin.options import exec_relative_to

try:
    import hypothesis  # noqa: F401
except ImportError:  # pragma: no cover
    pass

pytest_plugins = ["pytester"]

HERE = Path(__file__).resolve().parent
STAND_1S = HERE / "fixtures" / "bench_plugin" / "stand-1s.yaml"
SCRIPT = HERE / "fixtures" / "external" / "pd_controller.py"


@pytest.fixture
def project(pytester):
    scen = pytester.mkdir("scen")
    shutil.copy(STAND_1S, scen / "stand-1s.yaml")
    return pytester


def _result(p) -> dict:
    return json.loads((p.path / "out" / "stand-1s" / "result.json").read_text())


def test_exec_words_are_made_absolute_against_the_ini_folder(tmp_path):
    (tmp_path / "ctl").mkdir()
    (tmp_path / "ctl" / "pd.py").write_text("")
    got = exec_relative_to(tmp_path, "exec:python3 ctl/pd.py --kp 60 gains.yaml")
    assert got == f"exec:python3 {tmp_path / 'ctl' / 'pd.py'} --kp 60 gains.yaml"   # no gains.yaml there: kept
    assert exec_relative_to(tmp_path, "exec:./ctl/pd.py") == f"exec:{tmp_path / 'ctl' / 'pd.py'}"
    assert exec_relative_to(tmp_path, "joint-pd") == "joint-pd"


def test_an_exec_controller_in_the_ini_file_is_found_from_another_folder(project, monkeypatch):
    """The README's promise: paths in the ini options are relative to the ini file, exec: programs too."""
    ctl = project.mkdir("ctl")
    shutil.copy(SCRIPT, ctl / "pd.py")
    project.makepyprojecttoml(f"""
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "exec:{sys.executable} ctl/pd.py --kp 60"
bench_out = "out"
bench_history = "none"
""")
    sub = project.mkdir("elsewhere")
    monkeypatch.chdir(sub)
    res = project.runpytest_inprocess("-q", "..", "-p", "no:cacheprovider")
    res.assert_outcomes(passed=1)
    assert _result(project)["controller"] == f"exec:{sys.executable} {ctl / 'pd.py'} --kp 60"


def test_seed_option_and_ini_key(project):
    project.makepyprojecttoml("""
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "joint-pd"
bench_out = "out"
bench_history = "none"
bench_seed = "9"
""")
    project.runpytest("-q").assert_outcomes(passed=1)
    assert _result(project)["seed"] == 9
    project.runpytest("-q", "--bench-seed", "5").assert_outcomes(passed=1)
    assert _result(project)["seed"] == 5


def test_controller_params_from_the_ini_file_and_their_did_you_mean(project):
    project.makepyprojecttoml("""
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "joint-pd"
bench_out = "out"
bench_history = "none"
bench_controller_params = ["kp=60", "kd=1.5"]
""")
    project.runpytest("-q").assert_outcomes(passed=1)
    assert _result(project)["controller_params"] == {"kp": 60, "kd": 1.5}
    res = project.runpytest("-q", "--bench-controller-param", "kpp=3")
    assert res.ret == pytest.ExitCode.USAGE_ERROR
    res.stderr.fnmatch_lines(["*--bench-controller-param kpp: controller 'joint-pd' has no parameter 'kpp'; "
                              "did you mean 'kp'?*"])
