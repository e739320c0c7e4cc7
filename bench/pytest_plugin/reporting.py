"""Session reporting: summary.json (in the xdist controller too) and the terminal summary."""

from __future__ import annotations

import io
from pathlib import Path

from bench.pytest_plugin.options import display_path, settings_of


class SessionReporter:
    """Per-config hooks: gathers every run's summary entry from the reports (in the xdist controller too,
    since ``user_properties`` travel with the reports), writes summary.json and the terminal summary."""

    def __init__(self, config) -> None:
        self.config = config
        self.runs: list[dict] = []
        self.trials: list[tuple[str, int, dict]] = []   # (nodeid, seq, summary.json trials entry)

    def pytest_runtest_logreport(self, report) -> None:
        if report.when != "call":
            return
        entry = None
        for name, value in report.user_properties:
            if name == "bench.trials":
                import json

                self.trials.append((report.nodeid, len(self.trials), json.loads(value)))
            elif name == "bench.scenario":
                entry = {"scenario": value, "status": None, "reason": None, "result": None, "baseline": None,
                         "nodeid": report.nodeid, "seq": len(self.runs)}
                self.runs.append(entry)
            elif entry is not None and name in ("bench.status", "bench.reason", "bench.result", "bench.baseline"):
                entry[name.split(".", 1)[1]] = value

    def pytest_sessionfinish(self, session, exitstatus) -> None:
        settings = settings_of(self.config)
        if settings.history is not None:
            settings.history.close()
            settings.history = None
        if settings.executor is not None:
            settings.executor.close()
            settings.executor = None
        if hasattr(self.config, "workerinput") or not self.runs:
            return
        from bench.report.results import write_summary

        order = settings.order
        self.runs.sort(key=lambda r: (order.get(r["nodeid"], len(order)), r["seq"]))
        base, out = Path(self.config.invocation_params.dir), settings.out.resolve()
        entries = []
        for r in self.runs:
            folder = (base / r["result"]).resolve().parent
            if out in folder.parents:
                entries.append((folder.relative_to(out).as_posix(), r))
        self.trials.sort(key=lambda t: (order.get(t[0], len(order)), t[1]))
        summary = write_summary(settings.out, entries, [t for _, _, t in self.trials])
        _write_markdown(settings, summary)

    def pytest_terminal_summary(self, terminalreporter, exitstatus, config) -> None:
        settings = settings_of(config)
        if not self.runs:
            return
        tr = terminalreporter
        counts: dict[str, int] = {}
        for r in self.runs:
            counts[r["status"]] = counts.get(r["status"], 0) + 1
        text = ", ".join(f"{n} {s}" for s, n in sorted(counts.items()))
        tr.write_sep("-", "quadruped-bench")
        tr.write_line(f"{len(self.runs)} scenario run(s): {text}; results in {display_path(config, settings.out)}")
        if settings.history_path is not None:
            tr.write_line(f"history: {display_path(config, settings.history_path)}")
        if settings.baseline is not None:
            b: dict[str, int] = {}
            for r in self.runs:
                word = r.get("baseline") or "same"
                b[word] = b.get(word, 0) + 1
            tr.write_line(f"baseline {display_path(config, settings.baseline_path)}: "
                          + ", ".join(f"{n} {w}" for w, n in sorted(b.items())))
        if self.trials:
            from bench.report.tables import print_trials

            buf = io.StringIO()
            print_trials([t for _, _, t in self.trials], file=buf)
            for line in buf.getvalue().rstrip().splitlines():
                tr.write_line(line)
        for w in settings.warnings:
            tr.write_line(f"warning: {w}")


def _write_markdown(settings, summary: dict) -> None:
    """``summary.md`` beside ``summary.json``, as ``bench run`` writes it; never fails the session."""
    import json

    from bench.report.markdown import write_summary_markdown

    try:
        results = [json.loads((settings.out / e["result"]).read_text(encoding="utf-8")) for e in summary["results"]]
        write_summary_markdown(settings.out, summary, results, controller=settings.controller)
    except Exception as exc:  # noqa: BLE001 - summary.json holds the verdicts; the page is a convenience
        settings.warnings.append(f"summary.md not written: {type(exc).__name__}: {exc}")
