"""The run record: the single definition of what one ``result.json`` holds.

``RunRecord`` is a frozen dataclass with one field per key of ``result.json``;
``to_json()`` gives the mapping that is written (key order and, for the
optional keys, key presence exactly as the files have always had them) and
``from_json()`` reads one back. Reading is tolerant of older files: a key added
later (``fingerprint``, ``result_uid``, ``deciding``, ...) takes its default
when missing. It is strict about the keys every result.json has had from the
start, and about types: a missing or mistyped key raises :class:`RecordError`
naming the key. Keys this bench does not know are kept in ``extra`` and written
back unchanged, so a file written by a newer bench survives a round trip.

Keys may be added to this record; none may be renamed or dropped (other tools
read them).
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass, field, fields, replace
from typing import Any, Mapping

#: Keys every result.json has had from the start; a file without one of them is not a result.
REQUIRED_KEYS = ("scenario", "source", "controller", "seed", "status", "passed", "reason", "sim_time_s",
                 "wall_time_s", "realtime_factor", "controller_ms", "criteria", "metrics", "bench_version",
                 "mujoco_version")
STATUSES = ("passed", "failed", "error", "timeout")

#: What each key of result.json means (the file format's documentation: `python -m bench.docgen` writes
#: docs/reference/result-files.md from it; a test checks that every key of `RunRecord` has an entry).
KEY_DOCS = {
    "scenario": "scenario id (matrix variants and trials carry their `[label=value]` suffix)",
    "source": "scenario file as given on the command line",
    "controller": "controller as given (`--controller`)",
    "seed": "seed used",
    "status": "`passed`, `failed`, `error` or `timeout`",
    "passed": "`status == \"passed\"`",
    "reason": "one sentence when not passed: the deciding criterion, or the fault; null when passed",
    "sim_time_s": "simulated time, s",
    "wall_time_s": "wall-clock time of the episode, s (differs run to run)",
    "realtime_factor": "`sim_time_s / wall_time_s`",
    "controller_ms": "controller compute time per tick, ms: `p50`, `p99`, `max` (wall clock)",
    "criteria": "one entry per criterion: `name`, `value`, `limit`, `passed`, `first_violation_s`, and "
                "`margin` when it has a numeric limit",
    "metrics": "every metric computed, name -> number (see metrics-and-criteria.md)",
    "bench_version": "version of the bench that wrote the file",
    "mujoco_version": "MuJoCo version used",
    "content_hash": "sha256 of the merged scenario document",
    "tags": "scenario tags",
    "events": "timed events that happened (pushes, load changes, faults)",
    "episode_status": "how the episode ended (`completed`, `fell`, ...); present when it ran",
    "score_from_s": "start of the scoring window, s; present when it ran",
    "trace_sha256": "digest of the trace arrays, timing columns excluded; present when it ran",
    "mujoco_warnings": "MuJoCo warnings raised during the episode; present when it ran",
    "traceback": "present only for a fault of the bench itself inside the episode",
    "trial_of": "present for a trial: the id of its trial scenario",
    "watchdog_restored": "what the watchdog put back after the controller changed it; present when it ran",
    "fingerprint": "verdict fingerprint: sha256 of everything that decided the verdict",
    "fingerprint_parts": "part name -> hash or version (`scenario`, `robot`, `controller`, `limits`, `bench`, "
                         "`mujoco`, `numpy`, and `controller_params` when parameters were given), so a changed "
                         "part can be named",
    "result_uid": "unique id of this result (uuid4 hex), the key of its history row; a reused result keeps its own",
    "deciding": "the deciding criterion: `name`, `value`, `limit`, `margin`, `first_violation_s`, `passed` "
                "(null for `error` and `timeout`)",
    "controller_params": "the `--controller-param` keywords the controller was made with, name -> value; "
                         "present when some were given",
    "controller_name": "the controller object's own `name` attribute; present when it has one",
    "controller_signals": "names of the per-tick signals the controller logged (`signal_<name>` in trace.npz); "
                          "present when it logged any",
}


class RecordError(ValueError):
    """A result.json that does not hold a run record; the message names the key."""


def _num(x: Any) -> float | None:
    """A number as float; None (JSON null) stays None."""
    if x is None:
        return None
    return float(x)


def _is_num(x: Any) -> bool:
    # numbers.Real: numpy scalars count too (a metric computed with numpy may be one before it is written)
    return isinstance(x, numbers.Real) and not isinstance(x, bool)


def _need(data: Mapping, key: str, kind: str, where: str = "") -> Any:
    """``data[key]`` checked against ``kind`` (str, int, num, num?, str?, bool, map, list)."""
    if key not in data:
        raise RecordError(f"{where}lacks key {key!r}")
    value = data[key]
    ok = {
        "str": isinstance(value, str),
        "str?": value is None or isinstance(value, str),
        "int": isinstance(value, numbers.Integral) and not isinstance(value, bool),
        "num": _is_num(value),
        "num?": value is None or _is_num(value),
        "bool": isinstance(value, bool),
        "map": isinstance(value, Mapping),
        "map?": value is None or isinstance(value, Mapping),
        "list": isinstance(value, (list, tuple)),
    }[kind]
    if not ok:
        want = {"str": "a string", "str?": "a string or null", "int": "an integer", "num": "a number",
                "num?": "a number or null", "bool": "true or false", "map": "a mapping", "map?": "a mapping or null", "list": "a list"}[kind]
        raise RecordError(f"{where}key {key!r} must be {want}, got {type(value).__name__} {value!r:.60}")
    return value


@dataclass(frozen=True)
class ControllerTiming:
    """Controller compute time per control tick, ms (wall clock: differs run to run)."""

    p50: float = 0.0
    p99: float = 0.0
    max: float = 0.0

    def to_json(self) -> dict:
        return {"p50": self.p50, "p99": self.p99, "max": self.max}

    @classmethod
    def from_json(cls, data: Any) -> "ControllerTiming":
        if not isinstance(data, Mapping):
            raise RecordError(f"key 'controller_ms' must be a mapping, got {type(data).__name__}")
        vals = {}
        for k in ("p50", "p99", "max"):
            v = data.get(k, 0.0)
            if v is not None and not _is_num(v):
                raise RecordError(f"key 'controller_ms.{k}' must be a number, got {v!r:.60}")
            vals[k] = 0.0 if v is None else float(v)
        return cls(**vals)


@dataclass(frozen=True)
class CriterionRecord:
    """One criterion of a result: value against limit, and when it was first violated.

    ``margin`` is how far the value is from its limit on the passing side, as a
    share of ``|limit|`` (negative when violated; see
    :func:`bench.scoring.verdict.criterion_margin`); None for criteria without a
    numeric limit (``no_fall``) and in files written before margins existed.
    """

    name: str
    value: float | None
    limit: float | None
    passed: bool
    first_violation_s: float | None
    margin: float | None = None

    def to_json(self) -> dict:
        out = {"name": self.name, "value": self.value, "limit": self.limit, "passed": self.passed,
               "first_violation_s": self.first_violation_s}
        if self.margin is not None:
            out["margin"] = self.margin
        return out

    @classmethod
    def from_json(cls, data: Any, where: str = "criteria: ") -> "CriterionRecord":
        if not isinstance(data, Mapping):
            raise RecordError(f"{where}an entry must be a mapping, got {type(data).__name__}")
        name = _need(data, "name", "str", where)
        w = f"criteria.{name}: "
        limit = data.get("limit")
        # no_fall: false and boolean limits were written as they were given
        if not (limit is None or _is_num(limit) or isinstance(limit, bool)):
            raise RecordError(f"{w}key 'limit' must be a number or null, got {limit!r:.60}")
        return cls(name=name, value=_num(_need(data, "value", "num?", w)),
                   limit=limit if isinstance(limit, bool) or limit is None else float(limit),
                   passed=_need(data, "passed", "bool", w),
                   first_violation_s=_num(_need(data, "first_violation_s", "num?", w)),
                   margin=_num(data["margin"]) if _is_num(data.get("margin")) else None)


@dataclass(frozen=True)
class DecidingCriterion:
    """The criterion that decided a verdict (see :func:`bench.scoring.verdict.deciding_criterion`)."""

    name: str
    value: float | None
    limit: float | None
    margin: float | None
    first_violation_s: float | None
    passed: bool = True

    def to_json(self) -> dict:
        return {"name": self.name, "value": self.value, "limit": self.limit, "margin": self.margin,
                "first_violation_s": self.first_violation_s, "passed": self.passed}

    @classmethod
    def from_json(cls, data: Any) -> "DecidingCriterion | None":
        if data is None:
            return None
        if not isinstance(data, Mapping):
            raise RecordError(f"key 'deciding' must be a mapping or null, got {type(data).__name__}")
        w = "deciding: "
        limit = data.get("limit")
        return cls(name=_need(data, "name", "str", w), value=_num(_need(data, "value", "num?", w)),
                   limit=limit if isinstance(limit, bool) or limit is None else float(limit),
                   margin=_num(_need(data, "margin", "num?", w)),
                   first_violation_s=_num(_need(data, "first_violation_s", "num?", w)),
                   passed=bool(data.get("passed", True)))

    @classmethod
    def of(cls, c: CriterionRecord) -> "DecidingCriterion":
        return cls(c.name, c.value, c.limit, c.margin, c.first_violation_s, c.passed)


#: Keys written only when they have a value (their absence has always meant "not applicable").
_OPTIONAL = ("episode_status", "score_from_s", "trace_sha256", "mujoco_warnings", "traceback", "trial_of",
             "watchdog_restored", "controller_params", "controller_name", "controller_signals")
_LISTS = ("mujoco_warnings", "watchdog_restored", "controller_signals")


@dataclass(frozen=True)
class RunRecord:
    """One episode's result, exactly what ``result.json`` holds."""

    scenario: str
    source: str
    controller: str
    seed: int
    status: str
    passed: bool
    reason: str | None
    sim_time_s: float
    wall_time_s: float
    realtime_factor: float
    controller_ms: ControllerTiming
    criteria: tuple[CriterionRecord, ...]
    metrics: Mapping[str, float | None]
    bench_version: str
    mujoco_version: str
    content_hash: str = ""
    tags: tuple[str, ...] = ()
    events: tuple[Mapping, ...] = ()
    episode_status: str | None = None
    score_from_s: float | None = None
    trace_sha256: str | None = None
    mujoco_warnings: tuple[str, ...] | None = None
    traceback: str | None = None
    trial_of: str | None = None
    #: what the episode's watchdog had to restore after the controller changed it (present when it ran)
    watchdog_restored: tuple[str, ...] | None = None
    fingerprint: str = ""
    fingerprint_parts: Mapping[str, str] = field(default_factory=dict)
    result_uid: str = ""
    deciding: DecidingCriterion | None = None
    #: the --controller-param keywords the controller was made with (present when some were given)
    controller_params: Mapping[str, Any] | None = None
    #: the controller object's own ``name`` attribute (present when it has one)
    controller_name: str | None = None
    #: names of the per-tick signals the controller logged (``signal_<name>`` in trace.npz)
    controller_signals: tuple[str, ...] | None = None
    #: keys of the file this bench does not know (written by a newer one, or by a plugin); kept as they are
    extra: Mapping[str, Any] = field(default_factory=dict)

    # ------------------------------------------------------------------ views

    @property
    def is_error(self) -> bool:
        return self.status in ("error", "timeout")

    def criterion(self, name: str) -> CriterionRecord | None:
        return next((c for c in self.criteria if c.name == name), None)

    @property
    def failed_criteria(self) -> list[CriterionRecord]:
        return [c for c in self.criteria if not c.passed]

    def replace(self, **changes) -> "RunRecord":
        """A copy with ``changes``; ``passed`` follows ``status``."""
        if "status" in changes and "passed" not in changes:
            changes["passed"] = changes["status"] == "passed"
        return replace(self, **changes)

    # ------------------------------------------------------------------ JSON

    def to_json(self) -> dict:
        out: dict[str, Any] = {
            "scenario": self.scenario,
            "source": self.source,
            "controller": self.controller,
            "seed": self.seed,
            "status": self.status,
            "passed": self.passed,
            "reason": self.reason,
            "sim_time_s": self.sim_time_s,
            "wall_time_s": self.wall_time_s,
            "realtime_factor": self.realtime_factor,
            "controller_ms": self.controller_ms.to_json(),
            "criteria": [c.to_json() for c in self.criteria],
            "metrics": dict(self.metrics),
            "bench_version": self.bench_version,
            "mujoco_version": self.mujoco_version,
            "content_hash": self.content_hash,
            "tags": list(self.tags),
            "events": [dict(e) for e in self.events],
        }
        for key in _OPTIONAL:
            value = getattr(self, key)
            if value is not None:
                out[key] = list(value) if key in _LISTS else value
        out["fingerprint"] = self.fingerprint
        out["fingerprint_parts"] = dict(self.fingerprint_parts)
        out["result_uid"] = self.result_uid
        out["deciding"] = None if self.deciding is None else self.deciding.to_json()
        for k, v in self.extra.items():
            out.setdefault(k, v)
        return out

    @classmethod
    def from_json(cls, data: Any) -> "RunRecord":
        """Read a result.json mapping; raises :class:`RecordError` naming the key that is missing or wrong."""
        if not isinstance(data, Mapping):
            raise RecordError(f"a result must be a mapping, got {type(data).__name__}")
        status = _need(data, "status", "str")
        if status not in STATUSES:
            raise RecordError(f"key 'status' must be one of {', '.join(STATUSES)}, got {status!r:.60}")
        crits = tuple(CriterionRecord.from_json(c) for c in _need(data, "criteria", "list"))
        metrics = _need(data, "metrics", "map")
        for k, v in metrics.items():
            if not (v is None or _is_num(v)):
                raise RecordError(f"key 'metrics.{k}' must be a number or null, got {v!r:.60}")
        tags = data.get("tags") or []
        events = data.get("events") or []
        if not isinstance(tags, list) or not isinstance(events, list):
            raise RecordError("keys 'tags' and 'events' must be lists")
        parts = data.get("fingerprint_parts") or {}
        if not isinstance(parts, Mapping):
            raise RecordError("key 'fingerprint_parts' must be a mapping")
        for key, kind in (("content_hash", "str?"), ("episode_status", "str?"), ("score_from_s", "num?"),
                          ("trace_sha256", "str?"), ("traceback", "str?"), ("trial_of", "str?"),
                          ("fingerprint", "str?"), ("result_uid", "str?"), ("controller_name", "str?"),
                          ("controller_params", "map?")):
            if key in data:
                _need(data, key, kind)
        warnings = data.get("mujoco_warnings")
        restored = data.get("watchdog_restored")
        for key, value in (("mujoco_warnings", warnings), ("watchdog_restored", restored)):
            if value is not None and not isinstance(value, list):
                raise RecordError(f"key {key!r} must be a list, got {type(value).__name__}")
        known = {f.name for f in fields(cls)}
        return cls(
            scenario=_need(data, "scenario", "str"),
            source=_need(data, "source", "str"),
            controller=_need(data, "controller", "str"),
            seed=int(_need(data, "seed", "int")),
            status=status,
            passed=_need(data, "passed", "bool"),
            reason=_need(data, "reason", "str?"),
            sim_time_s=float(_need(data, "sim_time_s", "num")),
            wall_time_s=float(_need(data, "wall_time_s", "num")),
            realtime_factor=float(_need(data, "realtime_factor", "num")),
            controller_ms=ControllerTiming.from_json(_need(data, "controller_ms", "map")),
            criteria=crits,
            metrics=dict(metrics),
            bench_version=_need(data, "bench_version", "str"),
            mujoco_version=_need(data, "mujoco_version", "str"),
            content_hash=data.get("content_hash") or "",
            tags=tuple(str(t) for t in tags),
            events=tuple(events),
            episode_status=data.get("episode_status"),
            score_from_s=_num(data.get("score_from_s")),
            trace_sha256=data.get("trace_sha256"),
            mujoco_warnings=None if warnings is None else tuple(str(w) for w in warnings),
            traceback=data.get("traceback"),
            trial_of=data.get("trial_of"),
            watchdog_restored=None if restored is None else tuple(str(w) for w in restored),
            fingerprint=data.get("fingerprint") or "",
            fingerprint_parts={str(k): str(v) for k, v in parts.items()},
            result_uid=data.get("result_uid") or "",
            deciding=DecidingCriterion.from_json(data.get("deciding")),
            controller_params=None if data.get("controller_params") is None else dict(data["controller_params"]),
            controller_name=data.get("controller_name"),
            controller_signals=None if data.get("controller_signals") is None
            else tuple(str(s) for s in data["controller_signals"]),
            extra={k: v for k, v in data.items() if k not in known},
        )


def as_record(result: "RunRecord | Mapping") -> RunRecord:
    """A record from either a record or a result.json mapping (readers accept both)."""
    return result if isinstance(result, RunRecord) else RunRecord.from_json(result)

