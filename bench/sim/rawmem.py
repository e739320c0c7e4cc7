"""Raw numpy views on an MjData's memory, for the episode loop's per-tick copies.

MuJoCo's Python bindings make a new numpy array on every attribute access (``d.qpos``,
``d.contact.geom``...), about 0.1 us each, and a copy (``tolist``, ``tobytes``) on top. The tick
loop reads the same few arrays every tick, so it binds them once as raw views on MjData's own
memory instead:

- :class:`DataView`: one float64 array spanning the MjData arrays the loop reads (``qpos``,
  ``qvel``, ``sensordata``, ``xquat``...; MuJoCo keeps them in one buffer), so that a single fancy
  index copies what a trace row or an observation needs from several of them at once.
- :class:`ContactView`: the contact array (``d.contact``) as a numpy structured array over
  MuJoCo's ``mjContact`` records, with the field offsets taken from the bindings (so from whatever
  MuJoCo version is installed), not written down here.

This relies on MuJoCo's memory layout (arrays at fixed addresses for the life of the MjData,
contacts one array of fixed-size records). Each view is checked once against the bindings when it
is made: same addresses, same strides, same values, and a value written through the bindings
read back through the view; if any check fails ``build`` returns None and the loop uses the
bindings as before. The views keep the MjData alive; they never write to it.
"""

from __future__ import annotations

import ctypes

import numpy as np

#: A span larger than this is not taken as one view (the arrays would not be in one buffer).
MAX_SPAN_BYTES = 1 << 30


def address(a: np.ndarray) -> int:
    """The address of an array's first element."""
    return int(a.__array_interface__["data"][0])


def _view(ptr: int, nbytes: int) -> np.ndarray:
    """uint8 numpy view of ``nbytes`` at ``ptr`` (no copy; nothing is read until indexed)."""
    return np.frombuffer((ctypes.c_char * nbytes).from_address(ptr), dtype=np.uint8)


class DataView:
    """One float64 view spanning the named MjData arrays; ``index(name, idx)`` gives positions in it."""

    def __init__(self, d, flat: np.ndarray, offsets: dict[str, int], shapes: dict[str, tuple]):
        self._d = d              # keeps the memory alive
        self.flat = flat
        self.offsets = offsets
        self.shapes = shapes

    @classmethod
    def build(cls, d, names) -> "DataView | None":
        """The view, or None when the arrays cannot be read this way (then use the bindings)."""
        try:
            arrays = {n: getattr(d, n) for n in names}
            for a in arrays.values():
                if a.dtype != np.float64 or not a.flags.c_contiguous or a.size == 0:
                    return None
            lo = min(address(a) for a in arrays.values())
            hi = max(address(a) + a.nbytes for a in arrays.values())
            if hi - lo > MAX_SPAN_BYTES or any((address(a) - lo) % 8 for a in arrays.values()):
                return None
            flat = _view(lo, hi - lo).view(np.float64)
            offsets = {n: (address(a) - lo) // 8 for n, a in arrays.items()}
            shapes = {n: a.shape for n, a in arrays.items()}
            view = cls(d, flat, offsets, shapes)
            return view if view.check() else None
        except (AttributeError, TypeError, ValueError, OverflowError):
            return None

    def part(self, name: str) -> np.ndarray:
        """The named array as seen through the view (same shape)."""
        o = self.offsets[name]
        n = int(np.prod(self.shapes[name]))
        return self.flat[o:o + n].reshape(self.shapes[name])

    def check(self) -> bool:
        """Each part equals the binding's array and follows a write made through the binding."""
        d = self._d
        for name in self.offsets:
            a = getattr(d, name)
            p = self.part(name)
            if address(a) != address(p) or a.shape != p.shape or not np.array_equal(a, p, equal_nan=True):
                return False
            flat_a = a.reshape(-1)
            keep = float(flat_a[-1])
            probe = 1.2345678901234567e300 if keep != 1.2345678901234567e300 else -1.0
            flat_a[-1] = probe
            seen = float(p.reshape(-1)[-1])
            flat_a[-1] = keep
            if seen != probe:
                return False
        return True

    def index(self, name: str, idx=None) -> np.ndarray:
        """Positions in ``flat`` of ``name`` (flattened C order), or of ``name.reshape(-1)[idx]``."""
        n = int(np.prod(self.shapes[name]))
        pos = np.arange(n, dtype=np.intp) + self.offsets[name]
        return pos if idx is None else pos[np.asarray(idx, dtype=np.intp)]


#: The contact fields the loop reads (all present in MuJoCo 3.x and later).
CONTACT_FIELDS = ("dist", "frame", "friction", "dim", "geom", "efc_address")


class ContactView:
    """MuJoCo's contact array as a numpy structured array over its records (``records[:ncon]``).

    ``dist``, ``geom`` are field views over the whole arena-sized span (slice them to ``ncon``);
    ``dtype`` has the fields of :data:`CONTACT_FIELDS` at the offsets the bindings show.
    """

    def __init__(self, d, ptr: int, itemsize: int, dtype: np.dtype, nmax: int):
        self._d = d
        self.ptr = ptr
        self.itemsize = itemsize
        self.dtype = dtype
        self.bytes = _view(ptr, nmax * itemsize)
        self.records = self.bytes.view(dtype)
        self.dist = self.records["dist"]
        self.geom = self.records["geom"]

    @classmethod
    def build(cls, m, d) -> "ContactView | None":
        """The view; needs at least one contact in ``d`` (to see the layout); None if it does not check."""
        try:
            if d.ncon <= 0:
                return None
            con = d.contact
            fields = {f: getattr(con, f) for f in CONTACT_FIELDS}
            ptr = address(fields["dist"])
            itemsize = int(fields["dist"].strides[0])
            names, formats, offsets = [], [], []
            for f, a in fields.items():
                if a.shape[0] != d.ncon or (d.ncon > 1 and a.strides[0] != itemsize):
                    return None
                if a.ndim > 1 and a.strides[1] != a.dtype.itemsize:
                    return None
                off = address(a) - ptr
                if off < 0 or off + a.dtype.itemsize * int(np.prod(a.shape[1:])) > itemsize:
                    return None
                names.append(f)
                formats.append((a.dtype.str, a.shape[1:]) if a.ndim > 1 else a.dtype.str)
                offsets.append(off)
            dtype = np.dtype({"names": names, "formats": formats, "offsets": offsets, "itemsize": itemsize})
            narena = int(getattr(d, "narena", 0) or getattr(m, "narena", 0))
            nmax = max(narena // itemsize, int(d.ncon))
            view = cls(d, ptr, itemsize, dtype, nmax)
            return view if view.check() else None
        except (AttributeError, TypeError, ValueError, OverflowError):
            return None

    def check(self) -> bool:
        """The view's records equal the bindings' contact fields, at the same address."""
        d = self._d
        n = int(d.ncon)
        con = d.contact
        if address(con.dist) != self.ptr:
            return False
        rec = self.records[:n]
        return all(np.array_equal(rec[f], getattr(con, f)) for f in CONTACT_FIELDS)
