"""The seed a controller gets in ``reset``: which keywords its ``reset`` takes, and the value.

``reset(robot, control_dt)`` is the call every controller answers. A controller with
randomness (exploration noise, a randomized policy, a particle filter) may declare
either or both optional keywords and then gets them:

- ``seed``: an ``int`` in ``[0, 2**32)``, derived from the episode's seed;
- ``rng``: ``numpy.random.default_rng(seed)``, a fresh generator for this episode.

A ``**kwargs`` catch-all gets both. The signature is inspected once per
episode (never per tick); a ``reset`` that declares neither keeps being called
with two arguments exactly as before. The controller seed is derived from the
episode seed (scenario ``seed:``, a trial's seed, or ``--seed``) through its own
``numpy.random.SeedSequence`` branch, so the same episode gives the same
controller seed on every run and executor, and it is independent of the
bench's own draws (sensor noise, random pushes) made from the same episode seed.
"""

from __future__ import annotations

import inspect

import numpy as np

#: Second entry of the SeedSequence the controller seed is drawn from (the bench's own draws use another).
CONTROLLER_SEED_BRANCH = 7919


def controller_seed(episode_seed: int) -> int:
    """The ``seed`` a controller gets for an episode run with ``episode_seed``."""
    seq = np.random.SeedSequence([int(episode_seed) % 2**32, CONTROLLER_SEED_BRANCH])
    return int(seq.generate_state(1, dtype=np.uint32)[0])


def reset_keywords(controller) -> frozenset[str]:
    """Which of ``seed`` and ``rng`` the controller's ``reset`` accepts (both for ``**kwargs``).

    A ``reset`` whose signature cannot be read (some C extensions) gets neither.
    """
    reset = getattr(controller, "reset", None)
    if reset is None:
        return frozenset()
    try:
        params = inspect.signature(reset).parameters
    except (TypeError, ValueError):
        return frozenset()
    if any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values()):
        return frozenset({"seed", "rng"})
    usable = (inspect.Parameter.KEYWORD_ONLY, inspect.Parameter.POSITIONAL_OR_KEYWORD)
    return frozenset(n for n in ("seed", "rng") if n in params and params[n].kind in usable)


def reset_kwargs(controller, episode_seed: int) -> dict:
    """The keyword arguments to add to ``controller.reset(robot, control_dt)`` for this episode."""
    wanted = reset_keywords(controller)
    if not wanted:
        return {}
    seed = controller_seed(episode_seed)
    out: dict = {}
    if "seed" in wanted:
        out["seed"] = seed
    if "rng" in wanted:
        out["rng"] = np.random.default_rng(seed)
    return out
