"""The one run path shared by ``bench run``, the pytest plugin and ``bench limit``.

load and check (:mod:`bench.run.load`) -> plan (:mod:`bench.run.plan`: variants,
trials, selection, resume, controller resolution) -> execute
(:mod:`bench.run.execute`, on any executor) -> sinks (:mod:`bench.run.sinks`:
result files, history, baseline comparison, progress; plots and videos after
the run). Front ends parse their options, call these stages and print; they
never assemble a run of their own.
"""

from bench.run.errors import InvalidInput

__all__ = ["InvalidInput"]
