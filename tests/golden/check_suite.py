"""Compare the bundled suite's trace digests with the committed golden ones, for every episode.

    python tests/golden/check_suite.py [--controller force-qp-l1|force-qp|all] [--workers 2]

Runs ``bench run scenarios`` once per controller into a temporary folder and
prints every episode whose ``trace_sha256`` or status differs from
``suite_digests.json``. Exit 0 when all agree, 1 when any differ, 2 when the
installed MuJoCo is not the one the digests were made with (the digests are
only comparable for the same MuJoCo build).

The test suite checks a fast subset of the same episodes
(``tests/test_golden_digests.py``); this script checks all of them.
To refresh the file after a change that legitimately moves the physics, run it
with ``--write`` and say in the commit message why the digests moved. New
scenarios get their entries with ``--add``: it checks the episodes as usual and
writes only the ones the file does not have yet, leaving every existing entry
as it is (``--only ID``, repeatable, limits the run to those episodes).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
GOLDEN = HERE / "suite_digests.json"


def run_suite(controller: str, workers: int, out: Path, only: list[str] | None = None) -> dict[str, dict]:
    cmd = [sys.executable, "-m", "bench", "run", str(REPO / "scenarios"), "--controller", controller,
           "--out", str(out), "--no-plots", "--no-history", "--workers", str(workers)]
    for i in only or []:
        cmd += ["--only", i]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode not in (0, 1):
        raise RuntimeError(f"bench run exited {proc.returncode}:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}")
    summary = json.loads((out / "summary.json").read_text())
    got = {}
    for entry in summary["results"]:
        res = json.loads((out / entry["result"]).read_text())
        got[res["scenario"]] = {"trace_sha256": res.get("trace_sha256", ""), "status": res["status"],
                                "sim_time_s": res["sim_time_s"], "wall_time_s": round(res["wall_time_s"], 2)}
    return got


def differences(want: dict[str, dict], got: dict[str, dict]) -> list[str]:
    lines = []
    for sid in sorted(set(want) | set(got)):
        w, g = want.get(sid), got.get(sid)
        if w is None:
            lines.append(f"{sid}: not in the golden file")
        elif g is None:
            lines.append(f"{sid}: not run")
        elif (w["trace_sha256"], w["status"]) != (g["trace_sha256"], g["status"]):
            lines.append(f"{sid}: status {w['status']} -> {g['status']}, digest "
                         f"{w['trace_sha256'][:12]} -> {g['trace_sha256'][:12]}")
    return lines


def main(argv=None) -> int:
    import mujoco

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--controller", default="all")
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--write", action="store_true", help="replace the golden digests with this run's")
    p.add_argument("--add", action="store_true",
                   help="write the entries of episodes not in the golden file yet; leave the others as they are")
    p.add_argument("--only", action="append", default=None, metavar="ID", help="run only this episode (repeatable)")
    a = p.parse_args(argv)
    if a.write and a.only:
        p.error("--write replaces every entry: it cannot be limited with --only (use --add for new episodes)")
    golden = json.loads(GOLDEN.read_text())
    if golden["mujoco_version"] != mujoco.__version__ and not a.write:   # --add too: never mix builds
        print(f"golden digests were made with MuJoCo {golden['mujoco_version']}, this is {mujoco.__version__}")
        return 2
    names = list(golden["controllers"]) if a.controller == "all" else [a.controller]
    bad = 0
    for name in names:
        with tempfile.TemporaryDirectory() as tmp:
            got = run_suite(name, a.workers, Path(tmp), only=a.only)
        if a.write:
            golden["controllers"][name] = got
            golden["mujoco_version"] = mujoco.__version__
            continue
        want = golden["controllers"].setdefault(name, {})
        if a.add:
            new = sorted(sid for sid in got if sid not in want)
            for sid in new:
                want[sid] = got[sid]
            print(f"{name}: added {len(new)} new episodes" + (f" ({', '.join(new)})" if new else ""))
        if a.only:
            want = {sid: e for sid, e in want.items() if sid in got}
        diff = differences(want, got)
        print(f"{name}: {len(got)} episodes, {len(diff)} differ")
        for line in diff:
            print("  " + line)
        bad += len(diff)
    if a.write or a.add:
        end = "\n" if a.write or GOLDEN.read_text().endswith("\n") else ""   # --add: leave the file's ending
        GOLDEN.write_text(json.dumps(golden, indent=1, sort_keys=True) + end)
        print(f"wrote {GOLDEN}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
