"""The project's error types, and the bounded rendering of values in their messages.

Every problem with a user's input is a :class:`ScenarioError` that names the file, the path of the
offending field and, where there is one, the value, so that the command line can print one clear
line and exit with code 2.

A value is rendered by :func:`short_repr`, which writes at most a bounded prefix and never
expands a structure beyond what it prints (a YAML alias bomb is a few shared lists whose full
text would take gigabytes); paths are rendered by :func:`printable`, on one line.
"""

from __future__ import annotations

_MISSING = object()

#: Characters of a value shown in a message; longer values end with "...".
VALUE_CHARS = 60
#: Characters of a field path shown in a message.
PATH_CHARS = 200
#: Nesting levels a rendered value shows (deeper ones read "...").
_DEPTH = 6


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
        file = printable(self.file, PATH_CHARS)
        where = f"{file}: {printable(self.path, PATH_CHARS)}: " if self.path else f"{file}: "
        text = where + printable(self.message, 4 * PATH_CHARS)
        if self.value is not _MISSING:
            text += f" (got {short_repr(self.value)})"
        return text


class FieldError(ValueError):
    """A problem found below the file level; the loader adds the file and the path prefix."""

    def __init__(self, path: str, message: str, value: object = _MISSING):
        self.path = path
        self.message = message
        self.value = value
        super().__init__(f"{printable(path, PATH_CHARS)}: {printable(message, 4 * PATH_CHARS)}")

    def to_scenario_error(self, file: str) -> ScenarioError:
        return ScenarioError(file, self.path, self.message, self.value)


class SolverError(RuntimeError):
    """A numerical solver returned an answer that fails its own re-check."""


# --- bounded rendering ---------------------------------------------------------------------------


class _Full(Exception):
    """Raised inside :func:`short_repr` once the text is long enough."""


def printable(text: object, limit: int = PATH_CHARS) -> str:
    """``text`` on one line: control characters (a newline, a tab, ...) written as escapes, cut
    to ``limit`` characters with "..." at the end."""
    text = str(text)
    if len(text) > limit:
        text = text[:limit] + "..."
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def whole_number_text(value: int) -> str:
    """An integer as text, or ``an integer of N digits`` when it has more than 30 digits (a
    huge integer's full text is useless in a message and, past 4300 digits, refused by Python)."""
    if -10**30 < value < 10**30:
        return repr(value)
    bits = abs(value).bit_length()
    if bits <= 14_000:
        return f"an integer of {len(str(abs(value)))} digits"
    return f"an integer of about {int(bits * 0.30103) + 1} digits"


def short_repr(value: object, limit: int = VALUE_CHARS) -> str:
    """``repr(value)`` cut to about ``limit`` characters, built piece by piece so that the work
    is bounded by ``limit`` whatever the size of ``value`` (shared or nested lists are never
    expanded beyond what is shown); integers of more than 30 digits read ``an integer of N
    digits``, objects of other types show their type's own bounded text."""
    parts: list[str] = []
    size = [0]

    def put(text: str) -> None:
        room = limit - size[0]
        if len(text) > room:
            parts.append(text[:max(room, 0)])
            raise _Full
        parts.append(text)
        size[0] += len(text)

    def walk(x: object, depth: int) -> None:
        if isinstance(x, bool) or x is None or isinstance(x, float):
            put(repr(x))
        elif isinstance(x, int):
            put(whole_number_text(x))
        elif isinstance(x, str):
            # (a text longer than the limit cannot fit: its cut repr overflows and stops here)
            put(repr(x) if len(x) <= limit else repr(x[: limit + 1])[:-1])
        elif isinstance(x, (list, tuple, dict)):
            if depth >= _DEPTH:
                put("...")
                return
            opening, closing = {list: "[]", tuple: "()", dict: "{}"}.get(type(x), "[]")
            put(opening)
            items = x.items() if isinstance(x, dict) else x
            for i, item in enumerate(items):
                if i:
                    put(", ")
                if isinstance(x, dict):
                    walk(item[0], depth + 1)
                    put(": ")
                    walk(item[1], depth + 1)
                else:
                    walk(item, depth + 1)
            put("," + closing if isinstance(x, tuple) and len(x) == 1 else closing)
        else:
            text = getattr(x, "short_text", None)
            put(text() if callable(text) else f"<{type(x).__name__}>")

    try:
        walk(value, 0)
    except _Full:
        return printable("".join(parts), limit) + "..."
    except RecursionError:  # (cannot happen below _DEPTH; kept as a last guard)
        return printable("".join(parts), limit) + "..."
    return printable("".join(parts), limit + 3)
