"""What a controller is told about the scenario's extra sensors: :class:`SensingInfo`, given as ``robot.sensing``.

Its own small module (numpy only) so that the nominal robot, which carries it, and the controller
protocol, which re-exports it, can both import it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class SensingInfo:
    """What the controller senses, given in ``reset`` as ``robot.sensing``.

    ``height_scan_xy[i, j]`` is the (x forward, y left) offset in m of scan point (i, j) from the trunk
    origin projected vertically, in the yaw-aligned trunk frame: the world position of the point is
    ``trunk_xy + Rz(trunk_yaw) @ height_scan_xy[i, j]`` at the instant the scan was taken.
    """

    privileged: bool = True
    height_scan_xy: np.ndarray | None = None   # (nx, ny, 2) m, or None: no height scan
    foot_force: str | None = None              # "normal", "3d" or None
    joint_torque: bool = False
    height_scan_rate_hz: float | None = None   # scans per second (None: every control tick)
    height_scan_latency_s: float = 0.0

    @property
    def height_scan_shape(self) -> tuple[int, int] | None:
        return None if self.height_scan_xy is None else tuple(self.height_scan_xy.shape[:2])
