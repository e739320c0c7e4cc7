"""Controller registry: resolve a controller name to a factory.

A name resolves, in this order, to: a controller registered in this process
with :func:`register`; an entry point in the group ``bench.controllers`` (the
bench's own controllers are registered this way, exactly as a user's would be);
a ``package.module:attribute`` reference; ``exec:program args``, an external program
(:mod:`bench.controllers.external`); or ``sealed:NAME``, any of the Python ones run in a
child process (:mod:`bench.controllers.sealed`). The factory is called with no
arguments, or with the ``--controller-param`` keywords (:mod:`bench.controllers.params`),
and must return an object following :class:`bench.controllers.base.Controller`.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass
from importlib.metadata import entry_points
from typing import Callable

ENTRY_POINT_GROUP = "bench.controllers"

_registered: dict[str, tuple[Callable[[], object], str]] = {}


class ControllerNotFound(LookupError):
    """The controller name resolves to nothing; the message lists what exists."""


@dataclass(frozen=True)
class ControllerInfo:
    name: str
    description: str
    origin: str


def register(name: str, factory: Callable[[], object], description: str = "") -> None:
    """Register ``factory`` under ``name`` for this process (tests and notebooks)."""
    _registered[name] = (factory, description)


def _entry_points() -> dict[str, object]:
    return {ep.name: ep for ep in entry_points(group=ENTRY_POINT_GROUP)}


def _describe(obj: object) -> str:
    doc = (getattr(obj, "__doc__", None) or "").strip()
    return doc.splitlines()[0] if doc else ""


def available() -> list[ControllerInfo]:
    """Every controller that a name resolves to, sorted by name."""
    infos = {}
    for name, ep in _entry_points().items():
        try:
            desc = _describe(ep.load())
        except Exception as exc:  # a broken plugin must not break listing
            desc = f"(cannot be loaded: {exc})"
        infos[name] = ControllerInfo(name, desc, f"entry point {ep.value}")
    for name, (factory, desc) in _registered.items():
        infos[name] = ControllerInfo(name, desc or _describe(factory), "registered")
    return [infos[k] for k in sorted(infos)]


def resolve(name: str) -> Callable[[], object]:
    """Return the factory for ``name``; raise :class:`ControllerNotFound` with a hint."""
    if name in _registered:
        return _registered[name][0]
    eps = _entry_points()
    if name in eps:
        try:
            return eps[name].load()
        except Exception as exc:
            raise ControllerNotFound(
                f"controller {name!r}: its entry point {eps[name].value} cannot be loaded: {exc}"
            ) from None
    if name.startswith("exec:"):   # an external program speaking the QBX line protocol
        from bench.controllers.external import from_spec

        return from_spec(name[len("exec:"):])
    if name.startswith("sealed:"):   # a Python controller in a child process, out of the world's reach
        from bench.controllers.sealed import from_spec as sealed_from_spec

        return sealed_from_spec(name[len("sealed:"):])
    if ":" in name:
        module_name, _, attr = name.partition(":")
        try:
            module = importlib.import_module(module_name)
        except Exception as exc:
            raise ControllerNotFound(f"controller {name!r}: cannot import module {module_name!r}: {exc}") from None
        obj = module
        for part in attr.split("."):
            obj = getattr(obj, part, None)
            if obj is None:
                raise ControllerNotFound(f"controller {name!r}: module {module_name!r} has no attribute {attr!r}")
        return obj
    known = ", ".join(sorted(set(eps) | set(_registered))) or "none"
    raise ControllerNotFound(
        f"unknown controller {name!r}; known: {known}; or give package.module:attribute"
    )


def make(name_or_object: object, params: dict | None = None) -> tuple[str, object]:
    """Resolve and instantiate. Accepts a name, a factory, or a controller object.

    ``params`` (``--controller-param``) are keyword arguments for the factory; a key the factory does not
    take raises :class:`~bench.controllers.params.ControllerParamError` before anything is made.
    """
    if isinstance(name_or_object, str):
        factory = resolve(name_or_object)
        return name_or_object, _call_factory(factory, params, name_or_object)
    if hasattr(name_or_object, "step") and hasattr(name_or_object, "reset"):
        obj = name_or_object
        if params:
            from bench.controllers.params import ControllerParamError

            raise ControllerParamError("controller parameters need a controller name or a factory, "
                                       f"not an already made controller ({type(obj).__name__})")
        return getattr(obj, "name", type(obj).__name__), obj
    if callable(name_or_object):
        obj = _call_factory(name_or_object, params, getattr(name_or_object, "__name__", "custom"))
        return getattr(obj, "name", type(obj).__name__), obj
    raise ControllerNotFound(f"cannot make a controller from {name_or_object!r}")


def check_params(name: str, params: dict | None) -> None:
    """Raise ``ControllerParamError`` unless the controller ``name`` accepts every key of ``params``.

    ``exec:`` programs take none (their arguments go in the spec); ``sealed:`` controllers are checked in
    their child process, which alone imports the controller's code.
    """
    if not params:
        return
    from bench.controllers.params import ControllerParamError, check_params as _check

    if name.startswith("exec:"):
        raise ControllerParamError(f"--controller-param: {name!r} is an external program; it takes no "
                                   "controller parameters (give its arguments in the exec: spec)")
    if name.startswith("sealed:"):
        return
    _check(resolve(name), params, name)


def _call_factory(factory, params: dict | None, name: str):
    if not params:
        return factory()
    if getattr(factory, "sealed_spec", None) is not None:
        return factory(params=params)   # checked and applied in the child process
    if name.startswith("exec:"):
        check_params(name, params)
    from bench.controllers.params import check_params as _check

    _check(factory, params, name)
    return factory(**params)
