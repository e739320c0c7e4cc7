"""User-facing input errors.

A `ScenarioError` is a value for the user, not a crash: it names the file, the
1-based line and column, the dotted field and what went wrong, and usually a
hint saying what would be accepted. `ScenarioErrors` carries every problem found
in a run so that a user fixes them all in one pass.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator


class ScenarioError(Exception):
    """One problem in a scenario (or robot manifest) file.

    `line` and `col` are 1-based. `field` is the dotted path of the offending
    value (`payloads.0.mass`), or "" when the problem is not about one field
    (a YAML syntax error, an unreadable file); `__str__` then leaves it out.
    """

    def __init__(
        self,
        path: str,
        line: int,
        col: int,
        field: str,
        message: str,
        hint: str | None = None,
    ) -> None:
        super().__init__(path, line, col, field, message, hint)
        self.path = str(path)
        self.line = int(line)
        self.col = int(col)
        self.field = field
        self.message = message
        self.hint = hint or None

    def __str__(self) -> str:
        where = f"{self.path}:{self.line}:{self.col}: "
        text = f"{where}{self.field}: {self.message}" if self.field else f"{where}{self.message}"
        if self.hint:
            text += f" ({self.hint})"
        return text

    def __repr__(self) -> str:
        return f"ScenarioError({str(self)!r})"

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, ScenarioError):
            return NotImplemented
        return self.args == other.args

    def __hash__(self) -> int:
        return hash(self.args)

    def sort_key(self) -> tuple[str, int, int, str]:
        return (self.path, self.line, self.col, self.field)


class ScenarioErrors(Exception):
    """Every problem found; `str()` is one `ScenarioError` per line."""

    def __init__(self, errors: Iterable[ScenarioError | ScenarioErrors]) -> None:
        flat: list[ScenarioError] = []
        for e in errors:
            if isinstance(e, ScenarioErrors):
                flat.extend(e.errors)
            else:
                flat.append(e)
        seen: set[ScenarioError] = set()
        unique = []
        for e in flat:
            if e not in seen:
                seen.add(e)
                unique.append(e)
        super().__init__(unique)
        self.errors: list[ScenarioError] = unique

    def __str__(self) -> str:
        return "\n".join(str(e) for e in self.errors)

    def __iter__(self) -> Iterator[ScenarioError]:
        return iter(self.errors)

    def __len__(self) -> int:
        return len(self.errors)
