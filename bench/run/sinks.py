"""Sinks: where each finished episode goes (result files, history, baseline comparison, progress).

A sink has ``on_result(episode, outcome)``, and may have ``on_reused(episode,
result)`` (a result ``--resume`` kept) and ``close()``. Sinks never raise for
one episode: a result that cannot be written becomes that episode's ``error``;
history that cannot be written is a warning (the verdicts stand). Plots and
videos are drawn after the run (:func:`media_after_run`) and never change a
verdict or the exit code.
"""

from __future__ import annotations

import sys
from pathlib import Path


class ResultFiles:
    """``<out>/<slug>/result.json`` and ``trace.npz`` per episode; ``summary.json`` at the end."""

    def __init__(self, out: Path) -> None:
        self.out = Path(out)
        self.paths: dict[int, Path] = {}

    def on_result(self, episode, outcome) -> None:
        from bench.report.results import write_outcome

        try:
            self.paths[episode.index] = write_outcome(self.out, episode.slug, outcome)
        except (OSError, ValueError) as exc:
            # the verdict cannot be kept: this episode is an error, and says where and why
            r = outcome.result
            r.update({"status": "error", "passed": False,
                      "reason": f"result files not written in {self.out / episode.slug}: {exc}"})
            outcome.trace = None


class HistorySink:
    """One history row per episode, written as each finishes (and for each result a resume reuses)."""

    def __init__(self, path: Path, *, source: str, cwd, run_uid: str | None = None, warn=None) -> None:
        self.path = Path(path)
        self.source, self.cwd, self.run_uid = source, cwd, run_uid
        self._run = None
        self._off = False
        self.warn = warn or (lambda text: print(text, file=sys.stderr))

    def _open(self):
        if self._run is None and not self._off:
            self._run = open_history(self.path, source=self.source, cwd=self.cwd, run_uid=self.run_uid)
        return self._run

    def record(self, result: dict) -> None:
        if self._off:
            return
        try:
            self._open().record(result)
        except Exception as exc:  # noqa: BLE001 - the run's own verdicts stand; say why history is missing
            self._off = True
            self.warn(f"warning: history not recorded in {self.path}: {_describe(exc)}")

    def on_result(self, episode, outcome) -> None:
        self.record(outcome.result)

    def on_reused(self, episode, result: dict) -> None:
        self.record(result)

    def close(self) -> None:
        if self._run is not None:
            try:
                self._run.close()
            finally:
                self._run = None


def _describe(exc: BaseException) -> str:
    from bench.report.history import HistoryError

    if isinstance(exc, HistoryError):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


def open_history(path: Path, *, source: str, cwd, run_uid: str | None = None):
    """The history writer of one run: ``.record(result)`` per episode (one transaction, a repeated
    ``result_uid`` ignored), ``.close()``."""
    from bench.report.history import open_run

    return open_run(path, source=source, cwd=cwd, run_uid=run_uid)


class BaselineSink:
    """Each result compared with a baseline; ``rows[index]`` are that episode's comparison rows."""

    def __init__(self, baseline: dict) -> None:
        self.baseline = baseline
        self.rows: dict[int, list] = {}

    def on_result(self, episode, outcome) -> None:
        from bench.report.baseline import compare_result

        self.rows[episode.index] = compare_result(self.baseline, outcome.result)

    def on_reused(self, episode, result: dict) -> None:
        from bench.report.baseline import compare_result

        self.rows[episode.index] = compare_result(self.baseline, result)


class ProgressSink:
    """Progress of a long run: a redrawn bar on a terminal; elsewhere (a CI log, a pipe) one flushed line
    per finished episode on stdout, so that a log shows the run as it goes rather than at the end."""

    def __init__(self, total: int, stream=None) -> None:
        import sys

        from bench.execute.progress import Progress

        self.progress = Progress(total)
        self.total = total
        self.done = 0
        self.stream = stream if stream is not None else sys.stdout
        self.lines = not self.progress.enabled

    def on_result(self, episode, outcome) -> None:
        from bench.report.record import as_record

        record = as_record(outcome.result)
        self.progress.update(passed=record.passed)
        self.done += 1
        if self.lines:
            from bench.report.tables import deciding_text

            width = len(str(self.total))
            self.stream.write(f"[{self.done:>{width}}/{self.total}] {record.scenario}  {record.status}  "
                              f"{deciding_text(record)}  ({record.wall_time_s:.1f} s)\n")
            self.stream.flush()

    def close(self) -> None:
        self.progress.close()


class Callback:
    """Calls ``fn(episode, outcome)`` for each finished episode (``bench limit`` counts with it)."""

    def __init__(self, fn) -> None:
        self.fn = fn

    def on_result(self, episode, outcome) -> None:
        self.fn(episode, outcome)


def write_run_summary(out: Path, plan, results: dict[int, dict]) -> tuple[dict, list[dict]]:
    """``summary.json`` for a whole plan (every episode has a result by now); returns it and the trials."""
    from bench.execute.trials import group_summaries
    from bench.report.results import write_summary

    ordered = [results[e.index] for e in plan.episodes]
    trial_summaries = group_summaries(plan.groups, ordered)
    summary = write_summary(out, [(e.slug, results[e.index]) for e in plan.episodes], trial_summaries)
    return summary, trial_summaries


def media_after_run(out: Path, plan, results: dict[int, dict], *, video: str = "none",
                    video_dir="videos", plots: bool = True, opts=None, file=None) -> None:
    """Plots and videos: never a traceback, never a different exit code."""
    try:
        from bench.render.postrun import after_run

        after_run(out, [(e.scenario, e.slug, results[e.index]) for e in plan.episodes], video=video,
                  video_dir=video_dir, plots=plots, opts=opts, file=file)
    except Exception as exc:  # noqa: BLE001 - the results are written; media are extras
        print(f"plots/video: skipped: {type(exc).__name__}: {exc}", file=file or sys.stdout)


def write_run_markdown(out: Path, plan, results: dict[int, dict], summary: dict, *, controller=None,
                       comparison=None) -> Path | None:
    """``summary.md`` beside ``summary.json`` (after the plots, which it links); never fails the run."""
    from bench.report.markdown import write_summary_markdown

    try:
        return write_summary_markdown(out, summary, [results[e.index] for e in plan.episodes],
                                      controller=controller, comparison=comparison)
    except Exception as exc:  # noqa: BLE001 - the verdicts are in summary.json; the page is a convenience
        print(f"summary.md: not written: {type(exc).__name__}: {exc}", file=sys.stderr)
        return None
