"""The one error type the engine raises for input a user can fix."""
from __future__ import annotations


class InputProblem(ValueError):
    """Bad input, with a message that says what is wrong and what to do.

    Every public entry point of the engine raises this type (and no other)
    for problems in the user's data or request. ``column`` and ``row`` name
    the place when one is known; ``code`` is a short machine-readable tag.
    """

    def __init__(self, message: str, *, code: str = "bad_input",
                 column: str | None = None, row: int | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.code = code
        self.column = column
        self.row = row

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.message
