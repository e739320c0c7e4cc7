"""Contacts of one physics instant: which feet touch the ground, whether the robot fell, foot forces.

Built once per episode from the world's geom ids. Every geom falls in a small
class (terrain or not, which foot if any, fall geom or not), and a class-by-class
table says what a contact between two classes means, so classifying costs one list
lookup per contact and no numpy call per contact; a sequence of geom pairs seen
before (a stance keeps its contacts) is not classified again. Only foot-ground contacts
(usually two to four) get any further work, and only when there are some.

The ground reaction force on a foot is MuJoCo's own contact force
(``mj_contactForce``, contact frame, acting on geom2 with the normal from geom1
to geom2) turned to world axes with the contact frame's rows; summed per foot
in contact order. The rotation is written out in floating-point operations in
the order a 3x3 matrix-vector product does them, so the values are the same to
the last bit as a ``frame.T @ f`` per contact.
"""

from __future__ import annotations

import mujoco
import numpy as np

#: Contact distance below which a foot counts as touching, m.
CONTACT_DIST_M = 0.002
#: Classified geom-pair sequences kept per table (cleared when full; rough ground makes many).
MAX_PLANS = 4096


class ContactTable:
    """Per-world classification of contact pairs and per-tick foot contact and force scan.

    ``classify`` runs after ``mj_step1`` (contacts of this instant), ``forces`` after
    ``mj_step2`` of the same instant (its constraint solve). ``is_ground[g]``,
    ``foot_of[g]`` (foot index or -1) and ``is_fall[g]`` describe geom ``g``.
    """

    def __init__(self, n_geom: int, terrain_geom_ids, foot_geom_ids, fall_geom_ids) -> None:
        is_ground = np.zeros(n_geom, dtype=bool)
        is_ground[np.asarray(terrain_geom_ids, dtype=int)] = True
        is_fall = np.zeros(n_geom, dtype=bool)
        is_fall[np.asarray(fall_geom_ids, dtype=int)] = True
        foot_of = np.full(n_geom, -1, dtype=int)
        foot_of[np.asarray(foot_geom_ids, dtype=int)] = np.arange(len(foot_geom_ids))
        kinds: dict[tuple[bool, int, bool], int] = {}
        self.geom_class = [kinds.setdefault((bool(is_ground[g]), int(foot_of[g]), bool(is_fall[g])), len(kinds))
                           for g in range(n_geom)]
        by_class = list(kinds)
        # table[c1][c2]: None when the pair means nothing to the bench, else
        # (foot touching the ground or -1, fall contact, force sign, foot the force goes to)
        self.table: list[list[tuple | None]] = []
        for g1, f1, fall1 in by_class:
            row = []
            for g2, f2, fall2 in by_class:
                other_foot, other_fall = (f2, fall2) if g1 else (f1, fall1)
                ground = g1 or g2
                foot = other_foot if ground and other_foot >= 0 else -1
                fall = ground and other_fall
                sign, force_foot = (1.0, f2) if f2 >= 0 else (-1.0, f1)
                row.append((foot, fall, sign, force_foot) if foot >= 0 or fall else None)
            self.table.append(row)
        self.is_ground, self.is_fall = is_ground, is_fall
        self._found: list[tuple[int, float, int]] = []   # (contact, sign, foot) of this instant's foot contacts
        self._plans: dict[bytes, tuple[list, list, list]] = {}   # geom pairs' bytes -> _plan of them
        self._frames: list[list[float]] = []             # this instant's contact frames, when there are foot contacts
        self._cf = np.zeros(6)
        n_feet = len(foot_geom_ids)
        self._zeros = [0.0] * (3 * n_feet)
        self._acc = [0.0] * (3 * n_feet)

    def classify(self, d: mujoco.MjData, foot_contact: np.ndarray) -> bool:
        """Mark feet touching the ground in ``foot_contact`` (cleared by the caller); True on a fall contact."""
        if not d.ncon:
            self._found = []
            return False
        con = d.contact
        geom = con.geom
        # The same sequence of geom pairs recurs tick after tick (a stance holds its contacts), so its
        # classification is kept by the pairs' bytes; only the distances are looked at every tick.
        key = geom.tobytes()
        plan = self._plans.get(key)
        if plan is None:
            plan = self._plan(geom.tolist())
            if len(self._plans) >= MAX_PLANS:
                self._plans.clear()
            self._plans[key] = plan
        feet, falls, found = plan
        self._found = found
        if not found and not falls:
            return False
        dist = con.dist.tolist()
        fell = False
        for i in falls:
            if dist[i] < 0:
                fell = True
        for i, foot in feet:
            if dist[i] < CONTACT_DIST_M:
                foot_contact[foot] = True
        if found:   # the frames come from collision, which mj_step2 does not redo: read them once, here
            self._frames = con.frame.tolist()
        return fell

    def _plan(self, pairs: list[list[int]]) -> tuple[list, list, list]:
        """For one sequence of contact geom pairs: (contact, foot) of foot-ground contacts, contacts that are a
        fall if they penetrate, and (contact, sign, foot) of the foot-ground contacts for the force scan."""
        cls, table = self.geom_class, self.table
        feet, falls, found = [], [], []
        for i, (g1, g2) in enumerate(pairs):
            hit = table[cls[g1]][cls[g2]]
            if hit is None:
                continue
            foot, fall, sign, force_foot = hit
            if fall:
                falls.append(i)
            if foot >= 0:
                feet.append((i, foot))
                found.append((i, sign, force_foot))
        return feet, falls, found

    def fall_parts(self, m: mujoco.MjModel, d: mujoco.MjData) -> str:
        """Which part of the robot touched what, for the fall reason (called once, when the robot fell)."""
        for i in range(d.ncon):
            g1, g2 = (int(g) for g in d.contact.geom[i])
            if d.contact.dist[i] >= 0:
                continue
            for ground, part in ((g1, g2), (g2, g1)):
                if self.is_ground[ground] and self.is_fall[part]:
                    body = mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_BODY, int(m.geom_bodyid[part])) or "body"
                    pname = mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_GEOM, part) or f"geom {part}"
                    gname = mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_GEOM, ground) or f"geom {ground}"
                    return f"the {body} (geom {pname}) touched the ground (geom {gname})"
        return "a fall geom touched the ground"

    def forces(self, m: mujoco.MjModel, d: mujoco.MjData, out: np.ndarray) -> None:
        """Write each foot's summed contact force (world axes) into ``out`` ((F, 3) or flat (3F,), zeros), if any
        foot touches. Reads the contact frames ``classify`` took at this instant."""
        found = self._found
        if not found:
            return
        frames = self._frames
        cf = self._cf
        acc = self._acc
        acc[:] = self._zeros
        for i, sign, foot in found:
            mujoco.mj_contactForce(m, d, i, cf)
            c0, c1, c2, _, _, _ = cf.tolist()
            if sign < 0.0:   # -(a b + c d + e f) == (a (-b) + c (-d) + e (-f)) exactly: rounding is symmetric
                c0, c1, c2 = -c0, -c1, -c2
            f0, f1, f2, f3, f4, f5, f6, f7, f8 = frames[i]
            j = 3 * foot
            # frame.T @ cf[:3], added to a zeroed row, in a matrix-vector product's own order
            acc[j] += f0 * c0 + f3 * c1 + f6 * c2
            acc[j + 1] += f1 * c0 + f4 * c1 + f7 * c2
            acc[j + 2] += f2 * c0 + f5 * c1 + f8 * c2
        if out.ndim == 1:   # a flat (3F,) row: no reshape view to make
            out[:] = acc
        else:
            out.reshape(-1)[:] = acc

    def normal_forces(self, m: mujoco.MjModel, d: mujoco.MjData, out: np.ndarray) -> None:
        """Each foot's summed normal contact force, N, into ``out`` (F,), over the contacts ``classify`` found.

        The normal component of ``mj_contactForce`` (contact frame, first entry) pushes the two geoms apart,
        so it is the same for the foot whichever of the two geoms it is.
        """
        out[:] = 0.0
        cf = self._cf
        for i, _sign, foot in self._found:
            mujoco.mj_contactForce(m, d, i, cf)
            out[foot] += cf[0]
