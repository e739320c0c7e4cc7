"""``bench robot init MODEL`` and ``bench robot check MANIFEST``: bring your own robot.

``init`` drafts a manifest from an MJCF or URDF (see :mod:`bench.robot.draft`);
``check`` reports every problem of a manifest at its line (exit 2), then
measures what it claims (:mod:`bench.robot.check`, plus a settled stand on
flat ground under a joint PD) and prints a table: exit 1 when a measured value
disagrees with the manifest beyond its tolerance, 0 otherwise.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

ORDER = 60
#: The settled stand: joint PD gains and settling time used to measure the bundled robots' nominal heights.
SETTLE_KP, SETTLE_KD, SETTLE_S = 200.0, 3.0, 3.0


def register(sub) -> None:
    p = sub.add_parser("robot", help="draft and check a robot manifest (bring your own robot)",
                       description="Draft a manifest from a robot model, or check a manifest against its model.")
    rs = p.add_subparsers(dest="robot_command", metavar="ACTION")
    i = rs.add_parser("init", help="draft a manifest from an MJCF or URDF file",
                      description="Draft manifest.yaml for the robot in MODEL (MJCF or URDF): trunk, legs, joints "
                                  "and actuators in controller order, feet, fall geoms, torque limits, a nominal "
                                  "pose and height. Every guessed field carries a comment. Exit 0 when written, "
                                  "2 when the model cannot be drafted.")
    i.add_argument("model", metavar="MODEL", help="robot MJCF (.xml) or URDF (.urdf) file")
    i.add_argument("-o", "--output", default=None, metavar="FILE",
                   help="manifest to write (default manifest.yaml next to MODEL; '-' prints it)")
    i.add_argument("--name", default=None, help="robot name (default: the model's name)")
    i.add_argument("--force", action="store_true", help="replace existing files")
    i.set_defaults(func=run_init)
    c = rs.add_parser("check", help="check a manifest and measure what it claims",
                      description="Report every problem of MANIFEST (file:line:col), then measure mass, standing "
                                  "height (kinematic and settled), reach, joint-limit margins and the torque to "
                                  "stand. Exit 0 when all agree, 1 when a measured value disagrees with the "
                                  "manifest beyond its tolerance, 2 on a manifest error.")
    c.add_argument("manifest", metavar="MANIFEST", help="a robot manifest.yaml (or a bundled robot's name)")
    c.add_argument("--no-settle", action="store_true", help="skip the settled stand (no simulation)")
    c.set_defaults(func=run_check)
    p.set_defaults(func=lambda args: (p.print_help(), 2)[1])


def run_init(args) -> int:
    from bench.robot.draft import DraftError, draft_manifest, manifest_text, write_draft

    try:
        draft = draft_manifest(args.model, name=args.name)
    except DraftError as exc:
        print(f"bench robot init: {exc}", file=sys.stderr)
        return 2
    if args.output == "-":
        sys.stdout.write(manifest_text(draft, draft.mjcf))
        return 0
    out = Path(args.output) if args.output else Path(args.model).resolve().parent / "manifest.yaml"
    try:
        written = write_draft(draft, out, force=args.force)
    except DraftError as exc:
        print(f"bench robot init: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"bench robot init: cannot write {out}: {exc}", file=sys.stderr)
        return 2
    for p in written:
        print(f"wrote {p}")
    for a in draft.added:
        print(f"  added to the model copy: {a}")
    print(f"next: review the comments in {written[0].name}, then: bench robot check {written[0]}")
    return 0


def run_check(args) -> int:
    from bench.cli.common import print_table
    from bench.robot.check import HEIGHT_TOLERANCE_M, Measurement, measure
    from bench.robot.locate import resolve_robot
    from bench.robot.manifest import RobotError, RobotErrors
    from bench.robot.model import NominalRobot

    try:
        manifest = resolve_robot(args.manifest)
    except RobotErrors as exc:
        for e in exc.errors:
            print(e, file=sys.stderr)
        print(f"{len(exc.errors)} problem{'s' if len(exc.errors) > 1 else ''} found", file=sys.stderr)
        return 2
    except (RobotError, OSError) as exc:
        print(f"bench robot check: {exc}", file=sys.stderr)
        return 2
    robot = NominalRobot(manifest)
    rows = measure(robot)
    if not args.no_settle:
        try:
            z = settled_height(manifest)
        except Exception as exc:  # noqa: BLE001 - reported in the table, never a traceback
            rows.append(Measurement("standing height (settled)", f"{manifest.nominal_height:.3f} m", "n/a", "-",
                                    False, f"the stand could not be simulated: {type(exc).__name__}: {exc}"))
        else:
            rows.append(Measurement("standing height (settled)", f"{manifest.nominal_height:.3f} m", f"{z:.3f} m",
                                    f"{HEIGHT_TOLERANCE_M:g} m", abs(z - manifest.nominal_height) <= HEIGHT_TOLERANCE_M,
                                    f"joint PD kp {SETTLE_KP:g} kd {SETTLE_KD:g}, {SETTLE_S:g} s on flat ground", z))
    _one_height_definition(rows)
    print(f"{manifest.name}: {manifest.manifest_path}")
    print(f"  {robot.num_joints} joints, {robot.num_feet} feet, {robot.mass_kg:.3f} kg")
    verdict = {True: "ok", False: "DISAGREES", None: "info"}
    print_table([[r.name, r.claimed, r.measured, r.tolerance, verdict[r.ok], r.note] for r in rows],
                ["check", "manifest / bar", "measured", "tolerance", "verdict", "how"])
    bad = [r for r in rows if r.ok is False]
    judged = [r for r in rows if r.ok is not None]
    print(f"{len(judged) - len(bad)} of {len(judged)} checks agree")
    return 1 if bad else 0


def _one_height_definition(rows) -> None:
    """A manifest's nominal height may follow either definition (kinematic, or settled under a joint PD):
    it agrees when it matches one of them; the other row is then information only."""
    heights = [r for r in rows if r.name.startswith("standing height")]
    if len(heights) == 2 and any(r.ok for r in heights):
        for r in heights:
            if not r.ok:
                r.ok = None
                r.note = "the manifest follows the other definition; " + r.note


def settled_height(manifest) -> float:
    """Trunk height after SETTLE_S s on flat ground under a joint PD holding the nominal pose, m."""
    from bench.controllers.simple import JointPDController
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "stand.yaml"
        path.write_text(f"name: robot-check-stand\nduration: {SETTLE_S}\n"
                        f"robot: {{manifest: {str(manifest.manifest_path)!r}}}\n")
        sc = load_scenarios([str(path)], roots=[str(manifest.manifest_path.parent)])[0]
    world = build_world(sc, manifest)
    ep = run_episode(world, sc, JointPDController(kp=SETTLE_KP, kd=SETTLE_KD), NominalRobot(manifest), seed=0)
    if ep.status != "completed":
        raise RuntimeError(f"the stand ended early: {ep.reason}")
    z = ep.trace["base_pos"][:, 2] - ep.trace["terrain_height"]
    tail = max(1, len(z) // 6)          # the last half second of three
    return float(z[-tail:].mean())
