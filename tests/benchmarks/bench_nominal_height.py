"""How high quad12 really stands: the kinematic height against settled stands with several controllers.

    python tests/benchmarks/bench_nominal_height.py

The manifest's ``nominal_height`` (0.294 m) is a settled stand with one joint PD
(kp 200 N m/rad, kd 3 N m s/rad). A controller holding the joints stiffer sits
higher, up to the kinematic height (nominal pose, lowest foot point on flat ground:
``bench.robot.check.kinematic_height``), because a softer PD lets the knees sag
under the weight. This prints, for each controller, the trunk height over the last
second of a 3 s stand on flat ground and its difference from ``nominal_height``
(what the height criteria measure against). Numbers, not a verdict.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from bench.controllers import registry
from bench.controllers.simple import JointPDController
from bench.robot.check import kinematic_height
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.scenario.compose import derive
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

REPO = Path(__file__).resolve().parents[2]
#: Joint PD gains tried (kp N m/rad); kd grows as sqrt(kp) from the manifest's kd 3 at kp 200 (same damping ratio).
KPS = (100.0, 200.0, 400.0, 1000.0, 3000.0)


def settled_height(ctrl, duration_s: float = 3.0) -> float:
    sc = load_scenarios([str(REPO / "scenarios" / "basics" / "stand-still.yaml")])[0]
    sc = derive(sc, {"duration": duration_s}, "")
    man = manifest_for(sc)
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=0)
    z = ep.trace["base_pos"][:, 2] - ep.trace["terrain_height"]
    last = ep.trace["t"] >= duration_s - 1.0
    return float(np.mean(z[last]))


def main() -> int:
    sc = load_scenarios([str(REPO / "scenarios" / "basics" / "stand-still.yaml")])[0]
    robot = NominalRobot(manifest_for(sc))
    nominal = robot.nominal_height
    rows = [("kinematic (nominal pose, feet on the ground)", kinematic_height(robot))]
    for kp in KPS:
        rows.append((f"joint PD kp {kp:g}, kd {3.0 * math.sqrt(kp / 200.0):.2f}",
                     settled_height(JointPDController(kp=kp, kd=3.0 * math.sqrt(kp / 200.0)))))
    for name in ("force-qp", "force-qp-l1"):
        rows.append((name, settled_height(registry.make(name)[1])))
    print(f"quad12 nominal_height {nominal:.4f} m")
    print(f"{'stand':48s} {'height m':>9s} {'- nominal mm':>13s}")
    for label, h in rows:
        print(f"{label:48s} {h:9.4f} {1e3 * (h - nominal):+13.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
