"""Did-you-mean: the known names closest to a misspelt one, word order forgiven.

``difflib`` alone compares characters in order, so ``max_height_error``
is closer to ``height_error_rms`` than to ``height_error_max`` by its
measure. Names in this project are words joined by ``_``, ``-``, ``.`` or
``/``; a candidate is scored on the best of three views of the same text:
as written, with its words sorted, and by how many words the two share. Every
front end (scenario fields, criteria, controller names, joints, files next to
a misspelt ``extends:``, robot manifests) asks here, so the suggestions agree.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterable

_WORD = re.compile(r"[A-Za-z]+|[0-9]+")
#: Scores under this are not worth suggesting (difflib's default cutoff is 0.6).
CUTOFF = 0.6


def _words(text: str) -> list[str]:
    return [w.lower() for w in _WORD.findall(text)]


def similarity(word: str, candidate: str) -> float:
    """0..1: how alike ``word`` and ``candidate`` are, forgiving case and word order."""
    a, b = word.lower(), candidate.lower()
    if a == b:
        return 1.0
    plain = difflib.SequenceMatcher(None, a, b).ratio()
    wa, wb = _words(a), _words(b)
    if not wa or not wb:
        return plain
    ordered = difflib.SequenceMatcher(None, " ".join(sorted(wa)), " ".join(sorted(wb))).ratio()
    # Shared words, each matched to its closest counterpart (so 'hieght' still counts for 'height').
    shared = sum(max(difflib.SequenceMatcher(None, x, y).ratio() for y in wb) for x in wa)
    overlap = 2.0 * shared / (len(wa) + len(wb))
    return max(plain, ordered, overlap * 0.98)   # a word-for-word match never beats the exact text


def closest(word: str, choices: Iterable[str], n: int = 1, cutoff: float = CUTOFF) -> list[str]:
    """Up to ``n`` of ``choices`` most like ``word``, best first, each scoring at least ``cutoff``."""
    scored = sorted(((similarity(word, c), c) for c in set(choices)), key=lambda sc: (-sc[0], sc[1]))
    return [c for s, c in scored if s >= cutoff][:n]


def did_you_mean(word: str, choices: Iterable[str], n: int = 1) -> str | None:
    """``"did you mean 'x'?"`` (or ``'x', 'y'``), or None when nothing is close."""
    near = closest(word, choices, n=n)
    if not near:
        return None
    return "did you mean " + ", ".join(repr(c) for c in near) + "?"
