"""The project's error types.

Every problem with a user's input is a :class:`ScenarioError` that names the file, the path of the
offending field and, where there is one, the value, so that the command line can print one clear
line and exit with code 2.
"""

from __future__ import annotations

_MISSING = object()


class ScenarioError(ValueError):
    """A scenario (or an override of it) that cannot be accepted.

    Attributes
    ----------
    file : str
        The file the scenario came from (``"<string>"`` when it was given as text).
    path : str
        Dotted path of the offending field, e.g. ``places.front_talk.route``; empty for the
        document as a whole.
    message : str
        What is wrong, in words.
    """

    def __init__(self, file: str, path: str, message: str, value: object = _MISSING):
        self.file = file
        self.path = path
        self.message = message
        self.value = value
        super().__init__(self._format())

    def _format(self) -> str:
        where = f"{self.file}: {self.path}: " if self.path else f"{self.file}: "
        text = where + self.message
        if self.value is not _MISSING:
            text += f" (got {_short(self.value)})"
        return text


class FieldError(ValueError):
    """A problem found below the file level; the loader adds the file and the path prefix."""

    def __init__(self, path: str, message: str, value: object = _MISSING):
        self.path = path
        self.message = message
        self.value = value
        super().__init__(f"{path}: {message}")

    def to_scenario_error(self, file: str) -> ScenarioError:
        return ScenarioError(file, self.path, self.message, self.value)


class SolverError(RuntimeError):
    """A numerical solver returned an answer that fails its own re-check."""


def _short(value: object, limit: int = 60) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."
