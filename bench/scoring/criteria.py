"""The built-in criteria: named rules over metrics that a scenario sets a limit for.

A criterion is an object with ``name``, ``description``, ``unit`` and
``evaluate(metrics, series, trace, limit, score_from) -> CriterionResult``,
plus the attributes validation reads (``boolean``, ``ge``, ``le``) and
``direction`` (``"max"``: a ceiling, ``"min"``: a floor). The built-ins below
are registered in the entry point group ``bench.criteria`` by this package's
own ``pyproject.toml``, exactly as a user's would be; the one registry of
criteria is `bench.scenario.criteria`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bench.scenario.criteria import all_criteria


@dataclass
class CriterionResult:
    name: str
    value: float | None
    limit: float | None
    passed: bool
    first_violation_s: float | None
    unit: str = ""

    def to_dict(self) -> dict:
        return {"name": self.name, "value": self.value, "limit": self.limit, "passed": self.passed,
                "first_violation_s": self.first_violation_s}

    def sentence(self) -> str:
        if self.name == "no_fall":
            return f"no_fall: the robot fell at {self.first_violation_s:.2f} s"
        op = ">" if self.value is not None and self.limit is not None and self.value > self.limit else "<"
        when = f" (first at {self.first_violation_s:.2f} s)" if self.first_violation_s is not None else ""
        return f"{self.name}: {_fmt(self.value)}{self.unit} {op} limit {_fmt(self.limit)}{self.unit}{when}"


def _fmt(x: float | None) -> str:
    if x is None:
        return "n/a"
    return f"{x:.3g}" if abs(x) < 1000 else f"{x:.0f}"


@dataclass(frozen=True)
class MetricCriterion:
    """Passes when ``metrics[metric]`` is at most (``sense='max'``) or at least (``'min'``) the limit.

    ``series`` names the per-tick series whose first crossing of the limit gives
    the first violation time; criteria over averages have none.
    """

    name: str
    metric: str
    description: str
    unit: str = ""
    sense: str = "max"
    series: str | None = None
    ge: float | None = 0.0      # the limits a scenario may write
    le: float | None = None
    boolean = False

    @property
    def direction(self) -> str:
        """``"max"``: the value must stay at or under the limit; ``"min"``: at or over it."""
        return self.sense

    def evaluate(self, metrics, series, trace, limit, score_from: float) -> CriterionResult:
        value = metrics.get(self.metric)
        lim = float(limit)
        if value is None:
            return CriterionResult(self.name, None, lim, False, None, self.unit)
        passed = value <= lim if self.sense == "max" else value >= lim
        first = None
        if not passed and self.series and self.series in series and len(trace):
            t = trace["t"]
            x = np.abs(series[self.series])
            over = np.flatnonzero((t >= score_from) & (x > lim))
            first = float(t[over[0]]) if over.size else None
        elif not passed and self.sense == "min" and len(trace):
            first = float(trace["t"][-1])
        return CriterionResult(self.name, float(value), lim, bool(passed), first, self.unit)


@dataclass(frozen=True)
class NoFall:
    name: str = "no_fall"
    description: str = "the robot does not fall (trunk or leg on the ground, or trunk under the fall height)"
    unit: str = ""
    boolean = True
    direction = "max"   # the value is 1 when the robot fell, 0 when not: a ceiling with no written limit

    def evaluate(self, metrics, series, trace, limit, score_from: float) -> CriterionResult:
        fell = metrics.get("fell", 0.0) > 0
        if limit is False:
            return CriterionResult(self.name, metrics.get("fell", 0.0), None, True, None)
        first = float(trace.meta.get("fall_time", -1.0)) if fell else None
        return CriterionResult(self.name, 1.0 if fell else 0.0, None, not fell, first)


NO_FALL = NoFall()
HEIGHT_ERROR_MAX = MetricCriterion("height_error_max", "height_error_max",
                                   "largest |trunk height error| against the nominal height above the ground, m",
                                   " m", series="height_error")
HEIGHT_ERROR_RMS = MetricCriterion("height_error_rms", "height_error_rms", "RMS trunk height error, m", " m")
ROLL_ERROR_MAX_DEG = MetricCriterion("roll_error_max_deg", "roll_error_deg_max", "largest |roll| of the trunk, deg",
                                     " deg", series="roll_error_deg", le=180.0)
PITCH_ERROR_MAX_DEG = MetricCriterion("pitch_error_max_deg", "pitch_error_deg_max",
                                      "largest |pitch| of the trunk, deg", " deg", series="pitch_error_deg", le=180.0)
ROLL_ERROR_MEAN_DEG = MetricCriterion("roll_error_mean_deg", "roll_error_deg_mean", "mean |roll| of the trunk, deg",
                                      " deg", le=180.0)
PITCH_ERROR_MEAN_DEG = MetricCriterion("pitch_error_mean_deg", "pitch_error_deg_mean",
                                       "mean |pitch| of the trunk, deg", " deg", le=180.0)
DRIFT_MAX = MetricCriterion("drift_max", "drift_max", "largest horizontal drift while commanded to stand, m", " m",
                            series="drift")
DISTANCE_MIN = MetricCriterion("distance_min", "distance", "net horizontal distance travelled, m (at least)", " m",
                               sense="min")
VELOCITY_RMSE_MAX = MetricCriterion("velocity_rmse_max", "velocity_rmse",
                                    "RMSE of heading-frame velocity against the command once settled, m/s", " m/s")
YAW_RATE_RMSE_MAX = MetricCriterion("yaw_rate_rmse_max", "yaw_rate_rmse",
                                    "RMSE of yaw rate against the command once settled, rad/s", " rad/s")
TORQUE_SATURATION_MAX = MetricCriterion("torque_saturation_max", "torque_saturation",
                                        "share of ticks with a joint torque at its limit", "", le=1.0)
CONTROLLER_P99_MS_MAX = MetricCriterion("controller_p99_ms_max", "controller_ms_p99",
                                        "99th percentile of controller compute time per tick, ms", " ms")


@dataclass(frozen=True)
class PassRate:
    """Judged over a scenario's trials (the Wilson lower bound of the pass rate), never per episode."""

    name: str = "pass_rate_min"
    description: str = "share of a scenario's trials that pass, at least (judged on its Wilson lower bound)"
    unit: str = ""
    ge: float = 0.0
    le: float = 1.0
    boolean = False
    direction = "min"
    scope = "trials"

    def evaluate(self, metrics, series, trace, limit, score_from: float) -> CriterionResult:
        raise TypeError("pass_rate_min is judged over trials, not over one episode")


PASS_RATE_MIN = PassRate()


def available() -> dict[str, object]:
    """Every criterion of the registry that loads, by name (the scoring side's view of it)."""
    return all_criteria()
