"""Controller hooks: a seed in reset(), per-tick signals, keyword parameters without a factory."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from bench.cli import main as bench_main
from bench.controllers import registry
from bench.controllers.params import ControllerParamError, accepted_names, parse_params
from bench.controllers.seeding import controller_seed, reset_keywords
from bench.controllers.simple import JointPDController
from bench.report.results import trace_digest
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.scenario.compose import derive
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

HERE = Path(__file__).resolve().parent
STAND_1S = HERE / "fixtures" / "bench_plugin" / "stand-1s.yaml"


@pytest.fixture(scope="module")
def stand():
    sc = load_scenarios([str(STAND_1S)])[0]
    sc = derive(sc, {"duration": 0.2}, "")
    man = manifest_for(sc)
    return build_world(sc, man), sc, NominalRobot(man)


# ----------------------------------------------------------------------------------------------- seed
class NoisyPD(JointPDController):
    """Joint PD plus torque noise from the generator reset() gives it."""

    def reset(self, robot, control_dt, *, rng=None):
        super().reset(robot, control_dt)
        self.rng = rng

    def step(self, obs, command):
        return super().step(obs, command) + self.rng.normal(0.0, 0.5, len(obs.joint_pos))


class SeedOnly(JointPDController):
    def reset(self, robot, control_dt, seed=None):
        super().reset(robot, control_dt)
        self.got = seed


class AnyKeywords(JointPDController):
    def reset(self, robot, control_dt, **extra):
        super().reset(robot, control_dt)
        self.got = extra


class TwoArguments(JointPDController):
    def reset(self, robot, control_dt):   # the call every controller has always answered
        super().reset(robot, control_dt)
        self.reset_calls = getattr(self, "reset_calls", 0) + 1


def test_reset_keywords_are_read_from_the_signature():
    assert reset_keywords(TwoArguments()) == frozenset()
    assert reset_keywords(SeedOnly()) == {"seed"}
    assert reset_keywords(NoisyPD()) == {"rng"}
    assert reset_keywords(AnyKeywords()) == {"seed", "rng"}


def test_a_controller_with_randomness_is_reproducible_from_the_episode_seed(stand):
    world, sc, robot = stand
    a = run_episode(world, sc, NoisyPD(), robot, seed=3)
    b = run_episode(world, sc, NoisyPD(), robot, seed=3)
    c = run_episode(world, sc, NoisyPD(), robot, seed=4)
    assert a.status == b.status == c.status == "completed"
    assert trace_digest(a.trace.arrays) == trace_digest(b.trace.arrays)
    assert not np.array_equal(a.trace["joint_torque"], c.trace["joint_torque"])   # another seed, other noise


def test_seed_and_rng_derive_from_the_episode_seed_and_old_resets_keep_working(stand):
    world, sc, robot = stand
    s, k, old = SeedOnly(), AnyKeywords(), TwoArguments()
    for c in (s, k, old):
        assert run_episode(world, sc, c, robot, seed=7).status == "completed"
    assert s.got == controller_seed(7) != controller_seed(8)
    assert k.got["seed"] == controller_seed(7)
    assert k.got["rng"].integers(1 << 30) == np.random.default_rng(controller_seed(7)).integers(1 << 30)
    assert old.reset_calls == 1


# ------------------------------------------------------------------------------------------ signals
class Logging(JointPDController):
    def __init__(self, bad: str = ""):
        super().__init__()
        self.bad = bad

    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        self.signals = {"tick": 0.0, "pair": np.zeros(2)}
        self.k = 0

    def step(self, obs, command):
        self.k += 1
        self.signals["tick"] = float(self.k)
        self.signals["pair"][:] = (obs.t, -obs.t)
        if self.k == 20:
            self.signals["late"] = 5
        if self.bad == "shape" and self.k == 10:
            self.signals["pair"] = np.zeros(3)
        if self.bad == "name" and self.k == 10:
            self.signals["bad name"] = 1.0
        if self.bad == "text" and self.k == 10:
            self.signals["tick"] = "fast"
        return super().step(obs, command)


def test_signals_land_in_the_trace_without_touching_the_other_columns_or_the_digest(stand):
    world, sc, robot = stand
    plain = run_episode(world, sc, JointPDController(), robot, seed=0)
    logged = run_episode(world, sc, Logging(), robot, seed=0)
    A = logged.trace.arrays
    n = len(logged.trace)
    assert n == len(plain.trace) == 50
    np.testing.assert_array_equal(A["signal_tick"], np.arange(1, n + 1, dtype=float))
    np.testing.assert_array_equal(A["signal_pair"][:, 0], A["t"])
    np.testing.assert_array_equal(A["signal_pair"][:, 1], -A["t"])
    assert np.isnan(A["signal_late"][:19]).all() and (A["signal_late"][19:] == 5).all()   # NaN before it appeared
    for key, value in plain.trace.arrays.items():
        np.testing.assert_array_equal(A[key], value) if key != "controller_ms" else None
    assert trace_digest(A) == trace_digest(plain.trace.arrays)   # signals are left out of trace_sha256


@pytest.mark.parametrize("bad, words", [("shape", "changed shape from (2,) to (3,) at tick 9"),
                                        ("name", "name 'bad name' at tick 9"),
                                        ("text", "'tick' at tick 9 is not numeric")])
def test_a_broken_signal_is_the_episodes_error_naming_it(stand, bad, words):
    world, sc, robot = stand
    ep = run_episode(world, sc, Logging(bad), robot, seed=0)
    assert ep.status == "error" and words in ep.reason, ep.reason


class RaisingSignals(JointPDController):
    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        self._signals, self.k = {"x": 1.0}, 0

    @property
    def signals(self):
        self.k += 1
        if self.k == 5:
            raise KeyError("estimator not ready")
        return self._signals


def test_a_signals_property_that_raises_is_the_episodes_error(stand):
    world, sc, robot = stand
    ep = run_episode(world, sc, RaisingSignals(), robot, seed=0)
    assert ep.status == "error" and "KeyError" in ep.reason and "giving its signals at tick 3" in ep.reason, ep.reason


def test_signals_reach_the_record_the_npz_the_plots_and_the_report(tmp_path):
    registry.register("logging-pd", Logging)
    out = tmp_path / "out"
    assert bench_main(["run", str(STAND_1S), "--controller", "logging-pd", "--in-process", "--out", str(out),
                       "--no-history"]) == 0
    res = json.loads((out / "stand-1s" / "result.json").read_text())
    assert res["controller_signals"] == ["late", "pair", "tick"]
    with np.load(out / "stand-1s" / "trace.npz") as z:
        assert z["signal_tick"][-1] == 250.0 and z["signal_pair"].shape == (250, 2)
    from PIL import Image

    with Image.open(out / "stand-1s" / "plots.png") as im:   # five panels, plus three for the signals
        assert im.size[1] == (11 + 3 * 1.8) * 80
    assert bench_main(["report", str(out)]) == 0
    html = (out / "report.html").read_text()
    assert "Controller signals" in html and "<code>pair[1]</code>" in html and "<code>late</code>" in html


def test_the_l1_stack_logs_its_load_estimate(tmp_path):
    """The reference example: the L1 stack's vertical adaptive input stands for the unknown load."""
    sc = load_scenarios([str(HERE.parent / "scenarios" / "payload" / "stand-heavy-load.yaml")])[0]
    sc = derive(sc, {"duration": 1.5}, "")
    man = manifest_for(sc)
    _, ctrl = registry.make("force-qp-l1")
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=0)
    load = ep.trace["signal_l1_load_kg"]
    assert ep.status == "completed" and ep.trace["signal_l1_u"].shape == (len(load), 6)
    assert (ep.trace["signal_qp_ok"] == 1.0).all()
    # 11 kg carried: within 15 % once settled (it also absorbs the legs' unmodelled share; measured 10.9 kg)
    assert abs(load[-1] - 11.0) < 1.65


# --------------------------------------------------------------------------------------- parameters
def test_parse_params_reads_yaml_values():
    got = parse_params(["kp_pos=[40, 40, 90]", "solver=daqp", "leg_bias_ff=false", "mu=0.4", "l1_u_max=null"])
    assert got == {"kp_pos": [40, 40, 90], "solver": "daqp", "leg_bias_ff": False, "mu": 0.4, "l1_u_max": None}
    for bad in ("kp", "=3", "a b=1", "x={a: 1}", "x=[1,"):
        with pytest.raises(ControllerParamError):
            parse_params([bad])


def test_accepted_names_follow_kwargs_up_the_class_tree():
    from bench.controllers.stacks import ForceQPL1Controller

    names, open_ended = accepted_names(ForceQPL1Controller)
    assert not open_ended and {"l1_bandwidth", "kp_pos", "solver"} <= names


def test_unknown_parameter_is_invalid_input_with_did_you_mean(tmp_path, capsys):
    rc = bench_main(["run", str(STAND_1S), "--controller", "force-qp-l1", "--controller-param", "pos_kp=[1,1,1]",
                     "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert rc == 2 and "has no parameter 'pos_kp'; did you mean 'kp_pos'?" in err
    assert not (tmp_path / "o").exists()   # nothing ran, nothing was written
    rc = bench_main(["run", str(STAND_1S), "--controller", "exec:./prog", "--controller-param", "a=1",
                     "--out", str(tmp_path / "o")])
    assert rc == 2 and "external program" in capsys.readouterr().err


class Gain(JointPDController):
    name = "gain-pd"

    def __init__(self, kp=None, kd=None, label="plain"):
        super().__init__()
        self.kp_given, self.kd_given, self.label = kp, kd, label


def test_parameters_reach_the_constructor_and_the_record_and_make_a_stale_resume(tmp_path, capsys):
    registry.register("gain-pd", Gain)
    out = str(tmp_path / "out")
    base = ["run", str(STAND_1S), "--controller", "gain-pd", "--in-process", "--out", out, "--no-plots",
            "--no-history"]
    assert bench_main(base + ["--controller-param", "label=soft", "--controller-param", "kd=[1.5]"]) == 0
    res = json.loads((tmp_path / "out" / "stand-1s" / "result.json").read_text())
    assert res["controller_params"] == {"label": "soft", "kd": [1.5]}
    assert res["controller_name"] == "gain-pd" and "controller_params" in res["fingerprint_parts"]
    from bench.report.record import RunRecord

    rec = RunRecord.from_json(res)   # the readers keep the new keys and write them back unchanged
    assert rec.controller_params == {"label": "soft", "kd": [1.5]} and rec.to_json() == res
    assert bench_main(["report", out]) == 0
    assert 'kd=[1.5], label=&quot;soft&quot;' in (tmp_path / "out" / "report.html").read_text()
    capsys.readouterr()
    # --resume with the same parameters reuses the result; with others it runs again and says why
    assert bench_main(base + ["--resume", "--controller-param", "kd=[1.5]", "--controller-param", "label=soft"]) == 0
    capsys.readouterr()
    uid = json.loads((tmp_path / "out" / "stand-1s" / "result.json").read_text())["result_uid"]
    assert uid == res["result_uid"]
    assert bench_main(base + ["--resume", "--controller-param", "label=stiff"]) == 0
    err = capsys.readouterr().err
    again = json.loads((tmp_path / "out" / "stand-1s" / "result.json").read_text())
    assert again["result_uid"] != uid and again["controller_params"] == {"label": "stiff"}
    assert "set of controller parameters" in err
    # without parameters the fingerprint has no such part (runs made before keep theirs)
    assert bench_main(base) == 0
    plain = json.loads((tmp_path / "out" / "stand-1s" / "result.json").read_text())
    assert "controller_params" not in plain and "controller_params" not in plain["fingerprint_parts"]


def test_module_attribute_controllers_take_parameters_too():
    name, ctrl = registry.make("tests.test_controller_hooks:Gain", {"label": "x", "kp": [1.0]})
    assert type(ctrl).__name__ == "Gain" and ctrl.label == "x" and ctrl.kp_given == [1.0]
    with pytest.raises(ControllerParamError, match="did you mean 'label'"):
        registry.make("tests.test_controller_hooks:Gain", {"lable": "x"})


def _digest_of_run(tmp_path, name: str, *extra: str) -> str:
    out = tmp_path / name.replace(":", "_").replace(".", "_")
    assert bench_main(["run", str(STAND_1S), "--controller", name, "--in-process", "--out", str(out),
                       "--no-plots", "--no-history", *extra]) == 0
    return json.loads((out / "stand-1s" / "result.json").read_text())["trace_sha256"]


def test_sealed_controllers_get_the_same_seed_and_parameters_in_their_child(tmp_path):
    """The child process makes the controller with the parameters and resets it with the parent's seed."""
    here = _digest_of_run(tmp_path, "tests.test_controller_hooks:NoisyPD")
    assert _digest_of_run(tmp_path, "sealed:tests.test_controller_hooks:NoisyPD") == here
    soft = _digest_of_run(tmp_path, "joint-pd", "--controller-param", "kp=60")
    assert soft != _digest_of_run(tmp_path, "joint-pd")
    assert _digest_of_run(tmp_path, "sealed:joint-pd", "--controller-param", "kp=60") == soft


@pytest.mark.parametrize("command", [["limit", str(STAND_1S), "--vary", "payloads.crate.mass", "--range", "1", "5"],
                                     ["envelope", str(STAND_1S), "--x", "payloads.crate.mass", "1", "5",
                                      "--y", "duration", "0.5", "1"]])
def test_limit_and_envelope_take_controller_params_too(command, tmp_path, capsys):
    rc = bench_main(command + ["--controller", "joint-pd", "--controller-param", "kpp=3", "--out", str(tmp_path / "o")])
    assert rc == 2 and "did you mean 'kp'?" in capsys.readouterr().err
