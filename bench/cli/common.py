"""Helpers shared by subcommands: loading scenarios (through the run path's load step) and printing problems."""

from __future__ import annotations

import sys

from bench.errors import ScenarioError, ScenarioErrors
from bench.report.tables import print_table  # noqa: F401 - re-exported for the subcommands


def load_or_report(paths: list[str], roots: list[str] | None = None, robot: str | None = None,
                   no_privileged: bool = False):
    """Load and check scenarios (robot checks included; ``robot`` replaces every scenario's robot,
    ``no_privileged`` turns the true state off in all); on problems print each as
    ``path:line:col: message`` and return None."""
    from bench.run.load import load_checked

    try:
        return load_checked(list(paths), roots or [], robot=robot, no_privileged=no_privileged)
    except ScenarioErrors as exc:
        for err in exc.errors:
            print(str(err), file=sys.stderr)
        n = len(exc.errors)
        print(f"{n} problem{'s' if n != 1 else ''} found; nothing was run", file=sys.stderr)
        return None
    except ScenarioError as exc:
        print(str(exc), file=sys.stderr)
        return None


def add_robot_option(p) -> None:
    """``--robot NAME|MANIFEST``: run every scenario on another robot (same for run, check and limit)."""
    p.add_argument("--robot", default=None, metavar="NAME|MANIFEST",
                   help="replace every scenario's robot for this run: a bundled robot's name (e.g. quad30) or "
                        "a robot manifest.yaml (bench robot init drafts one)")


def add_privileged_option(p) -> None:
    """``--no-privileged``: no scenario gives the controller the true state (same for run, check, limit)."""
    p.add_argument("--no-privileged", action="store_true",
                   help="set sensing.privileged to false in every scenario for this run: obs.privileged is None, "
                        "so a controller shows it never needs the true trunk state (the scenarios' content "
                        "hashes change with it, so results of such a run are told apart)")


def add_controller_param_option(p) -> None:
    """``--controller-param KEY=VALUE`` (repeatable): keyword arguments for the controller's factory."""
    p.add_argument("--controller-param", action="append", default=[], metavar="KEY=VALUE", dest="controller_param",
                   help="keyword argument for the controller's constructor, the value read as YAML "
                        "(kp_pos=[40,40,100], solver=daqp, leg_bias_ff=false); repeatable; an unknown key is "
                        "invalid input (exit 2). Recorded in result.json and its fingerprint")


def controller_params_from(args) -> dict:
    """The parsed ``--controller-param`` values; raises InvalidInput on a malformed one."""
    from bench.controllers.params import ControllerParamError, parse_params
    from bench.run.errors import InvalidInput

    try:
        return parse_params(getattr(args, "controller_param", None) or [])
    except ControllerParamError as exc:
        raise InvalidInput(str(exc)) from None
