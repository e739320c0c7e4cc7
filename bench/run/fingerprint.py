"""PLACEHOLDER, to be replaced by the verdict fingerprint module (same names, same signature).

Hashes only the scenario's content hash and the controller spec; the real
module covers everything that decides a verdict (robot files, versions,
limits, what the controller spec resolves to).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field


@dataclass(frozen=True)
class Fingerprint:
    digest: str
    parts: dict[str, str] = field(default_factory=dict)


def verdict_fingerprint(scenario, controller_spec: str, limits) -> Fingerprint:
    parts = {"scenario": str(getattr(scenario, "content_hash", "") or ""), "controller": str(controller_spec)}
    h = hashlib.sha256()
    for k in sorted(parts):
        h.update(f"{k}={parts[k]}\n".encode())
    return Fingerprint(h.hexdigest(), parts)
