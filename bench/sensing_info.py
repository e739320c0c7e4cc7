"""What a controller is told about the scenario's extra sensors: :class:`SensingInfo`, given as ``robot.sensing``.

Its own small module (numpy only) so that the nominal robot, which carries it, and the controller
protocol, which re-exports it, can both import it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class SensingInfo:
    """What the controller senses, given in ``reset`` as ``robot.sensing`` (from the scenario's ``sensing:``).

    ``privileged``: whether ``obs.privileged`` holds the true trunk state (else it is None).
    ``height_scan_xy``: (nx, ny, 2) read-only array, or None without a height scan; ``height_scan_xy[i, j]``
    is the (x forward, y left) offset in m of scan point (i, j) from the trunk origin projected vertically,
    in the yaw-aligned trunk frame: the world position of the point is
    ``trunk_xy + Rz(trunk_yaw) @ height_scan_xy[i, j]`` at the instant the scan was taken. Axis 0 of
    ``obs.height_scan`` runs along the heading, axis 1 to the left.
    ``height_scan_rate_hz``: scans per second (None: every control tick); ``height_scan_latency_s``: delay
    from a scan to the controller seeing it, s. ``foot_force``: ``"normal"`` (``obs.foot_force`` is (F,),
    N along the contact normal), ``"3d"`` ((F, 3), N, world axes) or None. ``joint_torque``: whether
    ``obs.joint_torque`` ((J,), N m, the torque applied after limits and motor faults) is given.
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
