"""A scenario as a limit-search predicate: value of one dotted path -> pass rate of its trials.

The trials are drawn once, from the scenario as written, and the varied value
is then set in each of them: every value is judged on the same seeds and the
same randomized draws (common random numbers), so the curve moves only because
the value moves. A trial at a value has the id ``name[trial=k,mass=6.5]`` and
can be re-run alone with ``bench run``'s ``--only`` after writing that value
into the file. A value passes when the trials' verdict passes, the same rule
as ``bench run``: ``pass_rate_min`` against the lower bound of the 95 % Wilson
interval, or every trial passing when there is none.
"""

from __future__ import annotations

from pathlib import Path

from bench.errors import ScenarioErrors
from bench.execute.trials import is_trial_scenario, judge
from bench.search.limit import Evaluation


class ScenarioPredicate:
    """``predicate(values) -> [Evaluation]`` for ``find_limit``; runs episodes on ``executor``."""

    def __init__(self, scenario, path: str, *, controller: str, executor, limits=None, trials: int | None = None,
                 required: float | None = None, seed: int | None = None, out_dir: str | Path | None = None,
                 on_outcome=None, controller_params: dict | None = None):
        from bench.scenario.compose import derive
        from bench.scenario.trials import expand_trials

        overrides: dict = {}
        if trials is not None:
            overrides["trials"] = int(trials)
        if seed is not None:
            overrides["seed"] = int(seed)
        base = derive(scenario, overrides, "") if overrides else scenario
        self.scenario = scenario
        self.path = path
        self.label = path.split(".")[-1]
        self.controller = controller
        self.controller_params = dict(controller_params or {})   # --controller-param keywords
        self.executor = executor
        self.limits = limits
        self.trial_scenarios = expand_trials(base) if is_trial_scenario(base) else [base]
        self.required = required if required is not None else base.criteria.get("pass_rate_min")
        self.out_dir = Path(out_dir) if out_dir is not None else None
        self.on_outcome = on_outcome
        self.integer = False
        self.episodes = 0
        self.results: list[dict] = []

    # ------------------------------------------------------------------ values

    def cast(self, value: float):
        return int(round(value)) if self.integer else float(value)

    def scenarios_at(self, value: float) -> list:
        """The trial scenarios with ``path`` set to ``value`` (raises ``ScenarioErrors`` when invalid)."""
        from bench.scenario.compose import derive
        from bench.scenario.ids import format_label_value

        v = self.cast(value)
        suffix = f"{self.label}={format_label_value(v)}"
        return [derive(t, {self.path: v}, suffix) for t in self.trial_scenarios]

    def check_range(self, lo: float, hi: float) -> None:
        """Both ends must give valid scenarios; detects an integer field (e.g. a number of steps).

        Raises ``ScenarioErrors`` (located in the scenario file) when an end is invalid.
        """
        try:
            self.scenarios_at(lo + (hi - lo) * 0.5003)  # a non-round value: an integer field rejects it
        except ScenarioErrors as e:
            if any("expected an integer" in err.message for err in e.errors):
                self.integer = True
            else:
                raise
        for v in (lo, hi):
            self.scenarios_at(v)

    # ------------------------------------------------------------------ predicate

    def __call__(self, values: list[float]) -> list[Evaluation]:
        from bench.report.record import RunRecord
        from bench.run import sinks as run_sinks
        from bench.run.execute import execute
        from bench.run.plan import make_plan

        groups = [self.scenarios_at(v) for v in values]
        flat = [(gi, sc) for gi, g in enumerate(groups) for sc in g]
        # the same run path as bench run: the trials at each value are this plan's episodes
        plan = make_plan([sc for _, sc in flat], controller=self.controller, limits=self.limits, expand=False,
                         controller_params=self.controller_params)
        sinks: list = []
        if self.out_dir is not None:
            sinks.append(run_sinks.ResultFiles(self.out_dir))
        if self.on_outcome is not None:
            sinks.append(run_sinks.Callback(lambda _episode, outcome: self.on_outcome(outcome)))
        got = execute(plan, [e.index for e in plan.episodes], self.executor, sinks)
        results = [got[i] for i in range(len(flat))]
        self.episodes += len(flat)
        self.results.extend(results)
        out = []
        for gi, v in enumerate(values):
            rs = [results[i] for i, (g, _) in enumerate(flat) if g == gi]
            j = judge(rs, self.required)
            records = [RunRecord.from_json(r) for r in rs]
            statuses = sorted({r.status for r in records})
            detail = {"ids": [r.scenario for r in records], "failing": j["failing"], "statuses": statuses,
                      "reasons": sorted({r.reason for r in records if r.reason})[:3]}
            out.append(Evaluation(j["rate"], j["verdict"] == "passed", j["trials"], tuple(j["interval"]), detail))
        return out


class PlanePredicate(ScenarioPredicate):
    """``predicate([(x, y), ...]) -> [Evaluation]`` for :func:`bench.search.envelope.map_envelope`: two dotted
    paths of one scenario set at once, on the same trials (common random numbers) at every point."""

    def __init__(self, scenario, x_path: str, y_path: str, *, vector: bool = False, **kw):
        super().__init__(scenario, x_path, **kw)
        self.y_path = y_path
        self.y_label = y_path.split(".")[-1]
        self.y_integer = False
        # vector: x is the direction (deg, about z) and y the magnitude of the horizontal vector at x_path
        self.vector = vector

    def scenarios_at(self, value) -> list:
        import math

        from bench.scenario.compose import derive
        from bench.scenario.ids import format_label_value

        x, y = value
        if self.vector:
            a = math.radians(float(x))
            vec = [round(float(y) * math.cos(a), 9), round(float(y) * math.sin(a), 9), 0.0]
            suffix = f"dir={format_label_value(float(x))},mag={format_label_value(float(y))}"
            return [derive(t, {self.path: vec}, suffix) for t in self.trial_scenarios]
        xv = int(round(x)) if self.integer else float(x)
        yv = int(round(y)) if self.y_integer else float(y)
        suffix = f"{self.label}={format_label_value(xv)},{self.y_label}={format_label_value(yv)}"
        return [derive(t, {self.path: xv, self.y_path: yv}, suffix) for t in self.trial_scenarios]

    def check_plane(self, x_range: tuple[float, float], y_range: tuple[float, float]) -> None:
        """Every corner must give a valid scenario; detects integer fields. Raises ``ScenarioErrors``."""
        (x0, x1), (y0, y1) = x_range, y_range
        if self.vector:
            for corner in ((x0, y0), (x0, y1), ((x0 + x1) / 2, y1)):
                self.scenarios_at(corner)
            return
        for axis, probe in (("x", ((x0 + x1) * 0.5003, y0)), ("y", (x0, (y0 + y1) * 0.5003))):
            try:
                self.scenarios_at(probe)
            except ScenarioErrors as e:
                if any("expected an integer" in err.message for err in e.errors):
                    setattr(self, "integer" if axis == "x" else "y_integer", True)
                else:
                    raise
        for corner in ((x0, y0), (x0, y1), (x1, y0), (x1, y1)):
            self.scenarios_at(corner)
