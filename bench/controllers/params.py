"""Controller parameters given on the command line: ``--controller-param key=value``.

Owns three things: parsing ``key=value`` (the value is read as a YAML scalar or
flow list, so ``kp=40``, ``solver=daqp``, ``kp_pos=[40, 40, 100]``,
``leg_bias_ff=false`` and ``l1_u_max=null`` give an int, a string, a list, a bool
and None); the names a controller factory accepts as keywords (a class's
``__init__``, following ``**kwargs`` up its base classes); and checking given
keys against those names, with a did-you-mean for a near miss. The parameters
reach the factory as keyword arguments: ``factory(**params)``.
"""

from __future__ import annotations

import inspect
import json

from bench.suggest import did_you_mean


class ControllerParamError(ValueError):
    """A ``--controller-param`` that cannot be used; the message says which and why."""


def parse_params(items, *, option: str = "--controller-param") -> dict:
    """``["kp=40", "solver=daqp"]`` -> ``{"kp": 40, "solver": "daqp"}``; a later key replaces an earlier one."""
    import yaml

    out: dict = {}
    for raw in items or ():
        text = str(raw)
        key, sep, value = text.partition("=")
        key = key.strip()
        if not sep or not key.isidentifier():
            raise ControllerParamError(f"{option} {text!r}: expected KEY=VALUE with KEY a Python identifier "
                                       "(e.g. kp_pos=[40, 40, 100])")
        try:
            parsed = yaml.safe_load(value) if value.strip() else ""
        except yaml.YAMLError as exc:
            first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise ControllerParamError(f"{option} {text!r}: the value is not a YAML scalar or list: {first}") from None
        if isinstance(parsed, dict):
            raise ControllerParamError(f"{option} {text!r}: give a scalar or a list, not a mapping")
        out[key] = parsed
    return out


def canonical(params: dict | None) -> str:
    """The parameters as sorted, compact JSON (for fingerprints, records and the sealed child)."""
    return json.dumps(params or {}, sort_keys=True, separators=(",", ":"), default=str)


def accepted_names(factory) -> tuple[frozenset[str], bool]:
    """``(names, open_ended)``: the keyword names ``factory`` takes, and whether it takes any (``**kwargs``
    that nothing further up consumes, or a signature that cannot be read)."""
    names: set[str] = set()
    usable = (inspect.Parameter.KEYWORD_ONLY, inspect.Parameter.POSITIONAL_OR_KEYWORD)
    if isinstance(factory, type):
        inits = [c.__dict__["__init__"] for c in factory.__mro__ if "__init__" in c.__dict__ and c is not object]
    else:
        inits = [factory]
    for fn in inits:
        try:
            params = inspect.signature(fn).parameters
        except (TypeError, ValueError):
            return frozenset(names), True
        names.update(n for n, p in params.items() if p.kind in usable and n != "self")
        if not any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values()):
            return frozenset(names), False
    # every __init__ passed **kwargs on, or a plain function with **kwargs: anything goes
    return frozenset(names), True


def check_params(factory, params: dict, controller: str) -> None:
    """Raise :class:`ControllerParamError` naming every key ``factory`` does not accept (did-you-mean each)."""
    if not params:
        return
    names, open_ended = accepted_names(factory)
    if open_ended:
        return
    unknown = [k for k in params if k not in names]
    if not unknown:
        return
    lines = []
    for k in unknown:
        hint = did_you_mean(k, names)
        lines.append(f"--controller-param {k}: controller {controller!r} has no parameter {k!r}"
                     + (f"; {hint}" if hint else ""))
    lines.append(f"its parameters: {', '.join(sorted(names)) or 'none'}")
    raise ControllerParamError("\n".join(lines))
