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

The episode loop does not compute those forces tick by tick: after each control tick's
``mj_step2`` it only logs the raw records (the contact records up to the last foot contact,
bytes as MuJoCo has them, and the constraint forces ``efc_force``) into chunked buffers
(:meth:`ContactTable.log`), and when they are full (``LOG_TICKS`` ticks of four foot contacts), and at the
end, :meth:`ContactTable.flush`
rebuilds the per-foot forces of those ticks at once, vectorised, with the same floating-point
operations in the same order as ``mj_contactForce`` (its pyramid decoding, or the copy of an
elliptic cone's forces) followed by the rotation and the per-foot sum: bit for bit the values of
the per-tick path (:meth:`ContactTable.forces`, kept for the sensors, as the fallback, and as the
tests' reference). The log needs the raw contact view of :mod:`bench.sim.rawmem`; where it does
not check, the loop calls :meth:`ContactTable.forces` every tick as before.
"""

from __future__ import annotations

import mujoco
import numpy as np

from bench.sim.rawmem import ContactView

#: Contact distance below which a foot counts as touching, m.
CONTACT_DIST_M = 0.002
#: Classified geom-pair sequences kept per table (cleared when full; rough ground makes many).
MAX_PLANS = 4096
#: Ticks of contact records kept before :meth:`ContactTable.flush` turns them into forces.
LOG_TICKS = 4096


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
        self._plans: dict[bytes, tuple] = {}   # geom pairs' bytes -> _plan of them
        self._cf = np.zeros(6)
        n_feet = len(foot_geom_ids)
        self.n_feet = n_feet
        self._zeros = [0.0] * (3 * n_feet)
        self._acc = [0.0] * (3 * n_feet)
        self.view: ContactView | None = None   # raw contact records (bind_raw), else the bindings
        self._raw_tried = False
        self.logging = False   # True once start_log's log runs (needs the raw view)
        self._log_key = (0, 0)   # (plan id, bytes of contact records to log) of this instant
        # The force log (start_log): per plan id its found contacts, flat; per logged tick one entry.
        self._log_out: np.ndarray | None = None
        self._plan_found: list[list[tuple[int, float, int]]] = []

    # --- raw contact records -------------------------------------------------------------------
    def bind_raw(self, m: mujoco.MjModel, d: mujoco.MjData) -> None:
        """Read contacts through a raw view of MuJoCo's contact array (checked once, see bench.sim.rawmem).

        The layout can only be seen with a contact present: with none now, the first ``classify``
        that has one tries again (once). Without a view that checks, the bindings are used.
        """
        self._m, self._d = m, d
        if d.ncon > 0:
            self._raw_tried = True
            self.view = ContactView.build(m, d)
            if self.view is not None:
                self._geom, self._dist = self.view.geom, self.view.dist
            if self.view is not None and self._log_out is not None and not self.logging:
                self._begin_log()

    def classify(self, d: mujoco.MjData, foot_contact: np.ndarray) -> bool:
        """Mark feet touching the ground in ``foot_contact`` (cleared by the caller); True on a fall contact."""
        ncon = d.ncon
        if not ncon:
            self._found = []
            return False
        view = self.view
        if view is None and not self._raw_tried and hasattr(self, "_d") and d is self._d:
            self.bind_raw(self._m, d)
            view = self.view
        if view is not None and d is self._d:
            geom = self._geom[:ncon]
            dist_src = self._dist
        else:
            con = d.contact
            geom = con.geom
            dist_src = con.dist
        # The same sequence of geom pairs recurs tick after tick (a stance holds its contacts), so its
        # classification is kept by the pairs' bytes; only the distances are looked at every tick.
        key = geom.tobytes()
        plan = self._plans.get(key)
        if plan is None:
            if len(self._plans) >= MAX_PLANS:
                self.flush()   # the log refers to plans by id: turn it into forces before they go
                self._plans.clear()
                self._plan_found.clear()
            plan = self._plan(geom.tolist())
            self._plans[key] = plan
        feet, falls, found, self._log_key = plan
        self._found = found
        if not found and not falls:
            return False
        dist = dist_src[:ncon].tolist()
        fell = False
        for i in falls:
            if dist[i] < 0:
                fell = True
        for i, foot in feet:
            if dist[i] < CONTACT_DIST_M:
                foot_contact[foot] = True
        return fell

    def _plan(self, pairs: list[list[int]]) -> tuple:
        """For one sequence of contact geom pairs: (contact, foot) of foot-ground contacts, contacts that are a
        fall if they penetrate, (contact, sign, foot) of the foot-ground contacts for the forces, the plan's id
        for the force log and the number of contact records the log keeps (up to the last foot contact)."""
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
        pid = len(self._plan_found)
        self._plan_found.append(found)
        isz = self.view.itemsize if self.view is not None else 0
        return feet, falls, found, (pid, (found[-1][0] + 1) * isz if found else 0)

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
        foot touches: the per-tick path (after ``mj_step2`` of the instant ``classify`` saw)."""
        found = self._found
        if not found:
            return
        frames = d.contact.frame.tolist()   # from collision, which mj_step2 does not redo: classify's instant
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

    # --- the force log -------------------------------------------------------------------------
    def start_log(self, m: mujoco.MjModel, out: np.ndarray) -> None:
        """Log contact records per tick (``log``) instead of computing forces; ``flush`` writes tick ``k``'s forces
        into ``out[k]`` (flat (3F,) rows, left as they are where no foot touches). Logging runs once the raw
        contact view is bound (now, or at the first contact); until then ``logging`` is False and the caller
        calls ``forces`` itself."""
        self._log_out = out
        self._pyramidal = int(m.opt.cone) == int(mujoco.mjtCone.mjCONE_PYRAMIDAL)
        if self.view is not None:
            self._begin_log()

    def _begin_log(self) -> None:
        self._entries: list[tuple[int, int, int, int]] = []   # (tick, plan id, first record byte, first efc row)
        self._cbuf = np.zeros(LOG_TICKS * 4 * self.view.itemsize, dtype=np.uint8)   # ~LOG_TICKS ticks of 4 feet
        self._ebuf = np.zeros(LOG_TICKS * 16)
        self._craw = self.view.bytes
        self._cpos = 0   # bytes
        self._epos = 0
        self._plans.clear()         # plans made before the view was bound know no record sizes
        self._plan_found.clear()
        self.logging = True

    def log(self, d: mujoco.MjData, k: int) -> None:
        """After ``mj_step2`` of tick ``k``: keep the raw records its forces are made of (nothing without foot
        contacts): the contact records up to the last foot contact and ``efc_force``. ``classify`` saw this
        instant; only while ``logging``."""
        if not self._found:
            return
        pid, nb = self._log_key
        ef = d.efc_force
        p, q = self._cpos, self._epos
        p2, q2 = p + nb, q + ef.shape[0]
        if p2 > self._cbuf.shape[0] or q2 > self._ebuf.shape[0]:   # full: forces of the logged ticks now
            self.flush()
            p, q = 0, 0
            p2, q2 = nb, ef.shape[0]
            if p2 > self._cbuf.shape[0]:
                self._cbuf = np.zeros(2 * p2, dtype=np.uint8)
            if q2 > self._ebuf.shape[0]:
                self._ebuf = np.zeros(2 * q2)
        self._cbuf[p:p2] = self._craw[:nb]
        self._ebuf[q:q2] = ef
        self._entries.append((k, pid, p, q))
        self._cpos, self._epos = p2, q2

    def flush(self) -> None:
        """Turn the logged ticks into per-foot forces (into the rows ``start_log`` was given) and empty the log."""
        if not self.logging or not self._entries:
            return
        isz = self.view.itemsize
        ent = np.array(self._entries, dtype=np.int64)
        ent[:, 2] //= isz     # byte offsets to record numbers
        self._entries = []
        self._cpos = self._epos = 0
        records = self._cbuf[:len(self._cbuf) - len(self._cbuf) % isz].view(self.view.dtype)
        self._log_out[ent[:, 0]] = rebuild_forces(ent, self._plan_found, records, self._ebuf, self.n_feet,
                                                  self._pyramidal)

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


def rebuild_forces(entries: np.ndarray, plan_found, records: np.ndarray, efc: np.ndarray, n_feet: int,
                   pyramidal: bool) -> np.ndarray:
    """Per-foot forces (E, 3F) of logged ticks, vectorised, bit for bit those of :meth:`ContactTable.forces`.

    ``entries``: (E, 4) rows (tick, plan id, first record, first efc row); ``plan_found[pid]``: the plan's
    (contact, sign, foot); ``records``: contact records (structured, :class:`~bench.sim.rawmem.ContactView`'s
    dtype); ``efc``: the logged ``efc_force`` values. Each product and sum is the one ``mj_contactForce``
    and the per-tick rotation do, in the same order (elementwise numpy operations round as the scalar ones),
    and a foot's contacts are added to its zeroed row one after the other, in contact order.
    """
    E = len(entries)
    pid = entries[:, 1]
    lens = np.array([len(f) for f in plan_found], dtype=np.int64)
    flat_i, flat_sign, flat_foot, flat_rank = [], [], [], []
    for found in plan_found:
        before: dict[int, int] = {}
        for i, sign, foot in found:
            flat_i.append(i)
            flat_sign.append(sign)
            flat_foot.append(foot)
            flat_rank.append(before.get(foot, 0))   # earlier contacts of the same foot in this plan
            before[foot] = before.get(foot, 0) + 1
    plan_off = np.cumsum(lens) - lens
    n_rows = lens[pid]
    N = int(n_rows.sum())
    acc = np.zeros((E, 3 * n_feet))
    if N == 0:
        return acc
    row = np.repeat(np.arange(E), n_rows)                       # entry of each found contact
    first = np.cumsum(n_rows) - n_rows
    flat = np.arange(N) - (first - plan_off[pid])[row]          # index into the plans' flat lists
    ci = np.array(flat_i, dtype=np.int64)[flat]
    sign = np.array(flat_sign)[flat]
    j = 3 * np.array(flat_foot, dtype=np.int64)[flat]
    rank = np.array(flat_rank, dtype=np.int64)[flat]
    at = entries[row, 2] + ci
    frame = records["frame"][at]
    mu = records["friction"][at]
    dim = records["dim"][at].astype(np.int64)
    adr = records["efc_address"][at].astype(np.int64)
    base = entries[row, 3] + adr
    c0, c1, c2 = np.zeros(N), np.zeros(N), np.zeros(N)      # mj_contactForce zeroes its result first
    ok = adr >= 0
    for dv in np.unique(dim[ok]).tolist():
        sel = np.flatnonzero(ok & (dim == dv))
        b = base[sel]
        if pyramidal and dv > 1:   # mju_decodePyramid: normal = 0 + each facet in turn; tangent = (p+ - p-) mu
            s = np.zeros(len(sel))
            for q in range(2 * (dv - 1)):
                s += efc[b + q]
            c0[sel] = s
            c1[sel] = (efc[b] - efc[b + 1]) * mu[sel, 0]
            if dv > 2:
                c2[sel] = (efc[b + 2] - efc[b + 3]) * mu[sel, 1]
        else:                      # frictionless, or an elliptic cone: the forces as they are
            c0[sel] = efc[b]
            if dv > 1:
                c1[sel] = efc[b + 1]
            if dv > 2:
                c2[sel] = efc[b + 2]
    neg = sign < 0.0
    c0, c1, c2 = np.where(neg, -c0, c0), np.where(neg, -c1, c1), np.where(neg, -c2, c2)
    v0 = frame[:, 0] * c0 + frame[:, 3] * c1 + frame[:, 6] * c2
    v1 = frame[:, 1] * c0 + frame[:, 4] * c1 + frame[:, 7] * c2
    v2 = frame[:, 2] * c0 + frame[:, 5] * c1 + frame[:, 8] * c2
    # acc[row, j] += v adds once per distinct (row, j) in one call: a foot's second contact of a tick goes
    # in a second pass (rank 1), and so on, so each foot's row is summed in contact order.
    for r in range(int(rank.max()) + 1):
        sel = slice(None) if r == 0 and not rank.any() else np.flatnonzero(rank == r)
        rr, jj = row[sel], j[sel]
        acc[rr, jj] += v0[sel]
        acc[rr, jj + 1] += v1[sel]
        acc[rr, jj + 2] += v2[sel]
    return acc
