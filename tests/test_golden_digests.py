"""The bundled suite's physics has not moved: trace digests against the committed golden file.

``tests/golden/suite_digests.json`` holds, for each reference controller, the
``trace_sha256`` and status of every episode of the bundled suite. A refactor
of the run path, the record, the executors or the loop must leave them
unchanged. This test runs the faster half of the episodes by the wall time
recorded in the file (a subset that covers every folder of the suite: basics,
disturbances, faults, payloads, terrain and trials); ranked, not cut at a fixed
number of seconds, because the file may be written on a loaded machine where
every episode takes several times longer; ``python tests/golden/check_suite.py``
checks all.
"""

from __future__ import annotations

import json
from pathlib import Path

import mujoco
import pytest

from tests.golden.check_suite import GOLDEN, differences, run_suite

GOLDEN_DATA = json.loads(GOLDEN.read_text())
#: The share of each controller's episodes in the test: the fastest by recorded wall time.
FAST_FRACTION = 0.5
CONTROLLERS = ("force-qp-l1", "force-qp")
CHUNKS = 3


def _chunks(controller: str) -> list[list[str]]:
    episodes = GOLDEN_DATA["controllers"][controller]
    ranked = sorted(episodes, key=lambda sid: (episodes[sid]["wall_time_s"], sid))
    ids = sorted(ranked[:int(len(ranked) * FAST_FRACTION)])
    return [ids[i::CHUNKS] for i in range(CHUNKS)]


CASES = [(c, i, ids) for c in CONTROLLERS for i, ids in enumerate(_chunks(c))]


@pytest.mark.skipif(GOLDEN_DATA["mujoco_version"] != mujoco.__version__,
                    reason=f"golden digests made with MuJoCo {GOLDEN_DATA['mujoco_version']}")
@pytest.mark.parametrize("controller,chunk,ids", CASES, ids=[f"{c}-{i}" for c, i, _ in CASES])
def test_bundled_episodes_keep_their_trace_digests(controller, chunk, ids, tmp_path):
    assert len(ids) >= 4
    got = run_suite(controller, 1, tmp_path / "out", only=ids)
    want = {sid: GOLDEN_DATA["controllers"][controller][sid] for sid in ids}
    assert set(got) == set(ids)
    assert differences(want, got) == []
