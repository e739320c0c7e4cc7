"""The sensors a sensor fault can act on, and the observation array each one is."""

from __future__ import annotations

from typing import Literal

SENSORS = ("imu_orientation", "imu_gyro", "imu_accel", "joint_pos", "joint_vel")
Sensor = Literal["imu_orientation", "imu_gyro", "imu_accel", "joint_pos", "joint_vel"]

#: Sensor name -> attribute of the controller's `Observation`.
OBS_FIELDS = {"imu_gyro": "imu_gyro", "imu_accel": "imu_accel", "joint_pos": "joint_pos",
              "joint_vel": "joint_vel", "imu_orientation": "imu_quat"}
