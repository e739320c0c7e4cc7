"""The single run path shared by ``bench run``, the pytest plugin and ``bench limit``: load and check, plan,
execute, sinks; and what identifies a verdict.

load and check (:mod:`bench.run.load`) -> plan (:mod:`bench.run.plan`: variants,
trials, selection, resume, controller resolution) -> execute
(:mod:`bench.run.execute`, on any executor) -> sinks (:mod:`bench.run.sinks`:
result files, history, baseline comparison, progress; plots and videos after
the run). :mod:`bench.run.fingerprint` hashes everything that decides a verdict.
Front ends parse their options, call these stages and print; they never
assemble a run of their own.
"""

from bench.run.errors import InvalidInput

__all__ = ["InvalidInput"]
