"""Removing an element from an ``MjSpec`` on every MuJoCo the bench supports (3.3 on).

``MjSpec.delete`` came in a later release; MuJoCo 3.3 has ``MjSpec.detach_body`` for a body
and ``delete()`` on the other elements.
"""

import mujoco


def spec_remove(spec: mujoco.MjSpec, element) -> None:
    if hasattr(spec, "delete"):
        spec.delete(element)
    elif isinstance(element, mujoco.MjsBody):
        spec.detach_body(element)
    else:
        element.delete()
